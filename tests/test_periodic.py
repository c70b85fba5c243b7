"""Wrapping into a periodic box against the numpy expression it replaces, bit for bit.

Reference: ``numpy.mod`` (the C fmod plus the period when the signs differ, +0.0 for a zero
result), with L → 0 where a tiny negative coordinate rounds up to L.
"""

from __future__ import annotations

import numpy as np
import pytest

from conecheck.periodic import numpy_mod, wrap_columns, wrap_into_box

L = 585.0
EDGES = np.array([0.0, -0.0, 5e-324, -5e-324, -1e-17, 1e-300, L, -L, 2 * L, -3 * L,
                  np.nextafter(L, 0.0), np.nextafter(L, 2 * L), np.nextafter(-L, 0.0),
                  np.nextafter(0.0, -1.0), L - 1e-13, 1e18, -1e18])


def _expected(x: np.ndarray, box_size: float) -> np.ndarray:
    m = np.mod(x, box_size)
    m[m >= box_size] = 0.0
    return m


def _bits(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a).view(np.int64)


def test_numpy_mod_is_numpy_s_value_for_every_kind_of_input():
    rng = np.random.default_rng(1)
    xs = np.concatenate([EDGES, rng.uniform(-4 * L, 4 * L, 2000)])
    for period in (L, 1.0, 117.0):
        got = np.array([numpy_mod(x, period) for x in xs])
        assert np.array_equal(_bits(got), _bits(np.mod(xs, period)))


@pytest.mark.parametrize("shape", [(2000,), (700, 3), (20, 10, 3)])
def test_wrap_into_box_equals_the_numpy_expression(shape):
    rng = np.random.default_rng(2)
    x = rng.uniform(-3 * L, 4 * L, shape)
    x.reshape(-1)[:EDGES.size] = EDGES
    got = wrap_into_box(x, L)
    assert got.shape == x.shape and got.dtype == np.float64
    assert np.array_equal(_bits(got), _bits(_expected(x, L)))
    assert np.all((got >= 0.0) & (got < L))
    # strided input, and integers
    assert np.array_equal(_bits(wrap_into_box(x[::2], L)), _bits(_expected(x[::2], L)))
    ints = np.arange(-1200, 1200, 7)
    assert np.array_equal(wrap_into_box(ints, L), _expected(ints.astype(float), L))


def test_wrap_columns_picks_and_wraps_the_axes_in_order():
    rng = np.random.default_rng(3)
    pos = rng.uniform(-L, 2 * L, (5000, 3))
    pos[:EDGES.size, 0] = EDGES
    pos[:EDGES.size, 2] = EDGES[::-1]
    for axes in ([0, 1, 2], [1, 2, 0], [2, 0, 1], [0, 2]):
        got = wrap_columns(pos, L, axes)
        assert got.flags.c_contiguous and got.shape == (len(pos), len(axes))
        assert np.array_equal(_bits(got), _bits(_expected(pos[:, axes], L)))
