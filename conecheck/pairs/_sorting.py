"""Numba kernels that put points into cells: bounds, cell index, and the sort by (cell, LOS).

The pair counters need every cell as one contiguous slice sorted by the line-of-sight
key.  ``np.lexsort`` does that in O(N log N) on one core and was most of the time of a
cone DR count with 10⁶ randoms; here a counting sort by cell (O(N)) is followed by a sort
of each cell by its key, cells in parallel.  The order is exactly ``lexsort``'s: the
counting sort keeps the original order inside a cell and the per-cell sort is stable, so
ties in the key stay in index order and the pair sums do not change.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

#: Cells up to this size are sorted by insertion, larger ones by a stable merge sort.
_INSERTION_MAX = 48


@numba.njit(parallel=True, cache=True)
def bounds(pos):
    """Lower and upper corner of the bounding box of ``pos`` (N, 3), N ≥ 1."""
    n = pos.shape[0]
    n_chunks = min(64, n)
    lo = np.empty((n_chunks, 3))
    hi = np.empty((n_chunks, 3))
    for c in prange(n_chunks):
        a = c * n // n_chunks
        b = (c + 1) * n // n_chunks
        for k in range(3):
            lo[c, k] = pos[a, k]
            hi[c, k] = pos[a, k]
        for i in range(a + 1, b):
            for k in range(3):
                v = pos[i, k]
                if v < lo[c, k]:
                    lo[c, k] = v
                if v > hi[c, k]:
                    hi[c, k] = v
    out_lo = np.empty(3)
    out_hi = np.empty(3)
    for k in range(3):
        out_lo[k] = lo[:, k].min()
        out_hi[k] = hi[:, k].max()
    return out_lo, out_hi


@numba.njit(cache=True)
def _sort_slice(order, key, s, e):
    """Stable sort of ``order[s:e]`` by ``key[order]``."""
    n = e - s
    if n <= _INSERTION_MAX:
        for a in range(s + 1, e):
            o = order[a]
            k = key[o]
            b = a - 1
            while b >= s and key[order[b]] > k:
                order[b + 1] = order[b]
                b -= 1
            order[b + 1] = o
    else:
        seg = order[s:e].copy()
        sub = np.argsort(key[seg], kind="mergesort")
        for a in range(n):
            order[s + a] = seg[sub[a]]


@numba.njit(parallel=True, cache=True)
def sort_by_cell(cid, key, n_cells):
    """Point indices sorted by (cell ``cid``, ``key``), ties in index order, and where each
    of the ``n_cells`` cells starts in that order (n_cells + 1 entries): a counting sort by
    cell, then each cell sorted by its key, cells in parallel."""
    n = cid.size
    start = np.zeros(n_cells + 1, dtype=np.int64)
    for i in range(n):
        start[cid[i] + 1] += 1
    for c in range(n_cells):
        start[c + 1] += start[c]
    fill = start[:-1].copy()
    order = np.empty(n, dtype=np.int64)
    for i in range(n):
        c = cid[i]
        order[fill[c]] = i
        fill[c] += 1
    occupied = np.flatnonzero(start[1:] - start[:-1] > 1)
    for t in prange(occupied.size):
        c = occupied[t]
        _sort_slice(order, key, start[c], start[c + 1])
    return order, start


@numba.njit(parallel=True, cache=True)
def grid_sort(pos, w, reg, origin, cell, dims, chi_key):
    """Points sorted by (cell, key): key = distance from the origin χ (``chi_key``, cones)
    or the third coordinate (boxes, LOS along z).

    Returns ``x, y, z, key, w, reg, idx, start`` as :class:`.grid.GriddedPoints` wants
    them; cell indices are clipped onto the grid like :meth:`.grid.Grid.cell_of`.
    """
    n = pos.shape[0]
    nx, ny, nz = dims[0], dims[1], dims[2]
    n_cells = nx * ny * nz
    cid = np.empty(n, dtype=np.int64)
    key = np.empty(n)
    for i in prange(n):
        px = pos[i, 0]
        py = pos[i, 1]
        pz = pos[i, 2]
        ix = min(max(np.int64(np.floor((px - origin[0]) / cell[0])), 0), nx - 1)
        iy = min(max(np.int64(np.floor((py - origin[1]) / cell[1])), 0), ny - 1)
        iz = min(max(np.int64(np.floor((pz - origin[2]) / cell[2])), 0), nz - 1)
        cid[i] = (ix * ny + iy) * nz + iz
        key[i] = np.sqrt(px * px + py * py + pz * pz) if chi_key else pz
    order, start = sort_by_cell(cid, key, n_cells)
    x, y, z, los, ws, rs = gather_sorted(pos, w, reg, key, order)
    return x, y, z, los, ws, rs, order, start


@numba.njit(parallel=True, cache=True)
def gather_sorted(pos, w, reg, key, order):
    """Coordinates (as three arrays), key, weights and regions taken in ``order``."""
    n = order.size
    x = np.empty(n)
    y = np.empty(n)
    z = np.empty(n)
    los = np.empty(n)
    ws = np.empty(n)
    rs = np.empty(n, dtype=reg.dtype)
    for a in prange(n):
        o = order[a]
        x[a] = pos[o, 0]
        y[a] = pos[o, 1]
        z[a] = pos[o, 2]
        los[a] = key[o]
        ws[a] = w[o]
        rs[a] = reg[o]
    return x, y, z, los, ws, rs


@numba.njit(cache=True)
def occupied_cells(pos, origin, cell, dims):
    """Number of distinct cells of the grid (``origin``, ``cell``, ``dims``) holding a point."""
    nx, ny, nz = dims[0], dims[1], dims[2]
    seen = np.zeros(nx * ny * nz, dtype=np.bool_)
    n = 0
    for i in range(pos.shape[0]):
        ix = min(max(np.int64(np.floor((pos[i, 0] - origin[0]) / cell[0])), 0), nx - 1)
        iy = min(max(np.int64(np.floor((pos[i, 1] - origin[1]) / cell[1])), 0), ny - 1)
        iz = min(max(np.int64(np.floor((pos[i, 2] - origin[2]) / cell[2])), 0), nz - 1)
        c = (ix * ny + iy) * nz + iz
        if not seen[c]:
            seen[c] = True
            n += 1
    return n
