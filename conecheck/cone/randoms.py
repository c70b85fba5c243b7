"""Random catalogues: uniform on the sky inside the footprint, radial by volume or shuffle.

Randoms depend only on the footprint and a cut's radial limits, never on a cone, so
the pipeline builds them once per sample and cut and shares them between cones.
"""

from __future__ import annotations

import logging
from typing import Literal

import numpy as np
from astropy.table import Table
from numpy.typing import ArrayLike

from ..cosmology import Cosmology
from ..errors import InputError
from ..footprint.protocols import SkyFootprint
from .selection import FullSky

log = logging.getLogger(__name__)


def n_randoms(n_data: float, multiple: float) -> int:
    """Number of randoms for ``n_data`` (weighted) galaxies at ``multiple`` per galaxy."""
    return max(1, int(round(n_data * multiple)))


def make_randoms(footprint: SkyFootprint | None, chi_min: float, chi_max: float, n: int,
                 rng: np.random.Generator, radial: Literal["volume", "shuffle"] = "volume",
                 data_chi: ArrayLike | None = None,
                 cosmology: Cosmology | None = None) -> Table:
    """Random points inside ``footprint`` between comoving distances χ_min and χ_max.

    Parameters
    ----------
    footprint : Footprint or None
        Provides ``sample(n, rng) -> (ra_deg, dec_deg)`` uniform on the sphere thinned by
        completeness; None means the full sky.
    chi_min, chi_max : float
        Radial limits [Mpc/h].
    n : int
        Number of randoms.
    rng : numpy Generator
        Seeded source of every draw.
    radial : {"volume", "shuffle"}
        ``volume``: χ = (χ_min³ + u (χ_max³ − χ_min³))^(1/3), uniform in comoving volume
        (curvature included); ``shuffle``: χ drawn with replacement from ``data_chi``.
    data_chi : array_like or None
        The data's observed distances [Mpc/h] (``shuffle`` only).
    cosmology : Cosmology or None
        When given, a ``z_obs`` column is added (z at χ).

    Returns
    -------
    astropy Table
        Columns ra, dec [deg], chi_obs [Mpc/h], weight (1), and z_obs when possible.
    """
    if not (0.0 <= chi_min < chi_max):
        raise InputError(f"randoms: radial limits chi_min = {chi_min}, chi_max = {chi_max} "
                         "Mpc/h; expected 0 <= chi_min < chi_max")
    if n < 1:
        raise InputError(f"randoms: n = {n}; expected at least one random")
    fp = FullSky() if footprint is None else footprint
    ra, dec = fp.sample(int(n), rng)
    ra, dec = np.asarray(ra, dtype=np.float64), np.asarray(dec, dtype=np.float64)
    if radial == "volume":
        # uniform in comoving volume, curvature included (the same law as every volume)
        chi = (cosmology or Cosmology()).distance_at_volume_fraction(chi_min, chi_max,
                                                                     rng.random(len(ra)))
    elif radial == "shuffle":
        if data_chi is None or len(np.atleast_1d(data_chi)) == 0:
            raise InputError("randoms.radial = 'shuffle' needs the data's observed distances "
                             "(data_chi); none were given")
        chi = rng.choice(np.asarray(data_chi, dtype=np.float64), size=len(ra), replace=True)
    else:
        raise InputError(f"randoms.radial = {radial!r}: expected 'volume' or 'shuffle'")
    t = Table()
    t["ra"] = ra
    t["ra"].unit = "deg"
    t["dec"] = dec
    t["dec"].unit = "deg"
    t["chi_obs"] = chi
    t["chi_obs"].unit = "Mpc/h"
    if cosmology is not None:
        t["z_obs"] = cosmology.redshift_at(chi)
    t["weight"] = np.ones(len(ra))
    t.meta["RADIAL"] = radial
    t.meta["CHIMIN"] = float(chi_min)
    t.meta["CHIMAX"] = float(chi_max)
    return t
