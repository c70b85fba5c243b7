"""Cells in angle and distance for cone pair counts whose cylinder is long and thin.

A cubic cell grid serves a cone count well when r_p,max and π_max are alike, but a thin
cylinder (r_p,max ≪ π_max, as in the small-scale RR that the split random method leaves
whole) sits inside cubes of side ~π_max that hold hundreds of times its volume, and finer
cubes pay more in point–cell windows than they save.  Here a cell is a column along the
line of sight instead: a patch of sky, a few r_p,max across, times a shell of distance χ,
with its points sorted by χ, so the kernel's χ window of ±π_max prunes along the line of
sight and the few neighbouring columns prune across it.

Geometry (observer at the origin, midpoint line of sight):

* |χ₁ − χ₂| ≤ |π|, so shells farther apart than π_max never pair (see :mod:`.grid`);
* r_p = 2 χ₁ χ₂ sin θ / |r₁ + r₂| ≥ sin θ / ((1/χ₁ + 1/χ₂)/2), θ the angle between the
  two points, because |r₁ + r₂| ≤ χ₁ + χ₂; so two points at χ ≥ χ_a and χ ≥ χ_b pair only if
  sin θ ≤ r_p,max (1/χ_a + 1/χ_b)/2;
* θ > 90° needs χ₁² + χ₂² ≤ |s|² < r_p,max² + π_max², so shells farther out than that
  pair only below 90°, where the sine bound fixes θ.

Angles are latitude and longitude in a frame whose equator passes through the mean
direction of the points: a cap of radius R around that direction spans latitudes up to R,
so a footprint well inside a hemisphere keeps clear of the frame's poles, where a
column's reach in longitude widens (the counts stay exact there, only slower).  Shells
grow with χ (each at least ``SHELL_MIN_PI`` π_max thick and ``SHELL_RATIO`` times its
inner radius), and each shell's cells are r_p,max / ``refine`` across at its inner
radius, so a column's width tracks the angular reach over the shell.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from numba import prange
from numpy.typing import NDArray

from . import _sorting
from .grid import MAX_CELLS, GriddedPoints

#: Shells are at least this many π_max thick, so a point's χ window (±π_max) meets at most
#: two shells and the columns it visits stay few ...
SHELL_MIN_PI = 2.0
#: ... and at least this fraction of their inner radius, so the shells' number grows only
#: as log(χ_max/χ_min) where π_max is small against χ.
SHELL_RATIO = 0.5
#: Cells across per r_p,max at a shell's inner radius. Below one, a column is wider than the
#: reach, so a point visits three columns per row of three rows. This and the two shell
#: constants were chosen by timing auto counts of 2·10⁵ to 1.7·10⁶ points uniform in caps
#: (45 < χ < 440 and 600 < χ < 1200 Mpc/h, r_p ≤ 2.45 to 20, π_max = 40 Mpc/h) over
#: 0.25 to 2 cells, 1 to 4 π_max and 0.1 to 1 (benchmarks/RESULTS.md, twelfth pass).
SKY_REFINE = 0.7
#: Widest cell [rad]: near the observer the reach is large and cells need not be finer.
MAX_CELL_ANGLE = 0.25


@dataclass(frozen=True)
class SkyGrid:
    """Columns in angle and distance over the points of a cone count.

    Attributes
    ----------
    basis : ndarray, shape (3, 3)
        Rows: the frame's axes (the mean direction of the points, then two axes across
        it); latitude is measured from the plane of the first two.
    chi_edges : ndarray, shape (n_shells + 1,)
        Shell edges in distance χ [Mpc/h]; the first is the smallest χ of the points.
    lat0, lon0 : ndarray, shape (n_shells,)
        Lower latitude and longitude of each shell's cell grid [rad].
    dlat, dlon : ndarray, shape (n_shells,)
        Cell sides in latitude and longitude [rad].
    n_lat, n_lon : ndarray, shape (n_shells,), int64
        Cells along latitude and longitude.
    offset : ndarray, shape (n_shells + 1,), int64
        Flat index of each shell's first cell (cell ``offset[b] + i n_lon[b] + j``).
    periodic : bool
        Whether longitude wraps (the points surround the frame's axis).
    """

    basis: NDArray[np.float64]
    chi_edges: NDArray[np.float64]
    lat0: NDArray[np.float64]
    lon0: NDArray[np.float64]
    dlat: NDArray[np.float64]
    dlon: NDArray[np.float64]
    n_lat: NDArray[np.int64]
    n_lon: NDArray[np.int64]
    offset: NDArray[np.int64]
    periodic: bool

    @property
    def n_cells(self) -> int:
        return int(self.offset[-1])


@numba.njit(parallel=True, cache=True)
def _angles(pos, basis):
    """Distance χ [Mpc/h], latitude and longitude [rad] of each position in ``basis``."""
    n = pos.shape[0]
    chi = np.empty(n)
    lat = np.empty(n)
    lon = np.empty(n)
    for i in prange(n):
        px = pos[i, 0]
        py = pos[i, 1]
        pz = pos[i, 2]
        # the same expression as the cubic grid's key, so both layouts see equal χ
        c = np.sqrt(px * px + py * py + pz * pz)
        chi[i] = c
        a = (px * basis[0, 0] + py * basis[0, 1] + pz * basis[0, 2]) / c
        b = (px * basis[1, 0] + py * basis[1, 1] + pz * basis[1, 2]) / c
        h = (px * basis[2, 0] + py * basis[2, 1] + pz * basis[2, 2]) / c
        lat[i] = np.arcsin(min(max(h, -1.0), 1.0))
        lon[i] = np.arctan2(b, a)
    return chi, lat, lon


@numba.njit(parallel=True, cache=True)
def _cell_ids(chi, lat, lon, chi_edges, lat0, lon0, dlat, dlon, n_lat, n_lon, offset, periodic):
    """Flat sky-cell index of each point (clipped onto its shell's grid)."""
    n = chi.size
    n_shells = lat0.size
    cid = np.empty(n, dtype=np.int64)
    for i in prange(n):
        b = np.searchsorted(chi_edges, chi[i], side="right") - 1
        b = min(max(b, 0), n_shells - 1)
        ia = min(max(np.int64(np.floor((lat[i] - lat0[b]) / dlat[b])), 0), n_lat[b] - 1)
        ja = np.int64(np.floor((lon[i] - lon0[b]) / dlon[b]))
        if periodic:
            ja = ja % n_lon[b]
        else:
            ja = min(max(ja, 0), n_lon[b] - 1)
        cid[i] = offset[b] + ia * n_lon[b] + ja
    return cid


@numba.njit(parallel=True, cache=True)
def _direction_sum(pos):
    """Sum of the unit vectors of ``pos`` (N, 3)."""
    n = pos.shape[0]
    n_chunks = max(1, min(64, n))
    part = np.zeros((n_chunks, 3))
    for c in prange(n_chunks):
        for i in range(c * n // n_chunks, (c + 1) * n // n_chunks):
            inv = 1.0 / np.sqrt(pos[i, 0] ** 2 + pos[i, 1] ** 2 + pos[i, 2] ** 2)
            for k in range(3):
                part[c, k] += pos[i, k] * inv
    return part.sum(axis=0)


def _frame(pos_list: list[NDArray[np.float64]]) -> NDArray[np.float64]:
    """Orthonormal rows: the points' mean direction and two axes across it."""
    mean = sum(_direction_sum(p) for p in pos_list)
    norm = float(np.linalg.norm(mean))
    # points spread evenly over the sky have no mean direction: any frame will do
    e1 = mean / norm if norm > 1e-6 * sum(len(p) for p in pos_list) else np.array([1.0, 0, 0])
    # the world axis least aligned with e1 fixes the other two
    helper = np.eye(3)[int(np.argmin(np.abs(e1)))]
    e3 = np.cross(e1, helper)
    e3 /= np.linalg.norm(e3)
    e2 = np.cross(e3, e1)
    return np.vstack([e1, e2, e3])


def shell_edges(chi_min: float, chi_max: float, pi_max: float) -> NDArray[np.float64]:
    """Shell edges in χ [Mpc/h] from ``chi_min`` to ``chi_max`` (see the module notes)."""
    edges = [float(chi_min)]
    # at least one shell, even when every point has the same χ; the last edge may lie
    # beyond chi_max (the kernel's bounds only need every point inside its shell)
    while len(edges) == 1 or edges[-1] < chi_max:
        lo = edges[-1]
        edges.append(lo + max(SHELL_MIN_PI * pi_max, SHELL_RATIO * lo))
    return np.asarray(edges, dtype=np.float64)


def sky_grid(pos_list: list[NDArray[np.float64]], rp_max: float, pi_max: float,
             refine: float = SKY_REFINE) -> tuple[SkyGrid, list[tuple[NDArray[np.float64], ...]]]:
    """Sky columns over the point sets of a cone count, with each set's (χ, lat, lon).

    Parameters
    ----------
    pos_list : list of ndarray, shape (N, 3)
        Positions [Mpc/h], observer at the origin, none at the origin itself.
    rp_max, pi_max : float
        Largest r_p and |π| counted [Mpc/h].
    refine : float
        Cells per r_p,max across, at each shell's inner radius.

    Returns
    -------
    grid : SkyGrid
    angles : list of (chi, lat, lon) per point set
    """
    basis = _frame(pos_list)
    angles = [_angles(np.ascontiguousarray(p, dtype=np.float64), basis) for p in pos_list]
    chi_min = min(float(a[0].min()) for a in angles)
    chi_max = max(float(a[0].max()) for a in angles)
    lat_min = min(float(a[1].min()) for a in angles)
    lat_max = max(float(a[1].max()) for a in angles)
    lon_min = min(float(a[2].min()) for a in angles)
    lon_max = max(float(a[2].max()) for a in angles)
    # a footprint spanning more than half a turn in longitude wraps: its points' longitude
    # differences must be taken modulo 2π
    periodic = lon_max - lon_min > np.pi
    edges = shell_edges(chi_min, chi_max, pi_max)
    inner = edges[:-1]
    scale = 1.0
    while True:
        side = np.minimum(scale * rp_max / (refine * inner), MAX_CELL_ANGLE)
        n_lat = np.floor((lat_max - lat_min) / side).astype(np.int64) + 1
        if periodic:
            n_lon = np.maximum(np.floor(2.0 * np.pi / side).astype(np.int64), 1)
            dlon = 2.0 * np.pi / n_lon
            lon0 = np.full(inner.size, -np.pi)
        else:
            n_lon = np.floor((lon_max - lon_min) / side).astype(np.int64) + 1
            dlon = side
            lon0 = np.full(inner.size, lon_min)
        if int(np.sum(n_lat * n_lon)) <= MAX_CELLS:
            break
        scale *= 1.25
    offset = np.concatenate([[0], np.cumsum(n_lat * n_lon)]).astype(np.int64)
    grid = SkyGrid(basis=basis, chi_edges=edges, lat0=np.full(inner.size, lat_min),
                   lon0=lon0, dlat=side, dlon=dlon, n_lat=n_lat, n_lon=n_lon, offset=offset,
                   periodic=bool(periodic))
    return grid, angles


def sort_into_sky_grid(grid: SkyGrid, pos: NDArray[np.float64],
                       angles: tuple[NDArray[np.float64], ...], w: NDArray[np.float64],
                       reg: NDArray[np.int64]) -> GriddedPoints:
    """Points sorted by (sky cell, χ), as the cone kernels want them (see :mod:`.grid`)."""
    chi, lat, lon = angles
    cid = _cell_ids(chi, lat, lon, grid.chi_edges, grid.lat0, grid.lon0, grid.dlat, grid.dlon,
                    grid.n_lat, grid.n_lon, grid.offset, grid.periodic)
    order, start = _sorting.sort_by_cell(cid, chi, grid.n_cells)
    x, y, z, los, ws, rs = _sorting.gather_sorted(np.ascontiguousarray(pos, dtype=np.float64),
                                                  w, reg, chi, order)
    return GriddedPoints(x=x, y=y, z=z, los=los, w=ws, reg=rs, idx=order, start=start)
