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

import numba
import numpy as np
from numba import prange
from numpy.typing import NDArray

from ._sorting import _sort_slice

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
    start = np.zeros(n_strips + 1, dtype=np.int64)
    for i in range(n):
        start[sid[i] + 1] += 1
    for s in range(n_strips):
        start[s + 1] += start[s]
    fill = start[:-1].copy()
    order = np.empty(n, dtype=np.int64)
    for i in range(n):
        s = sid[i]
        order[fill[s]] = i
        fill[s] += 1
    busy = np.flatnonzero(start[1:] - start[:-1] > 1)
    for t in prange(busy.size):
        s = busy[t]
        _sort_slice(order, phi, start[s], start[s + 1])
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


@numba.njit(cache=True)
def _scan(a, xyz, order, phi, start, strip, win_same, win_next, c2, out, at):
    """Pairs of sorted point ``a`` with the later points of its strip and with the next
    strip, inside the azimuth windows; written to ``out`` from row ``at`` when ``out`` has
    rows, counted otherwise. Returns the number of pairs."""
    everything = 10.0  # above any azimuth: the scan runs to the end of its range
    s = strip[a]
    i = order[a]
    pa = phi[a]
    # own strip, forward in azimuth (each pair once: a window below π cannot meet itself)
    w = win_same[s]
    top = everything if w >= np.pi else pa + w
    found = _scan_range(i, a + 1, start[s + 1], top, xyz, order, phi, c2, out, at)
    if w < np.pi and pa + w > np.pi:
        found += _scan_range(i, start[s], a, pa + w - 2.0 * np.pi, xyz, order, phi, c2,
                             out, at + found)
    if s + 2 >= start.size:
        return found
    t0, t1 = start[s + 1], start[s + 2]
    w = win_next[s]
    if w >= np.pi:
        return found + _scan_range(i, t0, t1, everything, xyz, order, phi, c2, out,
                                   at + found)
    lo, hi = pa - w, pa + w
    found += _scan_range(i, _lower(phi, t0, t1, lo), t1, hi, xyz, order, phi, c2, out,
                         at + found)
    if lo < -np.pi:  # the window wraps below −π onto the top of the strip
        found += _scan_range(i, _lower(phi, t0, t1, lo + 2.0 * np.pi), t1, everything, xyz,
                             order, phi, c2, out, at + found)
    if hi > np.pi:  # … or above π onto its bottom
        found += _scan_range(i, t0, t1, hi - 2.0 * np.pi, xyz, order, phi, c2, out,
                             at + found)
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
