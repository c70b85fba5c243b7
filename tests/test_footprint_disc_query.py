"""Disc queries in RING order against healpy's ``query_disc(..., inclusive=False)``
(reference library): the same pixels, disc by disc and in the same order, over N_sides
from 1 to 2²⁹; discs round both poles, across φ = 0, and up to and beyond π in radius;
and the per-disc sums of parent values against healpy's pixels converted by
``healpy.ring2nest``."""

from __future__ import annotations

import healpy as hp
import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.footprint.disc_query import parent_value_sums, query_discs


def _healpy(nside, vec, radius):
    lists = [hp.query_disc(nside, v, r) for v, r in zip(vec, radius, strict=True)]
    return np.concatenate(lists).astype(np.int64), np.array([len(q) for q in lists])


@pytest.mark.parametrize("nside", [1, 2, 16, 128, 4096, 2**17, 2**29])
def test_same_pixels_as_healpy(nside):
    rng = np.random.default_rng(nside % 997)
    n = 1500
    vec = rng.normal(size=(n, 3))
    vec[:60, 2] = np.sign(vec[:60, 2]) * 1e3  # centres next to the poles
    # radii from a tenth of a pixel to tens of pixels (to a whole sphere at small N_side)
    top = min(np.pi * 1.05, 40.0 * hp.nside2resol(nside))
    radius = np.exp(rng.uniform(np.log(0.1 * hp.nside2resol(nside)), np.log(top), n))
    pix, counts = query_discs(nside, vec, radius)
    ref_pix, ref_counts = _healpy(nside, vec, radius)
    np.testing.assert_array_equal(counts, ref_counts)
    np.testing.assert_array_equal(pix, ref_pix)
    assert counts.sum() > n  # not a run of empty discs


def test_poles_and_the_zero_meridian_exactly():
    vec = np.array([[0, 0, 1.0], [0, 0, -1.0], [1, 0, 0], [1, -1e-17, 0], [1, 1e-300, 0.3],
                    [-1, 0, 0], [0, 1e-20, 1]])
    for nside in (1, 8, 64):
        for radius in (0.01, 0.3, 1.0, 2.0, 3.0, 3.1415, np.pi, 4.0):
            r = np.full(len(vec), radius)
            pix, counts = query_discs(nside, vec, r)
            ref_pix, ref_counts = _healpy(nside, vec, r)
            np.testing.assert_array_equal(counts, ref_counts)
            np.testing.assert_array_equal(pix, ref_pix)


def test_parent_value_sums_equal_healpys_pixels_summed():
    nside = 32
    rng = np.random.default_rng(3)
    fractional = rng.uniform(size=hp.nside2npix(nside))
    fractional[fractional < 0.3] = 0.0
    n = 2000
    vec = rng.normal(size=(n, 3))
    radius = np.exp(rng.uniform(np.log(0.01), np.log(0.15), n))
    level = rng.integers(0, 5, n)
    ref_sums = {}
    for name, vals in (("fractional", fractional), ("binary", (fractional > 0) * 1.0)):
        sums, counts = parent_value_sums(vals, vec, radius, level)
        ref = np.empty(n)
        ref_counts = np.empty(n, dtype=np.int64)
        for i in range(n):
            nside_q = nside << int(level[i])
            sub = hp.ring2nest(nside_q, hp.query_disc(nside_q, vec[i], radius[i]))
            ref[i] = vals[sub >> (2 * int(level[i]))].sum()
            ref_counts[i] = sub.size
        np.testing.assert_array_equal(counts, ref_counts)
        ref_sums[name] = (sums, ref)
    # a map of 0s and 1s sums exactly in any order; otherwise equal up to the rounding of
    # a sum of ≲ 10⁴ terms in another order (≲ 10⁴ · 2⁻⁵³ relative)
    np.testing.assert_array_equal(*ref_sums["binary"])
    np.testing.assert_allclose(*ref_sums["fractional"], rtol=1e-12, atol=0.0)


def test_bad_arguments_are_refused():
    with pytest.raises(InputError, match="nside"):
        query_discs(12, [[1.0, 0.0, 0.0]], [0.1])
    with pytest.raises(InputError, match="radii"):
        query_discs(16, [[1.0, 0.0, 0.0]], [np.nan])
    with pytest.raises(InputError, match="12 N_side"):
        parent_value_sums(np.ones(100), [[1.0, 0.0, 0.0]], [0.1], [0])
    with pytest.raises(InputError, match="levels"):
        parent_value_sums(np.ones(12 * 16**2), [[1.0, 0.0, 0.0]], [0.1], [26])
