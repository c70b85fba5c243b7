"""Fibre-tile overlap maps: the fraction of each pixel covered by two or more tiles.

Spectrographs observe the sky through circular tiles (fields); targets in regions
covered by ≥ 2 tiles get a second fibre pass, which rescues some fibre collisions
(docs/design.md §4).  This module turns a list of tile centres into a HEALPix map of
that overlap fraction, computed on 4^oversample sub-pixels per pixel.
"""

from __future__ import annotations

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from ..sphere import check_radec, radec_to_vec
from .maps import Footprint


def hex_tile_centres(ra_min: float, ra_max: float, dec_min: float, dec_max: float,
                     spacing_deg: float) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Tile centres on a hexagonal pattern covering an RA/Dec box (degrees).

    Rows of constant Dec are ``spacing·√3/2`` apart; along a row centres are
    ``spacing / cos(Dec)`` apart in RA, odd rows shifted by half a step.  RA runs
    eastwards from ``ra_min`` to ``ra_max`` (wrapping through 0 if ``ra_min > ra_max``).
    """
    if spacing_deg <= 0:
        raise InputError(f"tile spacing {spacing_deg!r} must be positive (degrees)")
    width = (ra_max - ra_min) % 360.0 or 360.0
    ras, decs = [], []
    n_rows = int(np.floor((dec_max - dec_min) / (spacing_deg * np.sqrt(3) / 2))) + 1
    for j in range(n_rows):
        dec = dec_min + j * spacing_deg * np.sqrt(3) / 2
        step = spacing_deg / max(np.cos(np.radians(dec)), 1e-3)
        offset = 0.5 * step * (j % 2)
        ra = np.arange(offset, width + 1e-9, step)
        ras.append((ra_min + ra) % 360.0)
        decs.append(np.full(ra.size, dec))
    return np.concatenate(ras), np.concatenate(decs)


def tile_overlap_map(tile_ra_deg: ArrayLike, tile_dec_deg: ArrayLike, tile_radius_deg: float,
                     nside: int, *, oversample: int = 2, nest: bool = False,
                     within: Footprint | None = None) -> Footprint:
    """Fraction of each pixel's area covered by at least two tiles.

    Parameters
    ----------
    tile_ra_deg, tile_dec_deg : array_like
        Tile centres [deg].
    tile_radius_deg : float
        Tile (field) radius [deg].
    nside : int
        N_side of the map (power of 2).
    oversample : int
        Each pixel is resolved into 4^oversample sub-pixels.
    within : Footprint, optional
        Zero the map outside this footprint (same N_side).
    """
    ra, dec = check_radec(tile_ra_deg, tile_dec_deg, "tile centres")
    if not 0 < tile_radius_deg < 90:
        raise InputError(f"tile radius {tile_radius_deg!r} must be in (0, 90) degrees")
    if not hp.isnsideok(nside, nest=True):
        raise InputError(f"overlap map: N_side {nside!r} must be a power of 2")
    nside_sub = nside << oversample
    vec = radec_to_vec(ra.ravel(), dec.ravel())
    hits = [hp.query_disc(nside_sub, v, np.radians(tile_radius_deg), nest=True) for v in vec]
    counts = np.bincount(np.concatenate(hits) if hits else np.zeros(0, np.int64),
                         minlength=hp.nside2npix(nside_sub))
    frac = (counts >= 2).reshape(-1, 4**oversample).mean(axis=1)  # NESTED parents
    if not nest:
        frac = hp.reorder(frac, n2r=True)
    if within is not None:
        if within.nside != nside:
            raise InputError("overlap map: 'within' footprint has a different N_side")
        frac = frac * (within.reordered(nest).values > 0)
    return Footprint(frac, nest=nest, source="tile overlap", file_dtype="float32")
