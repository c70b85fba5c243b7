"""Close pairs on the sphere: every pair of unit vectors at most a given chord apart.

The fibre-collision graph of a cone's target list needs all pairs closer than θ_fc (tens
of arcseconds) among 10⁶ targets. A k-d tree finds them on one core; this search runs on
numba's threads with the same distance test:

1. The unit sphere is cut into strips of height ≥ the chord in z. A pair at most a chord
   apart differs by at most a chord in z, so it lies in one strip or in two adjacent ones.
2. The points are sorted by (strip, azimuth φ) with the engine's counting sort.
3. For two points in strips a and b, chord² = Δz² + (ρ₁ − ρ₂)² + 4 ρ₁ ρ₂ sin²(Δφ / 2)
   with ρ the distance from the polar axis, so a pair within the chord c has
   sin(|Δφ| / 2) ≤ c / (2 √(ρ_min,a ρ_min,b)), ρ_min the smallest ρ in each strip. Each
   point scans its own strip forward and the next strip, over that window of azimuth
   (wrapped at φ = ±π; the whole strip near the poles, where the window reaches ±π).
4. Each candidate passes the test dx² + dy² + dz² ≤ c², summed in that order.

A count pass and a fill pass over the same scans write each pair once, in a fixed order
(by the sorted position of its first point), whatever the number of threads.
"""

from __future__ import annotations

import healpy as hp
import numba
import numpy as np
from numba import prange
from numpy.typing import NDArray
from scipy.spatial import cKDTree

from ..healpix_pixels import vec2pix
from ._sorting import sort_by_cell
from .neighbours import query_workers

#: Relative widening of the strips and of the azimuth windows: far above the rounding of
#: the coordinates (≈ 10⁻¹⁶), so that no pair within the chord is missed at a window edge.
_MARGIN = 1e-6


@numba.njit(parallel=True, cache=True)
def _strip_sort(xyz, width, n_strips):
    """Points sorted by (strip of height ``width`` in z, azimuth): the order, each sorted
    point's strip and azimuth [rad], the strips' starts and their smallest distance from
    the polar axis."""
    n = xyz.shape[0]
    sid = np.empty(n, dtype=np.int64)
    phi = np.empty(n)
    rho = np.empty(n)
    for i in prange(n):
        s = np.int64(np.floor((xyz[i, 2] + 1.0) / width))
        sid[i] = min(max(s, 0), n_strips - 1)
        phi[i] = np.arctan2(xyz[i, 1], xyz[i, 0])
        rho[i] = np.sqrt(xyz[i, 0] * xyz[i, 0] + xyz[i, 1] * xyz[i, 1])
    order, start = sort_by_cell(sid, phi, n_strips)
    rho_min = np.full(n_strips, np.inf)
    for i in range(n):
        if rho[i] < rho_min[sid[i]]:
            rho_min[sid[i]] = rho[i]
    return order, phi[order], start, rho_min


@numba.njit(cache=True)
def _half_window(chord, rho_a, rho_b):
    """Largest |Δφ| [rad] of a pair within ``chord`` between strips whose points lie at
    least ``rho_a`` and ``rho_b`` from the polar axis; π or more means the whole strip."""
    prod = rho_a * rho_b
    if prod <= 0.0:
        return 4.0
    arg = chord / (2.0 * np.sqrt(prod))
    if arg >= 1.0:
        return 4.0
    return 2.0 * np.arcsin(arg) * (1.0 + _MARGIN) + 1e-12


@numba.njit(cache=True)
def _lower(phi, s, e, value):
    """First position in the sorted ``phi[s:e]`` with phi ≥ value (``e`` when none)."""
    while s < e:
        m = (s + e) >> 1
        if phi[m] < value:
            s = m + 1
        else:
            e = m
    return s


@numba.njit(cache=True)
def _scan_range(i, b, e, top, xyz, order, phi, c2, out, at):
    """Pairs of point ``i`` with the sorted points ``b`` … ``e`` − 1 up to azimuth ``top``:
    written to ``out`` from row ``at`` when ``out`` has rows. Returns how many."""
    write = out.shape[0] > 0
    found = 0
    while b < e and phi[b] <= top:
        j = order[b]
        dx = xyz[i, 0] - xyz[j, 0]
        dy = xyz[i, 1] - xyz[j, 1]
        dz = xyz[i, 2] - xyz[j, 2]
        if dx * dx + dy * dy + dz * dz <= c2:
            if write:
                out[at + found, 0] = i
                out[at + found, 1] = j
            found += 1
        b += 1
    return found


#: Above any azimuth [rad]: a scan with this top runs to the end of its range.
_EVERYTHING = 10.0


@numba.njit(cache=True)
def _window(phi, t0, t1, pa, w):
    """The sorted positions of strip ``t0`` … ``t1`` − 1 within ``w`` [rad] of azimuth
    ``pa``, as three ranges (first, end, top azimuth), empty where unused: the window
    itself, and its parts wrapped past −π or π (a window below π never meets itself)."""
    if w >= np.pi:
        return (t0, t1, _EVERYTHING), (t1, t1, 0.0), (t1, t1, 0.0)
    lo, hi = pa - w, pa + w
    below = ((_lower(phi, t0, t1, lo + 2.0 * np.pi), t1, _EVERYTHING) if lo < -np.pi
             else (t1, t1, 0.0))
    above = (t0, t1, hi - 2.0 * np.pi) if hi > np.pi else (t1, t1, 0.0)
    return (_lower(phi, t0, t1, lo), t1, hi), below, above


@numba.njit(cache=True)
def _scan(a, xyz, order, phi, start, strip, win_same, win_next, c2, out, at):
    """Pairs of sorted point ``a`` with the later points of its strip and with the next
    strip, inside the azimuth windows; written to ``out`` from row ``at`` when ``out`` has
    rows, counted otherwise. Returns the number of pairs."""
    s = strip[a]
    i = order[a]
    pa = phi[a]
    # own strip, forward in azimuth (each pair once: a window below π cannot meet itself)
    w = win_same[s]
    top = _EVERYTHING if w >= np.pi else pa + w
    found = _scan_range(i, a + 1, start[s + 1], top, xyz, order, phi, c2, out, at)
    if w < np.pi and pa + w > np.pi:
        found += _scan_range(i, start[s], a, pa + w - 2.0 * np.pi, xyz, order, phi, c2,
                             out, at + found)
    if s + 2 >= start.size:
        return found
    for r in _window(phi, start[s + 1], start[s + 2], pa, win_next[s]):
        found += _scan_range(i, r[0], r[1], r[2], xyz, order, phi, c2, out, at + found)
    return found


@numba.njit(parallel=True, cache=True)
def _close_pairs(xyz, chord, width, n_strips):
    n = xyz.shape[0]
    order, phi, start, rho_min = _strip_sort(xyz, width, n_strips)
    strip = np.empty(n, dtype=np.int64)
    for s in prange(n_strips):
        for a in range(start[s], start[s + 1]):
            strip[a] = s
    win_same = np.empty(n_strips)
    win_next = np.empty(n_strips)
    for s in prange(n_strips):
        win_same[s] = _half_window(chord, rho_min[s], rho_min[s])
        win_next[s] = (_half_window(chord, rho_min[s], rho_min[s + 1]) if s + 1 < n_strips
                       else 0.0)
    c2 = chord * chord
    none = np.empty((0, 2), dtype=np.int64)
    count = np.empty(n, dtype=np.int64)
    for a in prange(n):
        count[a] = _scan(a, xyz, order, phi, start, strip, win_same, win_next, c2, none, 0)
    offset = np.zeros(n + 1, dtype=np.int64)
    for a in range(n):
        offset[a + 1] = offset[a] + count[a]
    out = np.empty((offset[n], 2), dtype=np.int64)
    if offset[n] == 0:
        return out
    for a in prange(n):
        if count[a]:
            _scan(a, xyz, order, phi, start, strip, win_same, win_next, c2, out, offset[a])
    for p in prange(offset[n]):
        if out[p, 0] > out[p, 1]:
            out[p, 0], out[p, 1] = out[p, 1], out[p, 0]
    return out


def close_pairs_sphere(xyz: NDArray[np.float64], chord: float) -> NDArray[np.int64]:
    """Index pairs (M, 2), i < j, of unit vectors at most ``chord`` apart.

    Parameters
    ----------
    xyz : ndarray (N, 3)
        Unit vectors (dimensionless).
    chord : float
        Largest separation, as a chord of the unit sphere, 2 sin(θ / 2) for an angle θ.

    Returns
    -------
    ndarray of int64 (M, 2)
        Every pair once, the smaller index first, in an order fixed by the points alone;
        the same pairs as ``scipy.spatial.cKDTree(xyz).query_pairs(chord)``.
    """
    xyz = np.ascontiguousarray(xyz, dtype=np.float64)
    if len(xyz) < 2 or not chord > 0.0:
        return np.zeros((0, 2), dtype=np.int64)
    chord = float(min(chord, 2.0))
    width = chord * (1.0 + _MARGIN)
    n_strips = int(np.floor(2.0 / width)) + 1
    return _close_pairs(xyz, chord, width, n_strips)


@numba.njit(cache=True)
def _nearest_range(q, b, e, top, query, data, order, phi, best):
    """Closer data points among the sorted ones ``b`` … ``e`` − 1 up to azimuth ``top``:
    ``best`` holds (squared chord, data index) of query ``q``'s nearest so far; ties go to
    the smaller index."""
    while b < e and phi[b] <= top:
        j = order[b]
        dx = query[q, 0] - data[j, 0]
        dy = query[q, 1] - data[j, 1]
        dz = query[q, 2] - data[j, 2]
        d2 = dx * dx + dy * dy + dz * dz
        if d2 < best[q, 0] or (d2 == best[q, 0] and j < best[q, 1]):
            best[q, 0] = d2
            best[q, 1] = j
        b += 1


@numba.njit(parallel=True, cache=True)
def _nearest_within(query, data, chord, width, n_strips):
    order, phi, start, rho_min = _strip_sort(data, width, n_strips)
    nq = query.shape[0]
    # (squared chord, index) of each query's nearest data point within the chord; an index
    # of −1 (and chord² as its distance) until one is found
    best = np.empty((nq, 2))
    for q in prange(nq):
        best[q, 0] = chord * chord
        best[q, 1] = -1.0
        x, y, z = query[q, 0], query[q, 1], query[q, 2]
        s = min(max(np.int64(np.floor((z + 1.0) / width)), 0), n_strips - 1)
        pq = np.arctan2(y, x)
        rq = np.sqrt(x * x + y * y)
        for t in range(max(s - 1, 0), min(s + 2, n_strips)):
            w = _half_window(chord, rq, rho_min[t])
            for r in _window(phi, start[t], start[t + 1], pq, w):
                _nearest_range(q, r[0], r[1], r[2], query, data, order, phi, best)
    return best


#: The strips' search radius in mean spacings of the data: a query at a random place has
#: no data point that close with probability exp(−π 1.5²) ≈ 10⁻³ (Poisson points), and
#: goes to the k-d tree; a wider radius costs each query more candidates.
_SEARCH_SPACINGS = 1.5


def _search_chord(data: NDArray[np.float64]) -> float:
    """A chord [unit sphere] of :data:`_SEARCH_SPACINGS` mean spacings of ``data``, from the
    area of the HEALPix pixels that hold a point, at the N_side where those pixels hold
    16–64 points on average (finer for data on a small patch of sky)."""
    n = len(data)
    nside = 1
    while 12 * nside * nside < n / 16 and nside < 8192:
        nside *= 2
    while True:
        pix = vec2pix(nside, data[:, 0], data[:, 1], data[:, 2])
        covered = np.count_nonzero(np.bincount(pix, minlength=hp.nside2npix(nside)))
        per_pixel = n / covered
        if per_pixel <= 64 or nside >= 8192:
            break
        # each doubling of N_side quarters the pixels' area
        nside = min(8192, nside * 2 ** int(np.ceil(0.5 * np.log2(per_pixel / 16))))
    area = covered * hp.nside2pixarea(nside)
    return float(min(2.0, _SEARCH_SPACINGS * np.sqrt(area / n)))


def nearest_on_sphere(query: NDArray[np.float64], data: NDArray[np.float64]
                      ) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """The nearest data point of each query point, both unit vectors.

    The strips of :func:`close_pairs_sphere` answer every query with a data point within
    1.5 mean spacings of the data (on numba's threads); the rest (queries in a hole of the
    data, or outside it) go to a k-d tree of the data.

    Parameters
    ----------
    query : ndarray (Nq, 3)
        Unit vectors (dimensionless).
    data : ndarray (N, 3), N ≥ 1
        Unit vectors (dimensionless).

    Returns
    -------
    chord : ndarray (Nq,)
        Distance to the nearest data point, as a chord of the unit sphere.
    index : ndarray of int64 (Nq,)
        Its row in ``data`` (the smaller one at a tie); the same as
        ``scipy.spatial.cKDTree(data).query(query, k=1)``.
    """
    query = np.ascontiguousarray(query, dtype=np.float64).reshape(-1, 3)
    data = np.ascontiguousarray(data, dtype=np.float64).reshape(-1, 3)
    if len(data) == 0:
        raise ValueError("nearest_on_sphere: no data points")
    if len(query) == 0:
        return np.zeros(0), np.zeros(0, dtype=np.int64)
    chord = _search_chord(data)
    width = chord * (1.0 + _MARGIN)
    best = _nearest_within(query, data, chord, width, int(np.floor(2.0 / width)) + 1)
    index = best[:, 1].astype(np.int64)
    dist = np.sqrt(best[:, 0])
    missed = np.flatnonzero(index < 0)
    if missed.size:
        # an unbalanced tree of plain nodes builds in half the time; the nearest is the same
        tree = cKDTree(data, balanced_tree=False, compact_nodes=False)
        dist[missed], index[missed] = tree.query(query[missed], k=1, workers=query_workers())
    return dist, index
