"""Ratio of counts in two concentric cylinders against the binomial law on Poisson points.

Outside reference: for a Poisson process, the points inside the large cylinder around a
centre are independently and uniformly placed in it, so given N_large = n the number in
the small cylinder is Binomial(n, p) with p = V_small/V_large (the conditional uniformity
of a Poisson process, e.g. Daley & Vere-Jones 2003, *An Introduction to the Theory of
Point Processes*, vol. I; the reference is cited from memory). N_large itself is Poisson
with mean n̄ V_large, so the distribution of N_small/N_large is the mixture
Σ_n Pois(n) Σ_k Binom(k; n, p) [k/n in bin].
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from conecheck.errors import InputError
from conecheck.pairs import neighbours_box
from conecheck.stats import STATISTICS, BoxSample, ConeSample, make_settings
from conecheck.stats.count_ratio import CountRatioSettings, count_ratio_box, count_ratio_cone


def _mixture(s: CountRatioSettings, lam: float) -> np.ndarray:
    """P(ratio bin)/width for Poisson(lam) large counts and binomial small counts (n ≥ 1)."""
    e = s.edges
    n = np.arange(1, int(lam + 12 * np.sqrt(lam)) + 1)
    pn = stats.poisson.pmf(n, lam)
    pn /= pn.sum()  # the statistic leaves out N_large = 0
    out = np.zeros(e.size - 1)
    for ni, w in zip(n, pn, strict=True):
        k = np.arange(ni + 1)
        b = np.searchsorted(e, k / ni, side="right") - 1
        ok = (b >= 0) & (b < out.size)
        np.add.at(out, b[ok], w * stats.binom.pmf(k, ni, s.volume_ratio)[ok])
    return out / np.diff(e)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_poisson_box_follows_the_binomial_mixture(seed):
    L, nbar = 200.0, 0.01
    s = CountRatioSettings(r_small=2.0, r_large=4.0, half_length_small=8.0,
                           half_length_large=10.0)
    rng = np.random.default_rng(seed)
    pos = rng.random((rng.poisson(nbar * L**3), 3)) * L
    m = count_ratio_box(BoxSample.with_regions(pos, L, 2, n_side=5), s)
    lam = (len(pos) - 1) / L**3 * np.pi * s.r_large**2 * 2 * s.half_length_large
    want = _mixture(s, lam)
    sigma = np.sqrt(np.diag(m.covariance))
    # bins expected to hold ≥ 30 centres, where the jackknife σ is meaningful
    filled = want * np.diff(s.edges) * len(pos) >= 30
    assert filled.sum() >= 5
    z = (m.value - want)[filled] / sigma[filled]
    # z ~ N(0, 1) per bin (the jackknife σ of the centres is 10-20 % small, see
    # _count_distribution): |z| < 4.5 over ≤ 10 bins fails by chance with p < 1e-4
    assert np.abs(z).max() < 4.5, z
    # λ ≈ 10: an empty large cylinder has probability e^-λ ≈ 5e-5
    assert m.extra["undefined_fraction"] < 1e-3


def test_given_n_large_the_small_count_is_binomial():
    """The conditional law itself, pooled over centres with the same N_large."""
    L = 200.0
    rng = np.random.default_rng(7)
    pos = rng.random((rng.poisson(0.01 * L**3), 3)) * L
    small = neighbours_box(pos, box_size=L, edges=[0.0, 2.0], half_length=10.0)[:, 0]
    large = neighbours_box(pos, box_size=L, edges=[0.0, 5.0], half_length=10.0)[:, 0]
    p = 4.0 / 25.0
    for n in (10, 15, 20):
        k = small[large == n]
        # mean of m binomial draws: n p ± sqrt(n p (1 − p) / m); 5σ margin (centres that
        # share neighbours are weakly correlated)
        assert abs(k.mean() - n * p) < 5 * np.sqrt(n * p * (1 - p) / k.size), (n, k.mean())


def test_cone_ratio_uses_the_same_counts_as_the_box_far_from_the_observer():
    """A small patch far away is nearly plane-parallel: cone and box ratios agree up to the
    few centres whose neighbours sit on a cylinder's edge."""
    rng = np.random.default_rng(3)
    pts = rng.random((3000, 3)) * 60.0 + np.array([1e6, -30.0, -30.0])
    cone = ConeSample.from_xyz(pts)
    s = CountRatioSettings(edge_treatment="none")
    m = count_ratio_cone(cone, None, s, jackknife=False)
    box_like = BoxSample(pts - pts.min(axis=0), box_size=1000.0, los_axis=0)
    b = count_ratio_box(box_like, s, jackknife=False)
    # the cone's LOS is within 4e-5 rad of the x axis: separations move by < 1e-3 Mpc/h,
    # which can carry a neighbour across a cylinder's edge for a few centres (at 1e5 Mpc/h
    # it was 18 of 3000); allow 4 centres per bin
    assert np.allclose(m.value, b.value, rtol=0, atol=4.0 / (3000 * np.diff(s.edges).min()))


def test_registered_and_configurable():
    assert "count_ratio" in STATISTICS
    s = make_settings("count_ratio", {"r_small": 1.0, "r_large": 3.0, "n_ratio": 5})
    assert STATISTICS["count_ratio"].n_bins(s) == 5
    assert s.edges[-1] > 1.0  # a ratio of exactly 1 falls in the last bin


@pytest.mark.parametrize(("values", "key"), [
    ({"r_small": 5.0, "r_large": 2.0}, "r_small"),
    ({"half_length_small": 20.0}, "half_length_small"),
    ({"ratio_edges": [0.0, 0.5, 1.5]}, "ratio_edges"),
    ({"min_large_count": 0}, "min_large_count"),
])
def test_bad_settings_name_the_key(values, key):
    with pytest.raises(InputError, match=key):
        make_settings("count_ratio", values)


def test_a_region_without_defined_ratios_keeps_the_full_value():
    """A sparse region where no galaxy has a neighbour in the large cylinder: removing it
    removes no centre, so its delete-one value is the full value (and it is reported)."""
    rng = np.random.default_rng(8)
    L = 100.0
    # regions of n_side = 2 columns along z: region 0 is x, y < 50
    lonely = np.column_stack([np.full(4, 20.0), np.full(4, 20.0), [5.0, 30.0, 55.0, 80.0]])
    lonely[:, :2] += np.arange(4)[:, None] * 6.0
    parents = rng.uniform(0, L, (300, 3))
    parents = parents[(parents[:, 0] >= 55) | (parents[:, 1] >= 55)]
    pairs = np.vstack([parents, parents + rng.normal(0, 0.5, parents.shape)])
    box = BoxSample.with_regions(np.vstack([lonely, np.mod(pairs, L)]), L, 2, n_side=2)
    st = CountRatioSettings(r_small=1.0, r_large=3.0, half_length_small=3.0,
                            half_length_large=3.0, n_ratio=4)
    m = count_ratio_box(box, st, jackknife=True)
    assert m.extra["regions_without_centres"] == [0]
    np.testing.assert_allclose(m.delete_one[0], m.value, rtol=1e-12)
    assert not np.allclose(m.delete_one[1], m.value)
