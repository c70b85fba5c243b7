"""Redshift-space multipoles: Legendre projection, the box jackknife's exact random pairs,
the Kaiser (1987) limit and bad settings."""

from __future__ import annotations

import numpy as np
import pytest
import stats_helpers as sh

from conecheck.box.lognormal import (
    cic_interpolate,
    gaussian_field_k,
    linear_velocity,
    sample_in_cells,
    to_real,
)
from conecheck.errors import InputError
from conecheck.jackknife import BoxRegions
from conecheck.pairs import count_smu_box, count_smu_cone
from conecheck.pairs.binning import make_smu_bins
from conecheck.stats import STATISTICS, BoxSample, make_settings
from conecheck.stats.multipoles import (
    MultipolesSettings,
    _delete_one_dr_columns,
    box_pair_fractions,
    count_rr_cone,
    legendre_weights,
    multipoles_box,
)


def test_legendre_weights_project_polynomials_exactly():
    """Binned projection of ξ(μ) = a + b L_2(μ) + c L_4(μ) with ξ averaged over each bin
    returns (a, b, c): ∫₀¹ L_ℓ L_ℓ' dμ = δ_ℓℓ'/(2ℓ + 1) (Legendre orthogonality)."""
    edges = np.linspace(0.0, 1.0, 2001)  # fine bins: bin average ≈ midpoint value
    mu = 0.5 * (edges[1:] + edges[:-1])
    leg = np.polynomial.legendre.legval
    xi = 0.7 + 0.3 * leg(mu, [0, 0, 1]) - 0.2 * leg(mu, [0, 0, 0, 0, 1])
    got = legendre_weights(edges, (0, 2, 4)) @ xi
    assert np.allclose(got, [0.7, 0.3, -0.2], atol=1e-6)
    # a constant projects on ξ_0 only, exactly, whatever the bins
    w = legendre_weights(np.array([0.0, 0.1, 0.45, 1.0]), (0, 2, 4))
    assert np.allclose(w.sum(axis=1), [1.0, 0.0, 0.0], atol=1e-14)


def test_box_random_pairs_with_a_column_removed():
    """f_R, the random-pair fraction of a bin with one column removed, against uniform
    points in the remaining volume; the plain V_bin/V_R is visibly off.

    Noise: the fraction is a U-statistic of N ≈ 3.6·10⁴ points; its relative σ is about
    (2/√N)·rms(lost fraction of a point's shell) ≲ 2·10⁻³ (measured scatter 1–2·10⁻³ in the
    largest bins), so 6·10⁻³ is a 3σ margin while the plain formula is 3–5 % off there.
    """
    L, rng = 100.0, np.random.default_rng(1)
    bins = make_smu_bins([2.0, 6.0, 12.0, 20.0], 4)
    lay = BoxRegions(L, 2, 3, "columns")
    _, f_del = box_pair_fractions(bins, 4, L, lay, lay.k)
    pts = rng.uniform(0.0, L, (40_000, 3))
    rest = pts[lay.region_of(pts) != 4]
    rr = count_smu_box(rest, box_size=L, los_axis=2, bins=bins)
    assert np.all(np.abs(rr.total / rr.norm / f_del - 1.0) < 6e-3)
    plain = bins.shell_volumes() / (L**3 * (1.0 - 1.0 / lay.k))
    assert np.abs(plain[-1] / f_del[-1] - 1.0).min() > 0.02


def test_box_delete_one_dr_is_the_shell_outside_the_column():
    """DR_R/(W N_R) of the columns jackknife against the cross count of the galaxies left
    with uniform points in the remaining volume (the lost part of each shell is the
    ring-sampled Φ(ρ)); without it the largest bins are 5–10 % off. Relative noise of the
    cross count ≈ 1/√(pairs) ≤ 5·10⁻³ in the smallest bin, hence the 2·10⁻² margin."""
    L, rng = 100.0, np.random.default_rng(2)
    bins = make_smu_bins([2.0, 6.0, 12.0, 20.0], 4)
    gal = BoxSample.with_regions(rng.uniform(0.0, L, (3000, 3)), L, 2, n_side=3)
    dr = _delete_one_dr_columns(gal, bins, 4, gal.layout)
    k = 4
    pts = rng.uniform(0.0, L, (40_000, 3))
    rest = pts[gal.layout.region_of(pts) != k]
    cross = count_smu_box(gal.position[gal.region != k], pos2=rest, box_size=L, los_axis=2,
                          bins=bins)
    mc = cross.total / cross.norm
    assert np.all(np.abs(mc / dr[k] - 1.0) < 2e-2)
    plain = bins.shell_volumes() / (L**3 * (1.0 - 1.0 / 9.0))
    assert np.all(plain[-1] / dr[k][-1] - 1.0 > 0.03)


def _kaiser_box(seed: int):
    """A lognormal box whose points are displaced along z by f ψ_z, ψ the linear
    displacement of the Gaussian field (δ = −∇·ψ): linear redshift-space distortions."""
    L, grid, n, f = 300.0, 64, 100_000, 0.6
    rng = np.random.default_rng(seed)
    dk = gaussian_field_k(grid, L, lambda k: 8e3 * (k / 0.02) / (1 + (k / 0.02) ** 2.5), rng)
    g = to_real(dk, grid)
    pos, _ = sample_in_cells(np.exp(g - g.var() / 2), n, L, rng)
    psi = cic_interpolate(linear_velocity(dk, L, 1.0), pos, L)
    red = pos.copy()
    red[:, 2] = np.mod(pos[:, 2] + f * psi[:, 2], L)
    return L, f, pos, red


def test_kaiser_limit_on_a_box_with_linear_distortions():
    """Kaiser (1987, MNRAS 227, 1) with Hamilton's (1992, ApJ 385, L5) configuration-space
    form: ξ_0 = (1 + 2β/3 + β²/5) ξ and ξ_2 = (4β/3 + 4β²/7)(ξ − ξ̄), ξ̄(s) = 3 s⁻³ ∫₀ˢ ξ r² dr,
    β = f/b with b = 1 (a lognormal field exp(g) traces g at linear order).

    ξ is measured on the same points before the displacement, so cosmic variance mostly
    cancels; the amplitudes A (of ξ_2 against ξ − ξ̄) and B (ξ_0 against ξ) are fitted over
    16 ≤ s < 56 Mpc/h and their errors come from the paired delete-one vectors (the columns
    do not move with a shift along z). Over 12 seeds z_A had rms 0.85 and z_B rms 1.35 (the
    jackknife misses part of the ratio's variance from the box's few large modes), so the
    bounds are 4 × those rms.
    """
    L, f, pos, red = _kaiser_box(0)
    edges = np.array([0.0, 2, 4, 6, 8, 12, 16, 20, 24, 28, 32, 36, 40, 44, 48, 52, 56])
    st = MultipolesSettings(s_edges=tuple(edges), n_mu=20, ells=(0, 2))
    real = multipoles_box(BoxSample.with_regions(pos, L, 2, n_side=5), st)
    rsd = multipoles_box(BoxSample.with_regions(red, L, 2, n_side=5), st)
    n, use = edges.size - 1, slice(6, None)
    centres = real.bins[:n]
    vol = np.diff(edges**3)

    def amplitudes(r, s):
        xi = r[..., :n]
        cum = np.concatenate([np.zeros(xi.shape[:-1] + (1,)), np.cumsum(xi * vol, -1)], -1)
        xibar = np.stack([np.interp(centres**3, edges**3, c)
                          for c in cum.reshape(-1, n + 1)]).reshape(xi.shape) / centres**3
        q = (xi - xibar)[..., use]
        a = (s[..., n:][..., use] * q).sum(-1) / (q**2).sum(-1)
        b = (s[..., :n][..., use] * xi[..., use]).sum(-1) / (xi[..., use] ** 2).sum(-1)
        return a, b

    a, b = amplitudes(real.value, rsd.value)
    ak, bk = amplitudes(real.delete_one, rsd.delete_one)
    k = ak.size
    sig_a, sig_b = (np.sqrt((k - 1) / k * ((x - x.mean()) ** 2).sum()) for x in (ak, bk))
    beta = f
    k0, k2 = 1 + 2 * beta / 3 + beta**2 / 5, 4 * beta / 3 + 4 * beta**2 / 7
    assert real.value[6] > 10 * np.sqrt(real.covariance[6, 6])  # a real clustering signal
    assert abs(a - k2) < 4 * 0.85 * sig_a, (a, sig_a, k2)
    assert abs(b - k0) < 4 * 1.35 * sig_b, (b, sig_b, k0)
    # without distortions there is no quadrupole
    z2 = real.value[n:][use] / np.sqrt(np.diag(real.covariance)[n:][use])
    assert np.sqrt(np.mean(z2**2)) < 2.0


def test_registered_with_concatenated_bins():
    stat = STATISTICS["multipoles"]
    st = make_settings("multipoles", {"s_edges": [1.0, 5.0, 10.0], "ells": [4, 0]})
    assert st.ells == (0, 4) and stat.n_bins(st) == 4
    rng = np.random.default_rng(3)
    box = BoxSample.with_regions(rng.uniform(0, 60.0, (800, 3)), 60.0, 2, n_side=3)
    m = stat.measure_box(box, st)
    assert m.value.shape == (4,) and np.allclose(m.bins[:2], m.bins[2:])
    assert m.delete_one.shape == (9, 4)


@pytest.mark.parametrize("values, match", [
    ({"mu_max": 1.2}, "mu_max"),
    ({"mu_max": 0.0}, "mu_max"),
    ({"n_mu": 10, "mu_max": 0.55}, "whole number"),
    ({"ells": [1]}, "ells"),
    ({"ells": [0, 0]}, "ells"),
    ({"s_edges": [5.0, 2.0]}, "s_edges"),
    ({"n_mu": 0}, "n_mu"),
    ({"s_min": 10.0, "s_max": 5.0}, "s_max"),
    ({"rr_method": "half"}, "rr_method"),
    ({"split_above": -2.0}, "split_above"),
])
def test_bad_settings_name_the_key(values, match):
    with pytest.raises(InputError, match=match) as err:
        make_settings("multipoles", values)
    assert "statistics.multipoles" in str(err.value)


def test_jackknife_regions_too_small_for_the_largest_separation():
    rng = np.random.default_rng(4)
    box = BoxSample.with_regions(rng.uniform(0, 90.0, (500, 3)), 90.0, 2, n_side=3)
    with pytest.raises(InputError, match="fewer jackknife regions"):
        multipoles_box(box, MultipolesSettings(s_edges=(1.0, 35.0)))
    with pytest.raises(InputError, match=r"statistics.multipoles: largest s edge = 50"):
        multipoles_box(BoxSample(box.position, 90.0, 2), MultipolesSettings(s_edges=(1.0, 50.0)))
    box2 = BoxSample.with_regions(rng.uniform(0, 90.0, (500, 3)), 90.0, 2, n_side=2)
    with pytest.raises(InputError, match="more jackknife regions"):
        multipoles_box(box2, MultipolesSettings(s_edges=(1.0, 30.0)))


def test_split_rr_above_a_scale_joins_the_full_and_split_counts(monkeypatch):
    """(s, μ) RR with ``split_above``: the s bins starting below it equal the count of every
    random pair, the others the sum over the disjoint subsets, each over its own number of
    pairs (Keihänen et al. 2019, A&A 631, A73), delete-one normalisations included."""
    import conecheck.stats._common as common_module

    monkeypatch.setattr(common_module, "MIN_SPLIT_SUBSET", 1)
    rng = np.random.default_rng(8)
    geo = sh.geometry(sh.patch(16, ra=(0, 90), dec=(-30, 30)), 40.0, 110.0, 6)
    rand = sh.randoms(geo, 6000, rng)
    edges = (1.0, 2.0, 4.0, 8.0, 16.0)
    settings = MultipolesSettings(s_edges=edges, n_mu=5, rr_method="split", split_above=3.0)
    rr = count_rr_cone(rand, geo, settings, n_data=1000)
    assert rr.n_subsets == 6
    bins = make_smu_bins(edges, 5)
    full = count_smu_cone(rand.xyz, rand.w, rand.region, bins=bins, n_regions=6)
    parts = [count_smu_cone(rand.xyz[k::6], rand.w[k::6], rand.region[k::6],
                            bins=make_smu_bins(edges[2:], 5), n_regions=6) for k in range(6)]
    split = sum(parts[1:], parts[0])
    np.testing.assert_array_equal(rr.rp_edges, edges)
    np.testing.assert_allclose(rr.normalised()[:2], full.normalised()[:2], rtol=1e-12)
    np.testing.assert_allclose(rr.normalised()[2:], split.normalised(), rtol=1e-12)
    np.testing.assert_allclose(rr.normalised_delete_one()[:, 2:],
                               split.normalised_delete_one(), rtol=1e-12)
