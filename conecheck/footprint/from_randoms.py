"""A completeness map estimated from a catalogue of random points.

Randoms drawn uniformly per solid angle and thinned by completeness have, in a
pixel of completeness c, a Poisson count of mean c·λ, where λ is the count of a
fully complete pixel.  We estimate λ as the **median count of interior pixels**
(occupied pixels whose eight neighbours are all occupied): interior pixels are
not cut by the survey edge.  Among them, the fully complete ones form the top cluster
of counts; λ is the mean count of the pixels within three Poisson standard
deviations below that cluster (:func:`full_level`, iterated from the 90th
percentile), so holes, vetoes and low-completeness patches do not pull it down
even when they cover much of the survey.  Completeness = min(count / λ, 1).
Randoms cannot tell absolute completeness: the map is relative to the most
complete part of the survey.

Poisson noise makes this estimate noisy at the pixel level (relative scatter
1/√λ) and, through the cap at 1, biased low by ≈ 0.4/√λ for complete pixels
(E[min(N/λ, 1)] for Poisson N); so
the map is only as good as the number of randoms per pixel.  A warning is logged
when the mean count per occupied pixel is below :data:`MIN_MEAN_COUNT`, with the
largest N_side that would reach it.
"""

from __future__ import annotations

import logging

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from ._sphere import check_radec
from .maps import Footprint

log = logging.getLogger(__name__)

#: Mean randoms per occupied pixel below which the map is too noisy (20 % per pixel;
#: common practice, a judgement call).
MIN_MEAN_COUNT = 25.0


def suggest_nside(mean_count: float, nside: int, target: float = MIN_MEAN_COUNT) -> int:
    """Largest power-of-2 N_side ≤ ``nside`` whose mean count per pixel reaches ``target``."""
    out = nside
    while out > 1 and mean_count * (nside / out) ** 2 < target:
        out //= 2
    return out


def full_level(counts: NDArray[np.float64]) -> float:
    """Mean count of the pixels consistent with the most complete ones.

    Start from the 90th percentile and take the mean of counts above it minus three
    Poisson standard deviations; iterate to convergence.  Pixels of clearly lower
    completeness (holes, low-completeness patches, however large a fraction of the
    survey they are) drop out as long as ≥ 10 % of the pixels are fully complete.
    """
    level = float(np.percentile(counts, 90))
    for _ in range(20):
        sel = counts[counts >= level - 3.0 * np.sqrt(level)]
        new = float(sel.mean())
        if abs(new - level) <= 1e-9 * max(level, 1.0):
            break
        level = new
    return level


def mask_from_randoms(ra_deg: ArrayLike, dec_deg: ArrayLike, nside: int, *, nest: bool = False,
                      level: float | None = None, source: str = "randoms") -> Footprint:
    """Completeness map from random points.

    Parameters
    ----------
    ra_deg, dec_deg : array_like
        Positions of the randoms in degrees.
    nside : int
        HEALPix N_side of the map (power of 2).
    nest : bool
        NESTED ordering of the result.
    level : float, optional
        Expected count in a fully complete pixel; default: estimated from the interior
        pixels (see module docstring).

    Raises
    ------
    InputError
        No points, bad N_side, bad positions.
    """
    if isinstance(nside, bool) or not hp.isnsideok(int(nside), nest=True):
        raise InputError(f"{source}: N_side = {nside!r} must be a power of 2")
    nside = int(nside)
    ra, dec = check_radec(ra_deg, dec_deg, source)
    if ra.size == 0:
        raise InputError(f"{source}: no random points")
    pix = hp.ang2pix(nside, ra.ravel(), dec.ravel(), nest=nest, lonlat=True)
    counts = np.bincount(pix, minlength=hp.nside2npix(nside)).astype(np.float64)
    occ = np.flatnonzero(counts)
    mean = ra.size / occ.size
    if mean < MIN_MEAN_COUNT:
        log.warning("%s: only %.1f randoms per occupied pixel at N_side %d (want >= %g); the "
                    "completeness map is noisy — use N_side %d or more randoms",
                    source, mean, nside, MIN_MEAN_COUNT, suggest_nside(mean, nside))
    if level is None:
        nb = hp.get_all_neighbours(nside, occ, nest=nest)
        interior = occ[((nb >= 0) & (counts[np.maximum(nb, 0)] > 0)).all(axis=0)]
        basis = counts[interior] if interior.size else counts[occ]
        level = full_level(basis)
        log.info("%s: full-completeness level %.2f randoms per pixel (from %d %s pixels)",
                 source, level, basis.size, "interior" if interior.size else "occupied")
    elif not np.isfinite(level) or level <= 0:
        raise InputError(f"{source}: level = {level!r} must be a positive count per pixel")
    return Footprint(np.minimum(counts / level, 1.0), nest=nest, source=source,
                     file_dtype="float32")
