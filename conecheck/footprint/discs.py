"""Completeness-weighted fraction of spherical discs inside a footprint.

For a disc D of angular radius r the fraction is f = (1/Ω_D) ∫_D c dΩ, with c the
completeness map.  It is evaluated as a midpoint rule on a finer HEALPix grid: the
sub-pixels at N_side_q = N_side · 2^k whose *centres* lie in the disc (the rule of
``healpy.query_disc(..., inclusive=False)``, applied to all discs at once on numba's
threads by :mod:`.disc_query`), and f is the mean completeness of their parent pixels.
The centre-in-disc rule is the right choice: the centre-in-disc test is
the midpoint rule, whose errors along the rim cancel to first order, while
``inclusive=True`` returns every sub-pixel that touches the disc and so over-weights
the rim (biasing f towards the completeness just outside the disc).  N_side_q is the
smallest one whose pixel size is below r / ``samples_per_radius`` (≈ π·10² ≈ 300
sub-pixels per disc by default), so the rim error is ≲ 1 %.

Speed-up for many centres: a disc far from any change in completeness has f equal
to the completeness of its centre pixel.  We keep, per footprint, a KD-tree of the
*boundary* pixels (pixels with a neighbour of different value, and the empty neighbours
of occupied pixels).  Follow the arc from the disc's centre to any point of the disc: if
the value changes on the way, it changes where two neighbouring pixels of different
value touch, and the one of the centre's value there is a boundary pixel, whose centre
lies within ρ_max (largest centre-to-corner distance of a pixel) of that point, so
within r + ρ_max of the disc's centre.  When the nearest boundary pixel centre is
farther than r + 1.5 ρ_max (``EDGE_MARGIN``), every point of the disc therefore lies in
a pixel of the centre's value and the exact answer needs no query.  Only centres near
edges and holes go through the sub-pixel query.
"""

from __future__ import annotations

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from ..errors import InputError
from ..healpix_pixels import ang2pix_lonlat
from ..sphere import angle_to_chord, check_radec, chord_to_angle, radec_to_vec
from .disc_query import parent_value_sums
from .protocols import HealpixMap

#: Largest sub-pixel N_side used (healpy's limit).
MAX_NSIDE = 2**29
#: A disc is uniform when no boundary pixel centre lies within r + this × ρ_max of its
#: centre (the bound is r + ρ_max, see the module notes; the rest is a safety margin for
#: pixel edges that bulge beyond the corners ``max_pixrad`` measures).
EDGE_MARGIN = 1.5


def _boundary_tree(fp: HealpixMap) -> cKDTree | None:
    """KD-tree of unit vectors of pixels that have a neighbour of different value."""
    cached = getattr(fp, "_boundary_tree_cache", None)
    if cached is not None:
        return cached[0]
    occ = fp.occupied
    vals = fp.values
    nb = hp.get_all_neighbours(fp.nside, occ, nest=fp.nest)  # (8, m), -1 where missing
    valid = nb >= 0
    nbv = np.where(valid, vals[np.where(valid, nb, 0)], vals[occ][None, :])
    differs = (nbv != vals[occ][None, :]) & valid
    inner_edge = occ[differs.any(axis=0)]
    outer_edge = nb[valid & (nbv == 0)]
    boundary = np.unique(np.concatenate([inner_edge, outer_edge]))
    tree = None
    if boundary.size:
        tree = cKDTree(np.column_stack(hp.pix2vec(fp.nside, boundary, nest=fp.nest)))
    fp._boundary_tree_cache = (tree,)
    return tree


def _nested_values(fp: HealpixMap) -> NDArray[np.float64]:
    """The map's values in NESTED order (cached on the map: one reorder instead of a
    ``nest2ring`` of every gathered sub-pixel's parent)."""
    if fp.nest:
        return fp.values
    cached = getattr(fp, "_nested_values_cache", None)
    if cached is None:
        cached = hp.reorder(fp.values, r2n=True)
        fp._nested_values_cache = cached
    return cached


def _query_level(nside: int, radius_rad: NDArray[np.float64], samples_per_radius: float
                 ) -> NDArray[np.int64]:
    """Smallest k with pixel size of N_side·2^k below r / samples_per_radius."""
    resol = hp.nside2resol(nside)
    need = np.log2(np.maximum(resol * samples_per_radius / radius_rad, 1.0))
    kmax = int(np.floor(np.log2(MAX_NSIDE / nside)))
    return np.clip(np.ceil(need), 0, kmax).astype(np.int64)


def disc_fraction(fp: HealpixMap, ra_deg: ArrayLike, dec_deg: ArrayLike, radius_deg: ArrayLike,
                  samples_per_radius: float = 10.0) -> NDArray[np.float64]:
    """Completeness-weighted fraction of each disc inside the footprint.

    Parameters
    ----------
    fp : Footprint
    ra_deg, dec_deg : array_like
        Disc centres in degrees (broadcast together with ``radius_deg``).
    radius_deg : array_like
        Angular radii in degrees, in (0, 180].
    samples_per_radius : float
        Sub-pixels per disc radius of the midpoint rule (accuracy ≈ 1/this²·rim).

    Returns
    -------
    ndarray
        f in [0, 1], shape of the broadcast inputs.  Discs smaller than the finest
        sub-pixel take the completeness at their centre.
    """
    ra, dec = check_radec(ra_deg, dec_deg, "disc centres")
    ra, dec, rad = np.broadcast_arrays(ra, dec, np.asarray(radius_deg, dtype=np.float64))
    shape = ra.shape
    ra, dec, rad = ra.ravel(), dec.ravel(), rad.ravel()
    bad = ~np.isfinite(rad) | (rad <= 0) | (rad > 180)
    if bad.any():
        raise InputError(f"disc radii must be in (0, 180] degrees; got {rad[bad][0]!r} "
                         f"({int(bad.sum())} bad values)")
    r = np.radians(rad)
    nside, nest, vals = fp.nside, fp.nest, fp.values
    pix = ang2pix_lonlat(nside, ra, dec, nest=nest)
    out = vals[pix].astype(np.float64)
    tree = _boundary_tree(fp)
    if tree is None:
        return out.reshape(shape)
    centres = radec_to_vec(ra, dec)
    margin = EDGE_MARGIN * hp.max_pixrad(nside)
    # beyond r + margin the distance is not needed: the disc is easy whatever it is
    dist, _ = tree.query(centres, distance_upper_bound=float(angle_to_chord(r.max() + margin)))
    hard = np.flatnonzero(chord_to_angle(np.minimum(dist, 2.0)) <= r + margin)
    if hard.size == 0:
        return out.reshape(shape)
    levels = _query_level(nside, r[hard], samples_per_radius)
    sums, counts = parent_value_sums(_nested_values(fp), centres[hard], r[hard], levels)
    has = counts > 0
    out[hard[has]] = sums[has] / counts[has]
    return np.clip(out, 0.0, 1.0).reshape(shape)

