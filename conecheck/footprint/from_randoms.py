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
(E[min(N/λ, 1)] for Poisson N: −6 % at λ = 40, :func:`capped_bias`).  That bias is known,
so it is removed where it applies: with at least :data:`MIN_MEAN_COUNT` randoms per
complete pixel, a pixel whose count is consistent with a complete one, N ≥ λ − 2√λ, gets
completeness 1 exactly if it is an interior pixel (edge pixels, partly outside the survey
by geometry, keep N/λ; a complete pixel falls below with probability
≈ 2 %, so the bias of complete pixels drops to ≈ −0.7 % at λ = 40); pixels of partial
completeness close to 1 are then pushed up (c = 0.9: ≈ +8 % at λ = 40, ≈ +6 % at 160).
Both numbers are logged for the map at hand. Measured on a 30° cap at N_side 64, the area
is −0.7 % / −0.4 % / −0.3 % off at λ = 40 / 160 / 400 (−6.1 % / −3.1 % / −2.0 % with
min(N/λ, 1) alone); on a 15° cap holding a half-completeness box at N_side 32 the pixels
straddling the box's edge add +1.6 % / +1.3 % at λ = 160 / 400. Below about 60 randoms per
pixel a large patch of about half completeness lies within 3σ of λ and pulls the level
estimate down (+16 % area at λ = 40 on that map): use more randoms or a coarser N_side.
The map is only as good as the number of randoms per pixel.  A warning is logged
when the mean count per occupied pixel is below :data:`MIN_MEAN_COUNT`, with the
largest N_side that would reach it.
"""

from __future__ import annotations

import logging

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from ..errors import InputError
from ..sphere import check_radec
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


def capped_bias(level: float) -> float:
    """E[min(N/λ, 1)] − 1 for Poisson N of mean λ: the cap's bias on a complete pixel."""
    n = np.arange(int(level + 12 * np.sqrt(level) + 20))
    return float(np.sum(np.minimum(n / level, 1.0) * stats.poisson.pmf(n, level)) - 1.0)


#: Poisson standard deviations below λ within which a count is taken as a complete pixel.
COMPLETE_WITHIN_SIGMA = 2.0


def completeness_from_counts(counts: NDArray[np.float64], level: float) -> NDArray[np.float64]:
    """min(N/λ, 1), with 1 exactly for counts consistent with a complete pixel.

    Below :data:`MIN_MEAN_COUNT` per complete pixel a count says too little to tell a
    complete pixel from one of half completeness, and plain min(N/λ, 1) is returned.
    """
    if level < MIN_MEAN_COUNT:
        return np.minimum(counts / level, 1.0)
    complete = counts >= level - COMPLETE_WITHIN_SIGMA * np.sqrt(level)
    return np.where(complete & (counts > 0), 1.0, np.minimum(counts / level, 1.0))


def complete_pixel_bias(level: float) -> float:
    """E[c] − 1 of :func:`completeness_from_counts` on a complete pixel (Poisson N, mean λ)."""
    n = np.arange(int(level + 12 * np.sqrt(level) + 20))
    return float(np.sum(completeness_from_counts(n.astype(float), level)
                        * stats.poisson.pmf(n, level)) - 1.0)


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
    nb = hp.get_all_neighbours(nside, occ, nest=nest)
    interior = occ[((nb >= 0) & (counts[np.maximum(nb, 0)] > 0)).all(axis=0)]
    if level is None:
        basis = counts[interior] if interior.size else counts[occ]
        level = full_level(basis)
        log.info("%s: full-completeness level %.2f randoms per pixel (from %d %s pixels)",
                 source, level, basis.size, "interior" if interior.size else "occupied")
    elif not np.isfinite(level) or level <= 0:
        raise InputError(f"{source}: level = {level!r} must be a positive count per pixel")
    # Edge pixels are partly outside the survey by geometry: only interior pixels can be
    # complete, so only they are tested against a complete pixel's count.
    values = np.minimum(counts / level, 1.0)
    values[interior] = completeness_from_counts(counts[interior], level)
    log.info("%s: at %.1f randoms per complete pixel, min(N/λ, 1) would bias complete pixels "
             "by %+.1f %%; counts within %g σ of λ are set complete, leaving %+.1f %% (pixels "
             "of partial completeness near 1 are pushed up instead; edge pixels keep N/λ)",
             source, level,
             100 * capped_bias(level), COMPLETE_WITHIN_SIGMA,
             100 * complete_pixel_bias(level))
    return Footprint(values, nest=nest, source=source, file_dtype="float32")
