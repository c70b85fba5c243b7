"""Populate a halo catalogue with galaxies from a nested luminosity-threshold HOD.

Occupations and assembly bias are those of :mod:`.hod`.  Magnitudes are assigned so that
*every* threshold sample reproduces its own HOD in expectation:

* Thresholds m_0 > m_1 > … > m_{K−1} (faintest first) have nested mean occupations
  N_0(M) ≥ N_1(M) ≥ … (after decoration, which preserves the order).
* Centrals: one uniform u per halo; a central exists when u < N_cen,0, and it is brighter
  than threshold j exactly when u < N_cen,j.  Hence P(central brighter than m_j) = N_cen,j
  (Bernoulli per threshold) with a single draw.
* Satellites: n ~ Poisson(N_sat,0) per halo; each satellite draws u ~ U(0, 1) and is brighter
  than m_j when u N_sat,0 < N_sat,j.  Binomial thinning of a Poisson count is Poisson, so the
  number brighter than m_j is Poisson(N_sat,j).
* Within a magnitude bin [m_{j+1}, m_j) the magnitude is uniform; in the open brightest bin
  it is m_{K−1} − E with E exponential of scale ``bright_tail_mag`` (a simple stand-in for
  the steep bright end of a luminosity function; selections never resolve the shape inside
  a bin, only which bin).

Selecting ``abs_mag < m_j`` therefore returns exactly the galaxies that passed threshold j.

Satellites follow a truncated NFW profile around the halo centre (see :mod:`.nfw`) and move
with the halo velocity plus an isotropic Gaussian of the halo's virial dispersion; centrals
sit at the halo centre with the halo velocity.  Positions are wrapped into the box.
Everything is vectorised (satellites expanded per halo with ``np.repeat``).
"""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..catalog import GalaxyBox
from ..cosmology import Cosmology
from ..errors import InputError
from .halos import HaloCatalog
from .hod import HODModel, decorate, split_by_secondary
from .nfw import (
    concentration_power_law,
    isotropic_directions,
    sample_nfw_radii,
    virial_dispersion,
    virial_radius,
)

log = logging.getLogger(__name__)


def decorated_occupations(halos: HaloCatalog, model: HODModel
                          ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Expected (<N_cen>, <N_sat>) per threshold and halo, shape (K, N_halo), with assembly bias.

    Raises InputError when assembly bias is switched on but the halos lack the secondary
    column named in the model.
    """
    cen, sat = model.mean_occupations(halos.mass)
    ab = model.assembly_bias
    if ab.active:
        secondary = np.asarray(halos.column(ab.secondary), dtype=float)
        if not np.all(np.isfinite(secondary)):
            raise InputError(f"halo column '{ab.secondary}' (assembly-bias secondary property) "
                             "has NaN/inf values")
        # the split depends on the halos alone, not on the HOD parameters the derivatives
        # vary: sort each catalogue once (a lexsort of every halo, seconds at 10⁶ halos)
        cache = halos.__dict__.setdefault("_secondary_split_cache", {})
        key = (ab.secondary, float(ab.mass_bin_dex))
        if key not in cache:
            cache[key] = split_by_secondary(halos.mass, secondary, ab.mass_bin_dex)
        upper, p_upper = cache[key]
        cen = decorate(cen, upper, p_upper, ab.a_cen, bounded=True)
        sat = decorate(sat, upper, p_upper, ab.a_sat, bounded=False)
    return cen, sat


def density_brighter_than(model: HODModel, threshold_density: NDArray[np.float64],
                          mag_max: float | None) -> float:
    """Expected density of galaxies with abs_mag < ``mag_max`` under the magnitude law above.

    Parameters
    ----------
    model : HODModel
        Its thresholds m_0 > … > m_{K−1} and bright-tail width [mag].
    threshold_density : array (K,)
        Expected density of each threshold sample [(h/Mpc)³], faintest first.
    mag_max : float or None
        Sample threshold, M − 5 log10 h [mag]; None keeps every galaxy.

    Returns
    -------
    float
        Density [(h/Mpc)³]: n_0 fainter than m_0; linear in magnitude between thresholds
        (magnitudes are uniform inside a bin); n_{K−1} exp(−(m_{K−1} − m)/w) brighter than
        the brightest.
    """
    mags = model.mag_limits
    n = np.asarray(threshold_density, dtype=float)
    if mag_max is None or mag_max >= mags[0]:
        return float(n[0])
    if mag_max < mags[-1]:
        return float(n[-1] * np.exp(-(mags[-1] - mag_max) / model.bright_tail_mag))
    return float(np.interp(mag_max, mags[::-1], n[::-1]))


def halo_threshold_densities(halos: HaloCatalog, model: HODModel) -> NDArray[np.float64]:
    """Expected galaxy density of each threshold in ``halos`` [(h/Mpc)³], faintest first.

    Σ over halos of <N_cen> + <N_sat>, over L³; decoration keeps the mean at fixed mass.
    """
    cen, sat = model.mean_occupations(halos.mass)
    return (cen + sat).sum(axis=1) / float(halos.box_size) ** 3


def _magnitudes(level: NDArray[np.int64], mags: NDArray[np.float64], tail: float,
                rng: np.random.Generator) -> NDArray[np.float64]:
    """Magnitude for galaxies brighter than ``level`` thresholds (level ≥ 1)."""
    k = len(mags)
    hi = mags[level - 1]                               # the faintest threshold it passes
    lo = np.where(level < k, mags[np.minimum(level, k - 1)], hi)
    u = rng.random(level.size)
    inside = lo + (hi - lo) * u
    tail_draw = hi - rng.exponential(tail, level.size)
    out = np.where(level < k, inside, tail_draw)
    # keep abs_mag < m_j strict even when u rounds (hi − lo)·u up to the bin edge
    return np.minimum(out, np.nextafter(hi, -np.inf))


def populate(halos: HaloCatalog, model: HODModel, rng: np.random.Generator,
             cosmology: Cosmology | None = None) -> GalaxyBox:
    """Paint galaxies into ``halos`` with the HOD ``model``.

    Parameters
    ----------
    halos : HaloCatalog
        Positions [Mpc/h], velocities [km/s], masses [Msun/h] (Δ = 200m).
    model : HODModel
        Nested luminosity thresholds (+ assembly bias).
    rng : numpy.random.Generator
        Source of every random draw.
    cosmology : Cosmology, optional
        Only Ω_m is used, for halo radii when the catalogue has no ``rvir``; default
        ``Cosmology()``.

    Returns
    -------
    GalaxyBox
        Centrals first, then satellites; with abs_mag, is_central, halo_id, halo_mass.

    Raises
    ------
    InputError
        When the HOD puts no galaxy in any halo, or assembly bias needs a missing column.
    """
    n_halo = len(halos)
    mags = model.mag_limits
    cen_n, sat_n = decorated_occupations(halos, model)

    u = rng.random(n_halo)
    level_c = np.sum(u[None, :] < cen_n, axis=0)
    cen_idx = np.flatnonzero(level_c > 0)

    n_sat = rng.poisson(sat_n[0])
    host = np.repeat(np.arange(n_halo), n_sat)
    us = rng.random(host.size) * sat_n[0, host]
    level_s = np.sum(us[None, :] < sat_n[:, host], axis=0)

    if cen_idx.size + host.size == 0:
        raise InputError(
            f"the HOD puts no galaxy in any of the {n_halo} halos (masses "
            f"{halos.mass.min():.3g} .. {halos.mass.max():.3g} Msun/h; faintest threshold "
            f"log_mmin = {model.thresholds[0].params.log_mmin}): check the HOD parameters "
            "against the halo masses")

    mag_c = _magnitudes(level_c[cen_idx], mags, model.bright_tail_mag, rng)
    mag_s = _magnitudes(level_s, mags, model.bright_tail_mag, rng)

    # satellites: NFW radius within the halo radius, isotropic direction, virial velocities
    mass_s = halos.mass[host]
    rvir = (halos.rvir[host] if halos.rvir is not None
            else virial_radius(mass_s, (cosmology or Cosmology()).omega_m))
    conc = (halos.concentration[host] if halos.concentration is not None
            else concentration_power_law(mass_s, halos.redshift))
    radius = sample_nfw_radii(conc, rng) * rvir
    offset = radius[:, None] * isotropic_directions(host.size, rng)
    pos_s = np.mod(halos.position[host] + offset, halos.box_size)
    # np.mod can return L itself for tiny negative inputs; keep [0, L)
    pos_s[pos_s >= halos.box_size] = 0.0
    sigma = virial_dispersion(mass_s, rvir, halos.redshift)
    vel_s = halos.velocity[host] + sigma[:, None] * rng.standard_normal((host.size, 3))

    hid = halos.halo_id if halos.halo_id is not None else np.arange(n_halo, dtype=np.int64)
    owner = np.concatenate([cen_idx, host])
    meta: dict[str, Any] = dict(halos.meta)
    # short keys: they become FITS header keywords
    model_name = "erf_central_powerlaw_satellite"
    if model.assembly_bias.active:
        model_name += "+assembly_bias"
    meta.update({"HODMODEL": model_name,
                 "NCEN": int(cen_idx.size), "NSAT": int(host.size)})
    return GalaxyBox(
        position=np.concatenate([halos.position[cen_idx], pos_s]),
        velocity=np.concatenate([halos.velocity[cen_idx], vel_s]),
        box_size=halos.box_size, redshift=halos.redshift,
        abs_mag=np.concatenate([mag_c, mag_s]),
        is_central=np.concatenate([np.ones(cen_idx.size, bool), np.zeros(host.size, bool)]),
        halo_id=np.asarray(hid, dtype=np.int64)[owner],
        halo_mass=halos.mass[owner],
        meta=meta)
