"""HEALPix disc queries in RING order, many discs at once on numba's threads.

The disc fractions of the counts in cylinders and the VPF (:mod:`.discs`) need, for
each of up to 10⁵ discs per call, the sub-pixels whose *centres* lie inside the disc.
``healpy.query_disc(..., inclusive=False)`` answers one disc per Python call and hands
back its pixel list, which the caller then converts and sums: about a tenth of a
millisecond a disc on one core, plus the traffic of 10⁸ gathered indices in a heavy run.
This module applies the same rule to every disc in one parallel loop.

The rule is the RING-scheme disc query of the HEALPix C++ library that healpy wraps
(Górski et al. 2005, ApJ 622, 759, for the pixelisation).  Pixel centres lie on rings of
constant z = cos θ.  A ring at z meets the disc of radius r about (z₀, φ₀) where, by the
spherical law of cosines, z z₀ + √(1−z²)√(1−z₀²) cos Δφ ≥ cos r; writing
x = (cos r − z z₀)/√(1−z₀²) and y² = 1 − z² − x², the half-width of that arc is
Δφ = atan2(y, x) (no arc when y² ≤ 0).  Pixel j of a ring of n_r pixels has its centre at
φ_j = 2π (j + s)/n_r (s = ½ on shifted rings, 0 otherwise), so the arc holds
j = ⌊n_r(φ₀ − Δφ)/2π − s⌋ + 1 … ⌊n_r(φ₀ + Δφ)/2π − s⌋, taken modulo n_r.  Only the rings
between colatitudes θ₀ − r and θ₀ + r are visited, and a pole inside the disc adds
its whole polar cap of rings.  The same floating-point steps in the same order as the
library give the same pixels: the tests compare every pixel with healpy's.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from numba import prange
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from ..healpix_pixels import nest_of_ring_position

_TWO_PI = 2.0 * math.pi
_INV_TWO_PI = 1.0 / _TWO_PI
_TWO_THIRDS = 2.0 / 3.0


@numba.njit(cache=True)
def _ring_above(nside, z):
    """Index of the last ring of pixel centres north of (at larger z than) ``z``."""
    az = abs(z)
    if az <= _TWO_THIRDS:  # equatorial belt: rings equally spaced in z
        return np.int64(nside * (2 - 1.5 * z))
    iring = np.int64(nside * math.sqrt(3 * (1 - az)))
    return iring if z > 0 else 4 * nside - iring - 1


@numba.njit(cache=True)
def _ring_z(nside, iring):
    """z = cos θ of the pixel centres of ring ``iring``."""
    fact2 = 4.0 / (12 * nside * nside)
    if iring < nside:
        return 1 - iring * iring * fact2
    if iring <= 3 * nside:
        return (2 * nside - iring) * ((nside << 1) * fact2)
    south = 4 * nside - iring
    return south * south * fact2 - 1


@numba.njit(cache=True)
def _ring_layout(nside, iring):
    """First RING index, number of pixels and φ offset (in pixels) of ring ``iring``."""
    if iring < nside:
        return 2 * iring * (iring - 1), 4 * iring, 0.5
    if iring < 3 * nside:
        ncap = 2 * nside * (nside - 1)
        shift = 0.5 if ((iring - nside) & 1) == 0 else 0.0
        return ncap + (iring - nside) * 4 * nside, 4 * nside, shift
    south = 4 * nside - iring
    return 12 * nside * nside - 2 * south * (south + 1), 4 * south, 0.5


@numba.njit(cache=True)
def _centre_angles(x, y, z):
    """Colatitude θ in [0, π] and longitude φ in [0, 2π) of a direction (x, y, z)."""
    theta = math.atan2(math.sqrt(x * x + y * y), z)
    phi = 0.0 if (x == 0.0 and y == 0.0) else math.atan2(y, x)
    if phi < 0.0:
        phi += _TWO_PI
    if phi >= _TWO_PI:  # −tiny + 2π rounds to 2π, which is φ = 0
        phi = 0.0
    return theta, phi


@numba.njit(cache=True)
def _whole_rings(nside, ring_first, ring_last, ranges, k):
    """Append rings ``ring_first`` … ``ring_last`` whole to ``ranges`` from row k."""
    for iring in range(ring_first, ring_last + 1):
        start, size, _ = _ring_layout(nside, iring)
        ranges[k, 0] = start
        ranges[k, 1] = start + size
        ranges[k, 2] = iring
        k += 1
    return k


@numba.njit(cache=True, error_model="numpy")
def _disc_ranges(nside, theta, phi, radius, ranges):
    """Fill ``ranges`` with rows (start, stop, ring): the half-open RING index ranges of
    the pixels whose centres lie in the disc, each within one ring, in increasing order;
    return how many rows.  ``ranges`` needs :func:`_ring_span` rows."""
    if radius >= math.pi:
        return _whole_rings(nside, 1, 4 * nside - 1, ranges, 0)
    k = 0
    cos_r = math.cos(radius)
    z0 = math.cos(theta)
    xa = 1.0 / math.sqrt((1 - z0) * (1 + z0))
    north_edge = theta - radius
    ring_min = _ring_above(nside, math.cos(north_edge)) + 1
    if north_edge <= 0 and ring_min > 1:  # the north pole is inside: whole rings
        k = _whole_rings(nside, 1, ring_min - 1, ranges, k)
    south_edge = theta + radius
    ring_max = _ring_above(nside, math.cos(south_edge))
    for iring in range(ring_min, ring_max + 1):
        z = _ring_z(nside, iring)
        x = (cos_r - z * z0) * xa
        ysq = 1 - z * z - x * x
        if ysq <= 0:  # the ring's circle misses the disc's rim
            continue
        dphi = math.atan2(math.sqrt(ysq), x)
        if dphi <= 0:
            continue
        first, nr, shift = _ring_layout(nside, iring)
        lo = np.int64(math.floor(nr * _INV_TWO_PI * (phi - dphi) - shift)) + 1
        hi = np.int64(math.floor(nr * _INV_TWO_PI * (phi + dphi) - shift))
        if lo > hi:
            continue
        if hi >= nr:
            lo -= nr
            hi -= nr
        if lo < 0:  # the arc crosses φ = 0: two pieces of the ring
            ranges[k, 0] = first
            ranges[k, 1] = first + hi + 1
            ranges[k + 1, 0] = first + lo + nr
            ranges[k + 1, 1] = first + nr
            ranges[k, 2] = iring
            ranges[k + 1, 2] = iring
            k += 2
        else:
            ranges[k, 0] = first + lo
            ranges[k, 1] = first + hi + 1
            ranges[k, 2] = iring
            k += 1
    if south_edge >= math.pi and ring_max + 1 < 4 * nside:  # the south pole is inside
        k = _whole_rings(nside, ring_max + 1, 4 * nside - 1, ranges, k)
    return k


@numba.njit(cache=True)
def _ring_span(nside, theta, radius):
    """Rows of ``ranges`` that :func:`_disc_ranges` may fill for this disc: two per ring
    it crosses, one per whole ring round a pole inside it."""
    if radius >= math.pi:
        return 4 * nside - 1
    ring_min = _ring_above(nside, math.cos(theta - radius)) + 1
    ring_max = _ring_above(nside, math.cos(theta + radius))
    rows = 2 * max(ring_max - ring_min + 1, 0)
    if theta - radius <= 0:
        rows += max(ring_min - 1, 0)
    if theta + radius >= math.pi:
        rows += max(4 * nside - 1 - ring_max, 0)
    return rows


@numba.njit(parallel=True, cache=True)
def _count_pixels(nside, theta, phi, radius):
    counts = np.zeros(theta.size, dtype=np.int64)
    for i in prange(theta.size):
        ranges = np.empty((_ring_span(nside, theta[i], radius[i]), 3), dtype=np.int64)
        for j in range(_disc_ranges(nside, theta[i], phi[i], radius[i], ranges)):
            counts[i] += ranges[j, 1] - ranges[j, 0]
    return counts


@numba.njit(parallel=True, cache=True)
def _fill_pixels(nside, theta, phi, radius, offsets, out):
    for i in prange(theta.size):
        ranges = np.empty((_ring_span(nside, theta[i], radius[i]), 3), dtype=np.int64)
        at = offsets[i]
        for j in range(_disc_ranges(nside, theta[i], phi[i], radius[i], ranges)):
            for p in range(ranges[j, 0], ranges[j, 1]):
                out[at] = p
                at += 1


@numba.njit(parallel=True, cache=True)
def _angles(vec):
    theta = np.empty(vec.shape[0])
    phi = np.empty(vec.shape[0])
    for i in prange(vec.shape[0]):
        theta[i], phi[i] = _centre_angles(vec[i, 0], vec[i, 1], vec[i, 2])
    return theta, phi


@numba.njit(parallel=True, cache=True)
def _parent_sums(order, level, theta, phi, radius, nested_values):
    """Σ and count over each disc's sub-pixel centres at N_side = 2^(order + level) of
    the NESTED parent values at N_side = 2^order.  Each range lies in one known ring,
    so the nested index comes from (ring, position) with no square root per pixel."""
    n = theta.size
    sums = np.zeros(n)
    counts = np.zeros(n, dtype=np.int64)
    for i in prange(n):
        order_q = order + level[i]
        nside_q = np.int64(1) << order_q
        shift = 2 * level[i]
        ranges = np.empty((_ring_span(nside_q, theta[i], radius[i]), 3), dtype=np.int64)
        total = 0.0
        for j in range(_disc_ranges(nside_q, theta[i], phi[i], radius[i], ranges)):
            iring = ranges[j, 2]
            first, _, _ = _ring_layout(nside_q, iring)
            for p in range(ranges[j, 0], ranges[j, 1]):
                nest = nest_of_ring_position(order_q, iring, p - first + 1)
                total += nested_values[nest >> shift]
            counts[i] += ranges[j, 1] - ranges[j, 0]
        sums[i] = total
    return sums, counts


def _check(nside: int, vec: ArrayLike, radius_rad: ArrayLike
           ) -> tuple[int, NDArray[np.float64], NDArray[np.float64]]:
    order = int(nside).bit_length() - 1
    if nside < 1 or (1 << order) != nside or order > 29:
        raise InputError(f"nside = {nside}: expected a power of 2 from 1 to 2**29")
    v = np.ascontiguousarray(vec, dtype=np.float64).reshape(-1, 3)
    r = np.ascontiguousarray(np.broadcast_to(np.asarray(radius_rad, dtype=np.float64),
                                             (v.shape[0],)))
    if not (np.isfinite(v).all() and np.isfinite(r).all() and (r >= 0).all()):
        raise InputError("disc centres must be finite vectors and radii finite and ≥ 0")
    return order, v, r


def query_discs(nside: int, vec: ArrayLike, radius_rad: ArrayLike
                ) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """RING indices of the pixels whose centres lie in each disc.

    Parameters
    ----------
    nside : int
        HEALPix N_side, a power of 2 up to 2²⁹.
    vec : array_like, shape (n, 3)
        Directions of the disc centres (need not be normalised).
    radius_rad : array_like, shape (n,) or scalar
        Disc radii [rad].

    Returns
    -------
    pixels : ndarray of int64
        Every disc's pixels, disc after disc, each disc's in increasing order — the
        concatenation of ``healpy.query_disc(nside, vec[i], radius_rad[i])`` over i.
    counts : ndarray of int64, shape (n,)
        Pixels of each disc.
    """
    _, v, r = _check(nside, vec, radius_rad)
    theta, phi = _angles(v)
    counts = _count_pixels(np.int64(nside), theta, phi, r)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    pixels = np.empty(int(offsets[-1]), dtype=np.int64)
    _fill_pixels(np.int64(nside), theta, phi, r, offsets, pixels)
    return pixels, counts


def parent_value_sums(nested_values: NDArray[np.float64], vec: ArrayLike,
                      radius_rad: ArrayLike, level: ArrayLike
                      ) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Sum of a map's values over each disc's sub-pixel centres, and their number.

    Disc i is queried at N_side_q = N_side · 2^level[i] (the rule of
    :func:`query_discs`); each sub-pixel contributes the value of its parent pixel at
    N_side, the map's.  No pixel list is formed.

    Parameters
    ----------
    nested_values : ndarray, shape (12 N_side²,)
        The map in NESTED order.
    vec : array_like, shape (n, 3)
        Directions of the disc centres.
    radius_rad : array_like, shape (n,)
        Disc radii [rad].
    level : array_like of int, shape (n,)
        Refinement of each disc's query (N_side_q = N_side · 2^level ≤ 2²⁹).

    Returns
    -------
    sums : ndarray, shape (n,)
        Σ of the parents' values, in the order of the pixels of :func:`query_discs`.
    counts : ndarray of int64, shape (n,)
        Sub-pixels in each disc (0 when no centre falls inside).
    """
    vals = np.ascontiguousarray(nested_values, dtype=np.float64)
    nside = int(round(np.sqrt(vals.size / 12)))
    if 12 * nside * nside != vals.size:
        raise InputError(f"a HEALPix map has 12 N_side² values; got {vals.size}")
    order, v, r = _check(nside, vec, radius_rad)
    lev = np.ascontiguousarray(np.broadcast_to(np.asarray(level, dtype=np.int64),
                                               (v.shape[0],)))
    if lev.size and (lev.min() < 0 or order + lev.max() > 29):
        raise InputError(f"query levels must keep N_side · 2^level within 2**29 "
                         f"(N_side = {nside}); got {int(lev.min())} … {int(lev.max())}")
    theta, phi = _angles(v)
    return _parent_sums(np.int64(order), lev, theta, phi, r, vals)
