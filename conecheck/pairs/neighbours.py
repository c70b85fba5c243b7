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

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from . import _kernels
from .binning import check_box_extent, check_rp_edges
from .counts import _check_axis, to_box_frame
from .grid import box_grid, cone_grid, neighbour_offsets, sort_into_grid
from .points import check_points


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
    grid = box_grid(box_size, e[-1], ext_los, refine=max(1, int(refine)))
    offsets = neighbour_offsets(grid, e[-1], ext_los, "cylinder" if h else "sphere", half=False)
    a = to_box_frame(p.pos, box_size, los_axis)
    g = sort_into_grid(grid, a, pw, p.reg, chi_key=False)
    cc = to_box_frame(c.pos, box_size, los_axis)
    _kernels.neighbours_box_kernel(
        np.ascontiguousarray(cc[:, 0]), np.ascontiguousarray(cc[:, 1]),
        np.ascontiguousarray(cc[:, 2]), self_idx, g.x, g.y, g.z, g.w, g.idx, g.start, offsets,
        grid.dims, box_size, e**2, ext_los, h is None, out)
    return out


def neighbours_cone(centres: ArrayLike, points: ArrayLike | None = None,
                    weights: ArrayLike | None = None, *, edges: ArrayLike,
                    half_length: float | None = None, exclude_self: ArrayLike | None = None,
                    refine: int = 2) -> NDArray[np.float64]:
    """Weighted neighbour counts around each centre on a cone (observer at the origin).

    Parameters are those of :func:`neighbours_box` without ``box_size``/``los_axis``;
    positions are Cartesian [Mpc/h] and cylinders use the centre–neighbour midpoint LOS.
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
