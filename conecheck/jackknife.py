"""Delete-one jackknife covariances (docs/design.md §7).

Given K delete-one estimates x_k of a p-vector, the covariance is
C = (K − 1)/K Σ_k (x_k − x̄)(x_k − x̄)ᵀ (e.g. Efron 1982, *The Jackknife, the Bootstrap
and Other Resampling Plans*, SIAM; the usual form in clustering work).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError
from .periodic import numpy_mod


def jackknife_covariance(delete_one: ArrayLike) -> NDArray[np.float64]:
    """Covariance of the full-sample estimate from delete-one vectors.

    Parameters
    ----------
    delete_one : array_like, shape (K, p)
        Row k is the statistic recomputed with region k removed.

    Returns
    -------
    ndarray, shape (p, p)
    """
    x = np.asarray(delete_one, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    k = x.shape[0]
    if k < 2:
        raise InputError(f"jackknife needs at least 2 regions, got {k}")
    if not np.all(np.isfinite(x)):
        bad = np.argwhere(~np.isfinite(x))[0]
        raise InputError(f"jackknife: delete-one vector {bad[0]} has a non-finite value in bin "
                         f"{bad[1]} (an empty region or a bin with no pairs?)")
    d = x - x.mean(axis=0)
    return (k - 1) / k * d.T @ d


def jackknife_mean_variance(values: ArrayLike) -> float:
    """Delete-one jackknife variance of a plain mean: equals s²/n (textbook identity)."""
    v = np.asarray(values, dtype=np.float64)
    n = v.size
    delete_one = (v.sum() - v) / (n - 1)
    return float(jackknife_covariance(delete_one[:, None])[0, 0])


# --------------------------------------------------------------------------- box sub-volumes
BOX_LAYOUTS = ("columns", "cubes")


@dataclass(frozen=True)
class BoxRegions:
    """Equal jackknife sub-volumes of a periodic box (docs/design.md §7).

    ``columns``: an n_side × n_side grid of columns running the full box length along the
    line of sight (K = n_side²), so no pair along the LOS is cut more than across it;
    ``cubes``: n_side³ cubes.

    Attributes
    ----------
    box_size : float
        Box side L [Mpc/h].
    los_axis : int
        Line-of-sight axis (0, 1, 2).
    n_side : int
        Sub-volumes per box side.
    layout : str
        ``columns`` or ``cubes``.
    """

    box_size: float
    los_axis: int = 2
    n_side: int = 4
    layout: str = "columns"

    def __post_init__(self) -> None:
        if self.layout not in BOX_LAYOUTS:
            raise InputError(f"jackknife layout: expected one of {BOX_LAYOUTS}, "
                             f"got {self.layout!r}")
        if not (isinstance(self.n_side, (int, np.integer)) and self.n_side >= 1):
            raise InputError(f"jackknife n_side: expected a positive integer, got {self.n_side!r}")
        if self.los_axis not in (0, 1, 2):
            raise InputError(f"los_axis: expected 0, 1 or 2, got {self.los_axis!r}")
        if not (np.isfinite(self.box_size) and self.box_size > 0):
            raise InputError(f"box_size: expected a positive number of Mpc/h, "
                             f"got {self.box_size!r}")

    @property
    def k(self) -> int:
        """Number of regions K."""
        return int(self.n_side ** (2 if self.layout == "columns" else 3))

    @property
    def side(self) -> float:
        """Side of a sub-volume across the LOS [Mpc/h]."""
        return self.box_size / self.n_side

    def region_of(self, position: ArrayLike) -> NDArray[np.int64]:
        """Region label of each position [Mpc/h] (wrapped into the box), shape (N,)."""
        p = np.asarray(position, dtype=np.float64)
        if p.ndim != 2 or p.shape[1] != 3:
            raise InputError(f"positions must have shape (N, 3) in Mpc/h, got {p.shape}")
        axes = [a for a in range(3) if a != self.los_axis] + [self.los_axis]
        if self.layout == "columns":
            axes = axes[:2]  # a column is the same at every depth: the LOS axis is not read
        return _region_labels(p, np.array(axes, dtype=np.int64), float(self.box_size),
                              float(self.side), int(self.n_side))

    def columns_within(self, u: ArrayLike, v: ArrayLike, reach: float
                       ) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
        """The positions that may lie within ``reach`` [Mpc/h] of each column, across the
        LOS (``columns`` layout).

        Parameters
        ----------
        u, v : array_like, shape (N,)
            Coordinates [Mpc/h] along the first and second axis across the LOS (those of
            the labels ``i * n_side + j``), in any periodic image.
        reach : float
            Distance from a column's square [Mpc/h], at least 0.

        Returns
        -------
        (start, index)
            Column k's candidates are ``index[start[k]:start[k + 1]]``, ascending: every
            position whose periodic image nearest to the column lies within ``reach`` of its
            square (with a margin of 10⁻⁹ L for rounding, so a few beyond it may come too;
            the caller applies its own exact test). One pass over the positions instead of
            one per column.
        """
        if self.layout != "columns":
            raise ValueError("columns_within: the layout is not 'columns'")
        uu = np.ascontiguousarray(u, dtype=np.float64)
        vv = np.ascontiguousarray(v, dtype=np.float64)
        return _columns_within(uu, vv, float(self.side), int(self.n_side),
                               float(reach) + 1e-9 * self.box_size)


def box_regions(position: ArrayLike, box_size: float, los_axis: int = 2, n_side: int = 4,
                layout: str = "columns") -> NDArray[np.int64]:
    """Jackknife region labels of box positions: columns along the LOS or cubes.

    Parameters
    ----------
    position : array_like, shape (N, 3)
        Positions [Mpc/h].
    box_size : float
        Box side L [Mpc/h].
    los_axis : int
        Line-of-sight axis.
    n_side : int
        Sub-volumes per side: K = n_side² (columns) or n_side³ (cubes).
    layout : {"columns", "cubes"}

    Returns
    -------
    ndarray of int, shape (N,)
    """
    return BoxRegions(float(box_size), int(los_axis), int(n_side), layout).region_of(position)


@numba.njit(cache=True, inline="always")
def _column_span(x, side, n_side, reach):
    """First column index and number of columns (at most ``n_side``) whose interval
    [i side, (i + 1) side), widened by ``reach``, holds ``x`` in some periodic image."""
    lo = math.floor((x - reach) / side)
    hi = math.floor((x + reach) / side)
    return lo, min(hi - lo + 1, n_side)


@numba.njit(cache=True)
def _columns_within(u, v, side, n_side, reach):
    """:meth:`BoxRegions.columns_within` as (start, index): a count pass, then a fill pass
    in the order of the positions (serial, so each column's list comes out ascending)."""
    k_total = n_side * n_side
    counts = np.zeros(k_total + 1, dtype=np.int64)
    for g in range(u.size):  # pass 1: how many positions each column takes
        ilo, ni = _column_span(u[g], side, n_side, reach)
        jlo, nj = _column_span(v[g], side, n_side, reach)
        for a in range(ni):
            i = (ilo + a) % n_side
            for b in range(nj):
                counts[i * n_side + (jlo + b) % n_side + 1] += 1
    start = np.cumsum(counts)
    index = np.empty(start[k_total], dtype=np.int64)
    fill = start[:k_total].copy()
    for g in range(u.size):  # pass 2: positions in ascending order within each column
        ilo, ni = _column_span(u[g], side, n_side, reach)
        jlo, nj = _column_span(v[g], side, n_side, reach)
        for a in range(ni):
            i = (ilo + a) % n_side
            for b in range(nj):
                k = i * n_side + (jlo + b) % n_side
                index[fill[k]] = g
                fill[k] += 1
    return start, index


@numba.njit(parallel=True, cache=True)
def _region_labels(p, axes, box_size, side, n_side):
    """Sub-volume label of each row of ``p`` from the coordinates ``axes`` (two: columns,
    three: cubes): ⌊mod(x, L) / side⌋ per axis, clipped to [0, n_side − 1], the first axis
    slowest."""
    out = np.empty(p.shape[0], dtype=np.int64)
    for g in numba.prange(p.shape[0]):
        lab = 0
        for a in range(axes.size):
            i = np.int64(math.floor(numpy_mod(p[g, axes[a]], box_size) / side))
            lab = lab * n_side + min(max(i, 0), n_side - 1)
        out[g] = lab
    return out
