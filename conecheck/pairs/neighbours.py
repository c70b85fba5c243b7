"""Per-centre weighted neighbour counts in cylinders, annuli and spheres.

For each centre the counters return the summed weight of the points in each radial shell
``edges[b] ≤ r < edges[b+1]``:

* with ``half_length = H``: r is the projected separation r_p and only points with
  |π| < H count (a cylinder when the shell is [0, R), an annulus otherwise);
* with ``half_length = None``: r is the 3-d separation |s| (spheres, shells).

Box: LOS along ``los_axis``, minimum image.  Cone: LOS at the midpoint of the centre and
the neighbour, exactly as for the pair counts, so a cylinder count equals the number of
pairs the (r_p, π) counter would find around that centre.
"""

from __future__ import annotations

import numba
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from ..errors import InputError
from ..periodic import wrap_into_box
from . import _kernels
from .binning import check_box_extent, check_rp_edges
from .counts import _check_axis, to_box_frame
from .grid import MAX_CELLS, box_grid, cone_grid, neighbour_offsets, sort_into_grid
from .points import check_points

#: Points per box cell (across the LOS, one cylinder half-length along it) the neighbour
#: counter aims at when the points are sparse, in cells at least r_max across.
NEIGHBOUR_CELL_POINTS = 0.3
#: Points an r_max-wide cell would hold above which the counter takes cells r_max / refine
#: across instead (dense points: candidates then cost more than cell visits).
NEIGHBOUR_DENSE_POINTS = 16.0

#: Fixed chunks of points of the box's nearest-point search (each keeps its own minima, so
#: the result does not depend on the number of threads).
NEAREST_CHUNKS = 16

#: Largest number of centre cells per centre in that search (cells no finer than that: an
#: empty cell still costs each nearby point a visit).
NEAREST_CELLS_PER_CENTRE = 64


def query_workers() -> int:
    """Threads for a scipy k-d tree query: as many as numba's kernels use, which each run
    sets (one per dask worker process, every core locally), so the queries do not
    oversubscribe the cores."""
    return max(1, numba.get_num_threads())


def _self_index(exclude_self: ArrayLike | None, same: bool, n_centres: int,
                n_points: int) -> NDArray[np.int64]:
    if same:
        return np.arange(n_centres, dtype=np.int64)
    if exclude_self is None:
        return np.full(n_centres, -1, dtype=np.int64)
    idx = np.asarray(exclude_self, dtype=np.int64).ravel()
    if idx.size != n_centres or (idx.size and (idx.min() < -1 or idx.max() >= n_points)):
        raise InputError(f"exclude_self: expected {n_centres} point indices in [-1, {n_points})")
    return idx


def _check_half_length(half_length: float | None) -> float | None:
    if half_length is None:
        return None
    h = float(half_length)
    if not (np.isfinite(h) and h > 0):
        raise InputError(f"half_length: expected a positive number of Mpc/h, got {half_length}")
    return h


def neighbours_box(centres: ArrayLike, points: ArrayLike | None = None,
                   weights: ArrayLike | None = None, *, box_size: float, los_axis: int = 2,
                   edges: ArrayLike, half_length: float | None = None,
                   exclude_self: ArrayLike | None = None, refine: int = 2
                   ) -> NDArray[np.float64]:
    """Weighted neighbour counts around each centre in a periodic box.

    Parameters
    ----------
    centres : array_like, shape (Nc, 3)
        Centre positions [Mpc/h].
    points : array_like, shape (N, 3), optional
        Neighbour positions [Mpc/h]; ``None`` uses the centres themselves and skips each
        centre's own point.
    weights : array_like, shape (N,), optional
        Neighbour weights (default 1).
    box_size : float
        Box side L [Mpc/h].
    los_axis : int
        Line-of-sight axis (0, 1, 2).
    edges : array_like
        Shell edges [Mpc/h] in r_p (with ``half_length``) or |s| (without).
    half_length : float, optional
        Cylinder half-length H [Mpc/h] (|π| < H); ``None`` for spheres.
    exclude_self : array_like of int, shape (Nc,), optional
        Index into ``points`` of each centre's own point (−1: none) to skip.

    Returns
    -------
    ndarray, shape (Nc, len(edges) − 1)
        Summed neighbour weight per centre and shell.
    """
    e = check_rp_edges(edges, "edges")
    h = _check_half_length(half_length)
    box_size = float(box_size)
    los_axis = _check_axis(los_axis)
    ext_los = e[-1] if h is None else h
    check_box_extent(e[-1], box_size, "largest radius")
    check_box_extent(ext_los, box_size, "cylinder half-length")
    c = check_points(centres, None, None, 0, "centres")
    same = points is None
    p = c if same else check_points(points, None, None, 0, "points")
    pw = check_points(p.pos, weights, None, 0, "points").w
    self_idx = _self_index(exclude_self, same, c.n, p.n)
    out = np.zeros((c.n, e.size - 1))
    if c.n == 0 or p.n == 0:
        return out
    # cells across the LOS: r_max / refine for dense points; otherwise never narrower than
    # r_max (a partner then lies in the 3 × 3 columns around a centre's: cells between
    # r_max / 2 and r_max need 5 × 5 and ran 1.3-2.3x slower), widened to hold about
    # NEIGHBOUR_CELL_POINTS points (a cell visit costs about as much as a candidate); the
    # sweep behind both constants is in benchmarks/RESULTS.md (thirteenth pass)
    density = p.n / box_size**3
    if density * e[-1] ** 2 * ext_los > NEIGHBOUR_DENSE_POINTS:
        grid = box_grid(box_size, e[-1], ext_los, refine=max(1, int(refine)))
    else:
        grid = box_grid(box_size, e[-1], ext_los, refine=1,
                        min_side=float(np.sqrt(NEIGHBOUR_CELL_POINTS / (density * ext_los))))
    offsets = neighbour_offsets(grid, e[-1], ext_los, "cylinder" if h else "sphere", half=False)
    a = to_box_frame(p.pos, box_size, los_axis)
    g = sort_into_grid(grid, a, pw, p.reg, chi_key=False)
    cg = g if same else sort_into_grid(grid, to_box_frame(c.pos, box_size, los_axis),
                                       np.zeros(c.n), np.zeros(c.n, np.int64), chi_key=False)
    tasks = np.flatnonzero(np.diff(cg.start)).astype(np.int64)
    _kernels.neighbours_box_kernel(
        cg.x, cg.y, cg.z, cg.idx, self_idx[cg.idx], cg.start, tasks, g.x, g.y, g.z, g.w,
        g.idx, g.start, offsets, grid.dims, box_size, e**2, ext_los, h is None, out)
    return out


def neighbours_cone(centres: ArrayLike, points: ArrayLike | None = None,
                    weights: ArrayLike | None = None, *, edges: ArrayLike,
                    half_length: float | None = None, exclude_self: ArrayLike | None = None,
                    refine: int = 1) -> NDArray[np.float64]:
    """Weighted neighbour counts around each centre on a cone (observer at the origin).

    Parameters are those of :func:`neighbours_box` without ``box_size``/``los_axis``;
    positions are Cartesian [Mpc/h] and cylinders use the centre–neighbour midpoint LOS.
    The cubic cells are r_max / ``refine`` on a side, r_max = √(R² + H²): each centre
    visits the cells around its own and searches each one's χ-sorted points, so few large
    cells pay (cells of r_max were 1.2–2.5x faster than r_max / 2 from 8,000 to 2·10⁶
    points, up to 74 per cell; benchmarks/RESULTS.md, thirteenth pass).
    """
    e = check_rp_edges(edges, "edges")
    h = _check_half_length(half_length)
    c = check_points(centres, None, None, 0, "centres")
    same = points is None
    p = c if same else check_points(points, None, None, 0, "points")
    pw = check_points(p.pos, weights, None, 0, "points").w
    self_idx = _self_index(exclude_self, same, c.n, p.n)
    out = np.zeros((c.n, e.size - 1))
    if c.n == 0 or p.n == 0:
        return out
    ext = e[-1] if h is None else float(np.hypot(e[-1], h))
    grid = cone_grid([p.pos], ext, refine=max(1, int(refine)))
    offsets = neighbour_offsets(grid, ext, ext, "sphere", half=False)
    g = sort_into_grid(grid, p.pos, pw, p.reg, chi_key=True)
    _kernels.neighbours_cone_kernel(
        np.ascontiguousarray(c.pos[:, 0]), np.ascontiguousarray(c.pos[:, 1]),
        np.ascontiguousarray(c.pos[:, 2]), self_idx, g.x, g.y, g.z, g.los, g.w, g.idx,
        g.start, offsets, grid.dims, grid.origin, grid.cell, e**2, 0.0 if h is None else h,
        h is None, out)
    return out


def nearest_distance(centres: ArrayLike, points: ArrayLike, *, r_max: float,
                     box_size: float | None = None) -> NDArray[np.float64]:
    """Distance from each centre to its nearest point, or +∞ when none lies within ``r_max``.

    A sphere of radius R around a centre is empty exactly when this distance is ≥ R, which
    is all the void probability function needs: one nearest-point search stopped at
    ``r_max`` per centre instead of every neighbour in every shell. In a box the few
    centres are sorted into a periodic grid of cells at least ``r_max`` wide and the many
    points stream past them unsorted, each visiting the 27 cells around its own (numba):
    neither a sort nor a tree of the million points is built, and the search takes about
    a seventh of the time of scipy's periodic cKDTree on 1.8 million points and 20,000
    centres. On a cone (tens of thousands of points) it is one query of scipy's cKDTree.
    Both use as many threads as numba does, so a dask worker of one thread stays on one
    core.

    Parameters
    ----------
    centres : array_like, shape (Nc, 3)
        Centre positions [Mpc/h].
    points : array_like, shape (N, 3)
        Point positions [Mpc/h].
    r_max : float
        Largest distance of interest [Mpc/h].
    box_size : float, optional
        Periodic box side [Mpc/h] (minimum-image distances); None for a cone.
    """
    c = check_points(centres, None, None, 0, "centres").pos
    p = check_points(points, None, None, 0, "points").pos
    if not (np.isfinite(r_max) and r_max > 0):
        raise InputError(f"r_max: expected a positive number of Mpc/h, got {r_max}")
    out = np.full(len(c), np.inf)
    if len(c) == 0 or len(p) == 0:
        return out
    # a point at exactly r_max, found or not, leaves a sphere of radius r_max empty
    if box_size is None:
        d, _ = cKDTree(p).query(c, k=1, distance_upper_bound=float(r_max),
                                workers=query_workers())
        out[:] = d
        return out
    box_size = float(box_size)
    check_box_extent(r_max, box_size, "largest radius")
    r2_max = float(r_max) ** 2
    # centre cells at least r_max wide, so the 27 around a point's cell hold every centre
    # within r_max; at most NEAREST_CELLS_PER_CENTRE cells per centre and MAX_CELLS in all
    n_side = max(1, min(int(box_size // r_max),
                        int(np.ceil((NEAREST_CELLS_PER_CENTRE * len(c)) ** (1 / 3))),
                        int(MAX_CELLS ** (1 / 3))))
    dims = np.full(3, n_side, dtype=np.int64)
    cw = wrap_into_box(c, box_size)
    ijk = np.minimum((cw / (box_size / n_side)).astype(np.int64), n_side - 1)
    cell = (ijk[:, 0] * n_side + ijk[:, 1]) * n_side + ijk[:, 2]
    order = np.argsort(cell, kind="stable")
    cstart = np.searchsorted(cell[order], np.arange(n_side**3 + 1)).astype(np.int64)
    cs = cw[order]
    best = np.full((NEAREST_CHUNKS, len(c)), r2_max)
    _kernels.nearest_box_kernel(
        p[:, 0], p[:, 1], p[:, 2], np.ascontiguousarray(cs[:, 0]),
        np.ascontiguousarray(cs[:, 1]), np.ascontiguousarray(cs[:, 2]), cstart, dims,
        box_size, r2_max, best)
    r2 = np.empty(len(c))
    r2[order] = best.min(axis=0)
    found = r2 < r2_max
    out[found] = np.sqrt(r2[found])
    return out
