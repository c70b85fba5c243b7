"""Target selection on the sky and in flux, volume limits and sample cuts.

* Footprint sampling: a galaxy is kept with probability equal to the footprint's
  completeness at its position (vetoes are already folded into the footprint).
* Flux limit: targets have m < m_lim, with m from :mod:`conecheck.cone.photometry`
  (the true distance and Doppler shift; volume limits from the analyst's relation at the
  observed redshift, :func:`~conecheck.cone.photometry.volume_limit_zmax`).
* Sample cuts: abs_mag < mag_max and z_min <= z_obs < z_max on the (corrected) cone, where
  abs_mag is the absolute magnitude the analyst infers from m and z_obs.
"""

from __future__ import annotations

import logging
import math
from typing import Any

import numpy as np
from astropy.table import Table
from numpy.typing import ArrayLike, NDArray

from ..cosmology import FULL_SKY_DEG2, Cosmology
from ..errors import InputError
from ..footprint.protocols import SkyFootprint
from .photometry import volume_limit_zmax
from .settings import SampleCut, SurveyShell

log = logging.getLogger(__name__)


class FullSky:
    """Stand-in footprint covering the whole sky with completeness 1."""

    nside = 0
    area_deg2 = FULL_SKY_DEG2

    def completeness(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]:
        """Completeness 1 everywhere."""
        return np.ones(np.shape(ra_deg), dtype=np.float64)

    def contains(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.bool_]:
        """True everywhere."""
        return np.ones(np.shape(ra_deg), dtype=bool)

    def sample(self, n: int, rng: np.random.Generator
               ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """``n`` directions uniform on the sphere: (RA, Dec) in degrees."""
        ra = rng.uniform(0.0, 360.0, n)
        dec = np.degrees(np.arcsin(rng.uniform(-1.0, 1.0, n)))
        return ra, dec


def footprint_keep(ra_deg: NDArray[np.float64], dec_deg: NDArray[np.float64],
                   footprint: SkyFootprint | None, rng: np.random.Generator
                   ) -> tuple[NDArray[np.bool_], NDArray[np.float64]]:
    """Keep each galaxy with probability equal to the completeness at its pixel.

    Returns the boolean keep mask and the completeness of every input galaxy.
    One uniform draw per galaxy is taken from ``rng`` even where completeness is 0 or 1,
    so the stream does not depend on the footprint's values.
    """
    comp = np.asarray(footprint.completeness(ra_deg, dec_deg), dtype=np.float64)
    u = rng.random(len(comp))
    return u < comp, comp


def select_sample(table: Table, mag_max: float | None = None, z_min: float | None = None,
                  z_max: float | None = None, label: str = "sample",
                  column: str = "z_obs") -> Table:
    """Rows with abs_mag < ``mag_max`` and z_min <= z_obs < z_max.

    Parameters
    ----------
    table : astropy Table
        A cone (columns ``z_obs`` and, for a magnitude cut, ``abs_mag``).
    mag_max : float or None
        Absolute-magnitude threshold (M − 5 log10 h); None: no magnitude cut.
    z_min, z_max : float or None
        Observed-redshift limits; None: open on that side.
    label : str
        Name of the cut, for error messages.

    Raises
    ------
    InputError
        A magnitude cut without an ``abs_mag`` column, or no galaxy left.
    """
    keep = np.ones(len(table), dtype=bool)
    if mag_max is not None:
        if "abs_mag" not in table.colnames:
            raise InputError(f"sample cut '{label}': mag_max = {mag_max} needs an absolute "
                             "magnitude column 'abs_mag' in the box catalogue")
        keep &= np.asarray(table["abs_mag"]) < mag_max
    z = np.asarray(table[column])
    if z_min is not None:
        keep &= z >= z_min
    if z_max is not None:
        keep &= z < z_max
    if not keep.any():
        raise InputError(f"sample cut '{label}': no galaxy left in the cone after mag_max = "
                         f"{mag_max}, z_min = {z_min}, z_max = {z_max} (cone of {len(table)} "
                         "galaxies); widen the cut or check the shell and footprint")
    return table[keep]


def select_cut(table: Table, cut: SampleCut, shell: SurveyShell | None = None,
               cosmology: Cosmology | None = None) -> Table:
    """Apply a :class:`SampleCut`; warn when it is not volume limited under the flux limit."""
    if (shell is not None and cosmology is not None and shell.m_lim is not None
            and cut.mag_max is not None):
        zlim = volume_limit_zmax(shell.m_lim, cut.mag_max, cosmology, shell)
        z_hi = cut.z_max if cut.z_max is not None else shell.z_max
        if z_hi > zlim + 1e-12:
            log.warning("sample cut '%s': z_max = %.4f exceeds the volume limit z = %.4f for "
                        "M < %.2f at m_lim = %.2f; the sample is not volume limited",
                        cut.label, z_hi, zlim, cut.mag_max, shell.m_lim)
    return select_sample(table, cut.mag_max, cut.z_min, cut.z_max, cut.label)


def check_cut_in_shell(cut: SampleCut, shell: SurveyShell) -> None:
    """Refuse a cut reaching outside the shell the cones are built for."""
    problems = []
    if cut.z_min is not None and cut.z_min < shell.z_min - 1e-12:
        problems.append(f"sample cut '{cut.label}': z_min = {cut.z_min} lies below "
                        f"shell.z_min = {shell.z_min}")
    if cut.z_max is not None and cut.z_max > shell.z_max + 1e-12:
        problems.append(f"sample cut '{cut.label}': z_max = {cut.z_max} lies beyond "
                        f"shell.z_max = {shell.z_max}")
    if problems:
        raise InputError("; ".join(problems) + "; widen the shell to cover every cut", problems)


def volume_limits_report(shell: SurveyShell, cuts: list[SampleCut],
                         cosmology: Cosmology) -> list[dict[str, Any]]:
    """For each cut with a magnitude threshold, its volume-limit z_max under the flux limit."""
    out = []
    for cut in cuts:
        row: dict[str, Any] = {"label": cut.label, "mag_max": cut.mag_max, "z_volume_limit": None}
        if shell.m_lim is not None and cut.mag_max is not None:
            z = volume_limit_zmax(shell.m_lim, cut.mag_max, cosmology, shell)
            row["z_volume_limit"] = z
            z_hi = cut.z_max if cut.z_max is not None else shell.z_max
            row["volume_limited"] = bool(z_hi <= z + 1e-12)
        out.append(row)
    return out


def effective_area_deg2(footprint: SkyFootprint | None) -> float:
    """Σ completeness × pixel area [deg²] (the footprint's ``area_deg2``)."""
    area = float(getattr(footprint, "area_deg2", math.nan))
    if not math.isfinite(area) or area <= 0:
        raise InputError("footprint: effective area is zero; no part of the sky is observed")
    return area
