"""Coordinates wrapped into a periodic box [0, L).

One rule for every box coordinate: the value of ``numpy.mod`` (the C fmod, plus L when the
signs differ; a zero result is +0.0), except that L itself, which ``numpy.mod`` returns
for a tiny negative coordinate by rounding, becomes 0. Each function equals the numpy
expression ``m = np.mod(x, L); m[m >= L] = 0.0`` to the bit and runs in one parallel
numba pass (numpy makes three).
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange
from numpy.typing import ArrayLike, NDArray


@numba.njit(cache=True, inline="always")
def numpy_mod(x, period):
    """``numpy.mod(x, period)`` of one float, period > 0 (no change of L to 0: a tiny
    negative x gives the period itself, as numpy does)."""
    if 0.0 < x < period:
        return x  # fmod is x itself here
    m = np.fmod(x, period)
    if m == 0.0:
        return 0.0  # +0.0, as numpy gives for −0.0 and for exact multiples
    if m < 0.0:
        m += period
    return m


@numba.njit(cache=True, inline="always")
def wrap_coordinate(x, box_size):
    """One coordinate [Mpc/h] wrapped into [0, ``box_size``)."""
    m = numpy_mod(x, box_size)
    return 0.0 if m >= box_size else m


@numba.njit(parallel=True, cache=True)
def _wrap_flat(x, box_size, out):
    for i in prange(x.size):
        out[i] = wrap_coordinate(x[i], box_size)


@numba.njit(parallel=True, cache=True)
def _wrap_columns(pos, box_size, axes):
    out = np.empty((pos.shape[0], axes.size))
    for i in prange(pos.shape[0]):
        for c in range(axes.size):
            out[i, c] = wrap_coordinate(pos[i, axes[c]], box_size)
    return out


def wrap_into_box(values: ArrayLike, box_size: float) -> NDArray[np.float64]:
    """Coordinates [Mpc/h] of any shape wrapped into [0, L), L = ``box_size`` [Mpc/h]."""
    v = np.asarray(values, dtype=np.float64)
    flat = np.ascontiguousarray(v).reshape(-1)
    out = np.empty_like(flat)
    _wrap_flat(flat, float(box_size), out)
    return out.reshape(v.shape)


def wrap_columns(position: ArrayLike, box_size: float, axes: ArrayLike
                 ) -> NDArray[np.float64]:
    """Columns ``axes`` of positions [Mpc/h], shape (N, ≥ max(axes) + 1), wrapped into
    [0, L) (L = ``box_size`` [Mpc/h]), in that order, as a new C-ordered (N, len(axes))
    array: e.g. the axes across the line of sight first, then along it."""
    p = np.asarray(position, dtype=np.float64)
    return _wrap_columns(p, float(box_size), np.asarray(axes, dtype=np.int64))


__all__ = ["numpy_mod", "wrap_columns", "wrap_coordinate", "wrap_into_box"]
