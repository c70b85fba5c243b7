"""Cell grids: points sorted by cell (and by line-of-sight coordinate inside a cell).

The counters only ever compare points in neighbouring cells.  Points are re-ordered so
that each cell is one contiguous slice of structure-of-arrays coordinates, and within a
cell they are sorted by the line-of-sight coordinate (box: the LOS axis; cone: the
comoving distance χ), which lets the kernels bracket the |Δ_LOS| < π_max window with a
moving pointer instead of testing every point of the neighbour cell.

For a cone, |π| ≥ |χ₁ − χ₂| for the midpoint line of sight, because
π = |χ₁² − χ₂²| / |r₁ + r₂| and |r₁ + r₂| ≤ χ₁ + χ₂; so the χ window prunes exactly.
Across the line of sight, cone cells are cubes, finer where the points are dense
(:func:`cone_refine`), and the kernel drops the cell pairs and point-cell pairs that a
geometric bound rules out, so the candidates hug the (r_p, π) cylinder wherever the line
of sight points.  A thin cylinder (r_p,max ≪ π_max) is counted in columns of sky and
distance instead (:mod:`.sky_grid`), sorted the same way.  The sort itself is a counting
sort in numba (:mod:`._sorting`).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from . import _sorting

#: Upper bound on the number of cells of one grid (memory of the cell-start arrays).
MAX_CELLS = 1 << 22


@dataclass(frozen=True)
class Grid:
    """A regular grid of cells.

    Attributes
    ----------
    origin : ndarray, shape (3,)
        Lower corner [Mpc/h] (0 for a periodic box).
    cell : ndarray, shape (3,)
        Cell side along each axis [Mpc/h].
    dims : ndarray, shape (3,), int64
        Number of cells along each axis.
    periodic : bool
        Whether the grid wraps (periodic box of side ``box_size``).
    box_size : float
        Box side [Mpc/h] (0 when not periodic).
    """

    origin: NDArray[np.float64]
    cell: NDArray[np.float64]
    dims: NDArray[np.int64]
    periodic: bool
    box_size: float

    @property
    def n_cells(self) -> int:
        return int(np.prod(self.dims))

    def cell_of(self, pos: NDArray[np.float64]) -> NDArray[np.int64]:
        """Flat cell index of each position (clipped onto the grid)."""
        ijk = np.floor((pos - self.origin) / self.cell).astype(np.int64)
        np.clip(ijk, 0, self.dims - 1, out=ijk)
        return (ijk[:, 0] * self.dims[1] + ijk[:, 1]) * self.dims[2] + ijk[:, 2]


@dataclass
class GriddedPoints:
    """Points re-ordered by cell, as contiguous arrays for the kernels.

    ``x, y, z`` are the coordinates (for a box, ``z`` is the line of sight), ``los`` the
    sorting key inside a cell (box: ``z``; cone: χ), ``idx`` the original index of each
    sorted point and ``start`` the cell offsets (cell c is ``start[c]:start[c+1]``).
    """

    x: NDArray[np.float64]
    y: NDArray[np.float64]
    z: NDArray[np.float64]
    los: NDArray[np.float64]
    w: NDArray[np.float64]
    reg: NDArray[np.int64]
    idx: NDArray[np.int64]
    start: NDArray[np.int64]


def sort_into_grid(grid: Grid, pos: NDArray[np.float64], w: NDArray[np.float64],
                   reg: NDArray[np.int64], chi_key: bool) -> GriddedPoints:
    """Sort points by (cell, LOS key) and build the cell offsets.

    Parameters
    ----------
    grid : Grid
    pos : ndarray, shape (N, 3)
        Positions [Mpc/h] (a box's in its LOS-along-z frame; a cone's with the observer at
        the origin).
    w, reg : ndarray, shape (N,)
        Weights and jackknife regions, carried along.
    chi_key : bool
        Key inside a cell: the distance χ from the origin [Mpc/h] (cones) or the third
        coordinate (boxes).
    """
    x, y, z, los, ws, rs, order, start = _sorting.grid_sort(
        np.ascontiguousarray(pos, dtype=np.float64), w, reg, grid.origin, grid.cell,
        grid.dims, bool(chi_key))
    return GriddedPoints(x=x, y=y, z=z, los=los, w=ws, reg=rs, idx=order, start=start)


def box_grid(box_size: float, ext_perp: float, ext_los: float, refine: int = 2,
             min_side: float = 0.0) -> Grid:
    """Periodic grid, LOS along the third axis.

    Cells are about ``ext_perp / refine`` across, or ``min_side`` [Mpc/h] when that is
    larger, and ``ext_los`` along the LOS (the sorted LOS window makes finer LOS cells
    pointless), longer when the grid would exceed :data:`MAX_CELLS` cells.
    """
    side = max(ext_perp / refine, float(min_side))
    n_perp = max(1, int(np.floor(box_size / side)))
    n_los = max(1, int(np.floor(box_size / ext_los)))
    # above MAX_CELLS, longer LOS cells first (the LOS window prunes inside a cell), then
    # wider ones
    n_los = max(1, min(n_los, MAX_CELLS // (n_perp * n_perp)))
    while n_perp * n_perp * n_los > MAX_CELLS:
        n_perp = max(1, n_perp // 2)
    dims = np.array([n_perp, n_perp, n_los], dtype=np.int64)
    return Grid(origin=np.zeros(3), cell=box_size / dims.astype(np.float64), dims=dims,
                periodic=True, box_size=float(box_size))


def cone_grid(pos_list: list[NDArray[np.float64]], ext: float, refine: int = 2) -> Grid:
    """Non-periodic cubic grid over the bounding box of all point sets.

    Cells are ``ext / refine`` on a side, enlarged when the grid would exceed
    :data:`MAX_CELLS` cells.
    """
    corners = [_sorting.bounds(np.ascontiguousarray(p, dtype=np.float64))
               for p in pos_list if len(p)]
    lo = np.min([c[0] for c in corners], axis=0)
    hi = np.max([c[1] for c in corners], axis=0)
    span = np.maximum(hi - lo, 1e-9)
    side = ext / refine
    dims = np.maximum(1, np.ceil(span / side).astype(np.int64))
    while np.prod(dims) > MAX_CELLS:
        side *= 1.25
        dims = np.maximum(1, np.ceil(span / side).astype(np.int64))
    cell = np.maximum(span / dims, side)
    return Grid(origin=lo.astype(np.float64), cell=cell.astype(np.float64), dims=dims,
                periodic=False, box_size=0.0)


#: Finest cone cells the automatic choice uses: r_max / this.
CONE_REFINE_MAX = 3
#: Partner points per cell of an auto count below which finer cone cells cost more than
#: they save; a cross count needs twice as many (see :func:`cone_refine`).
CONE_POINTS_PER_CELL = 30.0


def cone_refine(pos_list: list[NDArray[np.float64]], ext: float) -> int:
    """Cells per ``ext`` [Mpc/h] for a cone count, chosen from the points.

    Finer cells let the cell-pair test of the cone kernel hug the (r_p, π) cylinder, but
    every cell pair and every point-cell window costs a fixed overhead, which windows
    holding few partner points do not repay. The partners are the last set of
    ``pos_list``: the set itself for an auto count, set 2 for a cross count (for
    data–random counts the randoms, which fill the windows). The rule: the finest of
    1 … :data:`CONE_REFINE_MAX` cells per ``ext`` whose cells still hold, on average over
    the occupied cells of the coarsest grid, :data:`CONE_POINTS_PER_CELL` partner points
    for an auto count, or twice that for a cross count, which visits every neighbour
    cell rather than half of them and so pays twice the windows per point. The
    threshold was fitted on benchmarks/bench_pairs.py's auto counts (a nearby wide shell
    and a distant cap); the factor two matches the eight data–random counts of
    bench_pairs.py and of benchmarks/bench_run.py's two workloads (470 to 4,100 randoms
    per coarse cell), where it picks the fastest level or one within 5 % of it.
    """
    coarse = cone_grid(pos_list, ext, refine=1)
    partner = np.ascontiguousarray(pos_list[-1], dtype=np.float64)
    if partner.shape[0] == 0 or len(pos_list[0]) == 0:
        return 1
    occupied = _sorting.occupied_cells(partner, coarse.origin, coarse.cell, coarse.dims)
    per_cell = partner.shape[0] / max(occupied, 1)
    threshold = CONE_POINTS_PER_CELL * (1.0 if len(pos_list) == 1 else 2.0)
    r = int(np.floor(np.cbrt(per_cell / threshold)))
    return int(min(max(r, 1), CONE_REFINE_MAX))


def neighbour_offsets(grid: Grid, ext_perp: float, ext_los: float, shape: str,
                      half: bool) -> NDArray[np.int64]:
    """Cell offsets that can hold a partner, shape (n_offsets, 3).

    Parameters
    ----------
    grid : Grid
    ext_perp, ext_los : float
        Largest separation across / along the LOS [Mpc/h] (box), or both the largest 3-d
        separation (cone, where the LOS turns from cell to cell).
    shape : {"cylinder", "sphere"}
        How the two extents combine when pruning offsets by the closest cell distance.
    half : bool
        Keep only half of the offsets (zero first, then the lexicographically positive
        ones) so an auto count meets each unordered pair once.
    """
    reach = np.ceil(np.array([ext_perp, ext_perp, ext_los]) / grid.cell).astype(np.int64)
    out = []
    for off in itertools.product(*(range(-r, r + 1) for r in reach)):
        gap = np.maximum(np.abs(off) - 1, 0) * grid.cell
        if shape == "cylinder":
            if gap[0] ** 2 + gap[1] ** 2 >= ext_perp**2 or gap[2] >= ext_los:
                continue
        elif gap @ gap >= max(ext_perp, ext_los) ** 2:
            continue
        if half and off < (0, 0, 0):
            continue
        out.append(off)
    out.sort(key=lambda o: o != (0, 0, 0))
    return np.array(out, dtype=np.int64).reshape(-1, 3)
