"""Checking and normalising the point sets handed to the counters."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError


@dataclass
class Points:
    """Positions, weights and jackknife region labels of one point set.

    Attributes
    ----------
    pos : ndarray, shape (N, 3), float64
        Cartesian positions [Mpc/h].
    w : ndarray, shape (N,), float64
        Weights (1 for unweighted points).
    reg : ndarray, shape (N,), int64
        Jackknife region in [0, n_regions) (all 0 when there is no jackknife).
    """

    pos: NDArray[np.float64]
    w: NDArray[np.float64]
    reg: NDArray[np.int64]

    @property
    def n(self) -> int:
        return int(self.w.size)


def check_points(pos: ArrayLike, w: ArrayLike | None, reg: ArrayLike | None, n_regions: int,
                 name: str) -> Points:
    """Validate one point set.

    Parameters
    ----------
    pos : array_like, shape (N, 3)
        Positions [Mpc/h].
    w : array_like, shape (N,) or None
        Weights; ``None`` means unit weights.  Must be finite.
    reg : array_like, shape (N,) or None
        Region labels in [0, n_regions); required when ``n_regions > 0``.
    n_regions : int
        Number of jackknife regions (0: no jackknife).
    name : str
        How the error messages call this point set (``data``, ``randoms``, …).
    """
    p = np.ascontiguousarray(pos, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 3:
        raise InputError(f"{name}: positions must have shape (N, 3) in Mpc/h, got {p.shape}")
    n = p.shape[0]
    if not np.all(np.isfinite(p)):
        bad = int(np.argwhere(~np.isfinite(p))[0, 0])
        raise InputError(f"{name}: position of point {bad} is not finite ({p[bad].tolist()})")
    if w is None:
        ww = np.ones(n, dtype=np.float64)
    else:
        ww = np.ascontiguousarray(w, dtype=np.float64).ravel()
        if ww.size != n:
            raise InputError(f"{name}: {ww.size} weights for {n} points")
        if not np.all(np.isfinite(ww)):
            bad = int(np.argwhere(~np.isfinite(ww))[0, 0])
            raise InputError(f"{name}: weight of point {bad} is {ww[bad]} (weights must be "
                             "finite numbers)")
    n_regions = int(n_regions)
    if n_regions < 0:
        raise InputError(f"n_regions must be ≥ 0, got {n_regions}")
    if n_regions == 0:
        rr = np.zeros(n, dtype=np.int64)
    else:
        if reg is None:
            raise InputError(f"{name}: region labels are needed for n_regions = {n_regions}")
        rr = np.ascontiguousarray(reg).ravel()
        if rr.size != n:
            raise InputError(f"{name}: {rr.size} region labels for {n} points")
        if rr.size and not np.issubdtype(rr.dtype, np.integer):
            raise InputError(f"{name}: region labels must be integers, got dtype {rr.dtype}")
        rr = rr.astype(np.int64)
        if rr.size and (rr.min() < 0 or rr.max() >= n_regions):
            raise InputError(f"{name}: region labels must lie in [0, {n_regions}), got range "
                             f"[{rr.min()}, {rr.max()}] (points outside every region?)")
    return Points(pos=p, w=ww, reg=rr)


def region_sums(pts: Points, n_regions: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Per-region Σw and Σw², shape (n_regions,) each (empty when no jackknife)."""
    if n_regions == 0:
        return np.zeros(0), np.zeros(0)
    return (np.bincount(pts.reg, weights=pts.w, minlength=n_regions).astype(np.float64),
            np.bincount(pts.reg, weights=pts.w**2, minlength=n_regions).astype(np.float64))
