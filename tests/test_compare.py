"""Comparison stage: offsets, error budgets, Hartlap-corrected χ², verdicts and roll-ups."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from compare_helpers import correlated_cov, exact_measurement, noisy_measurement
from scipy import special, stats

from conecheck.compare import (
    VERDICT_RULES_TEXT,
    VerdictRules,
    bias_chi2,
    compare_statistic,
    cones_needed,
    critical_t,
    exit_code,
    gaussian_equivalent,
    hartlap_factor,
    min_regions_needed,
    rollup,
    rollup_verdicts,
    worst_verdict,
)
from conecheck.errors import InputError
from conecheck.stats.base import Measurement

C_PAIR = np.array([[1.0, 0.25], [0.25, 0.5]])


# --------------------------------------------------------------------------- Hartlap and χ²
def test_hartlap_factor_values():
    # Hartlap, Simon & Schneider 2007, A&A 464, 399, eq. 17: factor (n − p − 2)/(n − 1).
    assert hartlap_factor(10, 2) == pytest.approx(6 / 9)
    assert hartlap_factor(100, 10) == pytest.approx(88 / 99)
    assert min_regions_needed(5) == 8


def test_chi2_worked_example():
    """Hand-computed two-bin example.

    C_box = C_cone = [[1, 0.25], [0.25, 0.5]] → C_tot = [[2, 0.5], [0.5, 1]],
    det C_tot = 2 − 0.25 = 1.75, C_tot⁻¹ = [[1, −0.5], [−0.5, 2]] / 1.75.
    Δ = (11, 21) − (10, 20) = (1, 1): Δᵀ C_tot⁻¹ Δ = (1 − 0.5 − 0.5 + 2)/1.75 = 8/7.
    n = min(K_box = 12, K_cone = 10) = 10, p = 2: Hartlap factor (10 − 2 − 2)/(10 − 1) = 2/3
    (Hartlap et al. 2007), so χ² = 16/21 ≈ 0.7619.
    z = (1/√2, 1/√1). The p-value follows Hotelling's law for a covariance of m = n − 1 = 9
    degrees of freedom (Hotelling 1931, Ann. Math. Stat. 2, 360): with T² = 8/7 (before the
    Hartlap factor), F = (m − p + 1) T² / (p m) = 8 · (8/7) / 18 = 32/63 ~ F(2, 8), whose
    survival function for 2 numerator degrees of freedom is (d₂/(d₂ + 2F))^(d₂/2) (textbook
    closed form): p = (8/(8 + 64/63))⁴ = (63/71)⁴.
    """
    rng = np.random.default_rng(0)
    box = exact_measurement([10.0, 20.0], C_PAIR, 12, rng)
    cones = [exact_measurement([11.0, 21.0], C_PAIR, 10, rng) for _ in range(2)]
    r = compare_statistic(box, cones, VerdictRules()).to_dict()
    assert r["n_regions"] == 10
    assert r["hartlap_factor"] == pytest.approx(2 / 3)
    assert r["chi2"] == pytest.approx(16 / 21, rel=1e-10)
    assert r["dof"] == 2
    assert r["p_value"] == pytest.approx((63 / 71) ** 4, rel=1e-10)
    assert r["z"] == pytest.approx([1 / math.sqrt(2), 1.0], rel=1e-10)
    assert r["sigma_total"] == pytest.approx([math.sqrt(2), 1.0])
    assert r["fractional_offset"] == pytest.approx([0.1, 0.05])
    assert r["max_abs_z"] == pytest.approx(1.0)


def test_p_values_against_scipy_and_closed_form():
    # One bin: Hotelling's T² with m degrees of freedom is the square of Student's t with m
    # (Hotelling 1931), so P(T² > x) = 2 P(t_m > √x) (scipy.stats.t as the reference).
    res = bias_chi2([1.3], [[1.0]], n_regions=30)
    h = (30 - 1 - 2) / 29
    assert res.chi2 == pytest.approx(h * 1.69)
    assert res.p_value == pytest.approx(2 * stats.t.sf(1.3, 29), rel=1e-12)
    # General p: (m − p + 1) T²/(p m) ~ F(p, m − p + 1) (scipy.stats.f survival function).
    rng = np.random.default_rng(4)
    cov = correlated_cov(np.linspace(1, 3, 6), 0.3)
    d = rng.normal(size=6) * 2
    res = bias_chi2(d, cov, n_regions=40)
    t2 = d @ np.linalg.solve(cov, d)
    assert res.chi2 == pytest.approx((40 - 6 - 2) / 39 * t2, rel=1e-10)
    assert res.p_value == pytest.approx(stats.f.sf((39 - 6 + 1) * t2 / (6 * 39), 6, 34),
                                        rel=1e-10)
    # Many regions: the law tends to the χ² law (scipy.stats.chi2).
    res = bias_chi2(d, cov, n_regions=200_000)
    assert res.p_value == pytest.approx(stats.chi2.sf(t2, 6), rel=2e-3)


def test_hotelling_law_holds_for_jackknife_covariances():
    """The tail law against a Monte Carlo of jackknife covariances.

    16 regions, 8 bins: the covariance of a mean is estimated by the delete-one jackknife
    from 16 Gaussian region values, and an independent offset Δ ~ N(0, C) is tested against
    it. Under Hotelling's law the p-values are uniform, so the number below 0.01 in 3000
    draws is binomial(3000, 0.01): mean 30, sd 5.4; we allow 30 ± 4.5 sd. The χ² law on the
    same draws (the old rule, even with the Hartlap factor) puts several times more below its
    nominal point (cf. Sellentin & Heavens 2016, MNRAS 456, L132).
    """
    rng = np.random.default_rng(20)
    k, p, n_draws = 16, 8, 3000
    cov = correlated_cov(np.linspace(1.0, 2.0, p), 0.5)
    chol = np.linalg.cholesky(cov)
    below, below_chi2 = 0, 0
    for _ in range(n_draws):
        x = rng.normal(size=(k, p)) @ chol.T * math.sqrt(k)  # region values: cov of mean = C
        delete_one = (x.sum(axis=0) - x) / (k - 1)
        m = Measurement("wp", np.arange(p, dtype=float), x.mean(axis=0), delete_one=delete_one)
        d = chol @ rng.normal(size=p)
        res = bias_chi2(d, m.covariance, n_regions=k)
        below += res.p_value < 0.01
        below_chi2 += stats.chi2.sf(res.chi2, p) < 0.01
    print(f"p < 0.01: Hotelling {below}/{n_draws}, χ² law {below_chi2}/{n_draws}")
    assert abs(below - 30) <= 4.5 * math.sqrt(3000 * 0.01 * 0.99)
    assert below_chi2 > 60


def test_gaussian_equivalent_of_student_t():
    # One degree of freedom is the Cauchy law: P(|T| > t) = 1 − (2/π) arctan t (closed
    # form); the Gaussian equivalent g has erfc(g/√2) equal to it.
    t = np.array([0.5, 3.0, 30.0, -300.0])
    g = gaussian_equivalent(t, 1.0)
    tail = 1 - 2 / np.pi * np.arctan(np.abs(t))
    assert special.erfc(np.abs(g) / math.sqrt(2)) == pytest.approx(tail, rel=1e-9)
    assert np.sign(g).tolist() == [1, 1, 1, -1]
    assert gaussian_equivalent(t, math.inf) == pytest.approx(t)
    assert gaussian_equivalent([3.0], 1e7)[0] == pytest.approx(3.0, rel=1e-5)
    # the threshold that is as rare as 3 Gaussian σ, from scipy.stats.t
    assert critical_t(3.0, 3) == pytest.approx(stats.t.isf(stats.norm.sf(3.0), 3))


def test_cones_needed_is_the_smallest_count_that_would_settle_it():
    # Δ = 1, cone scatter 2: significance at N cones is 1/(2/√N) in t units with N − 1 dof;
    # 3 Gaussian σ needs √N > 6 at least, a little more for the t law.
    n = cones_needed(1.0, 2.0, 3.0, n_now=4)
    assert 37 <= n <= 45
    assert 1.0 > critical_t(3.0, n - 1) * 2.0 / math.sqrt(n)
    assert not 1.0 > critical_t(3.0, n - 2) * 2.0 / math.sqrt(n - 1)
    assert cones_needed(0.0, 2.0, 3.0, n_now=4) is None
    # a part of σ_Δ² that cones cannot reduce may make it impossible
    assert cones_needed(1.0, 2.0, 3.0, n_now=4, box_var=1.0) is None


def test_jackknife_of_a_mean_is_the_textbook_variance_of_the_mean():
    # Delete-one jackknife of a plain mean reproduces s²/n exactly (Efron 1982, SIAM,
    # "The Jackknife, the Bootstrap and Other Resampling Plans", ch. 3).
    x = np.random.default_rng(5).normal(3.0, 2.0, 37)
    m = Measurement("number_density", np.array([0.0]), np.array([x.mean()]),
                    delete_one=((x.sum() - x) / (x.size - 1))[:, None])
    assert m.covariance[0, 0] == pytest.approx(x.var(ddof=1) / x.size, rel=1e-12)


def test_hartlap_refusal_names_the_minimum():
    rng = np.random.default_rng(1)
    mu = np.linspace(1, 2, 5)
    cov = correlated_cov(0.1 * mu)
    box = noisy_measurement(mu, cov, 7, rng)
    cones = [noisy_measurement(mu, cov, 7, rng) for _ in range(3)]
    with pytest.raises(InputError, match="at least 8 jackknife regions"):
        compare_statistic(box, cones)
    # n = p + 3 is accepted.
    box = noisy_measurement(mu, cov, 8, rng)
    cones = [noisy_measurement(mu, cov, 8, rng) for _ in range(3)]
    assert compare_statistic(box, cones).to_dict()["hartlap_factor"] == pytest.approx(1 / 7)


# --------------------------------------------------------------------------- verdicts
def _shared_box_run(seed: int, n_cones: int = 8, k: int = 30, shift=None,
                    scatter: float = 0.3) -> dict:
    """Cones cut from one box: they share the box's fluctuation f and differ by e_i.

    b = μ + f and c_i = μ + f + e_i (+ a planted shift), f ~ N(0, C), e_i ~ N(0, scatter² C):
    given the box the cones are independent draws, the model behind σ_Δ² = diag(S)/N.
    """
    rng = np.random.default_rng(seed)
    mu = np.array([100.0, 50.0, 20.0, 8.0, 3.0, 1.0])
    cov = correlated_cov(0.05 * mu, 0.4)
    f = np.linalg.cholesky(cov) @ rng.normal(size=mu.size)
    box = noisy_measurement(mu, cov, k, rng)
    box.value = mu + f
    cones = []
    for _ in range(n_cones):
        c = noisy_measurement(mu, cov, k, rng)
        e = scatter * np.linalg.cholesky(cov) @ rng.normal(size=mu.size)
        c.value = mu + f + e + (0 if shift is None else shift)
        cones.append(c)
    return compare_statistic(box, cones, VerdictRules()).to_dict()


def test_null_setup_is_calibrated_and_rarely_fails():
    """Shared-box null: Δ/σ_Δ is Student-t with N − 1 dof, its Gaussian equivalent N(0, 1).

    Over 300 seeds × 6 bins (correlated, ρ = 0.4^|i−j|, so fewer than 1800 independent
    values) the rms of the Gaussian-equivalent significance has a standard error of about
    1/√(2 · 900) ≈ 0.024; we allow 1 ± 0.1. A fail needs a > 3 σ (Gaussian-equivalent)
    offset in a bin that also lies outside σ_tot: per bin at most 0.27 %, six bins, so at most
    1.6 % of statistics; binomial(300, 0.016) has mean 4.9 and sd 2.2, we allow ≤ 12.
    """
    g, fails = [], 0
    for seed in range(300):
        r = _shared_box_run(seed)
        g.extend(r["significance"])
        fails += r["verdict"] == "fail"
    rms = math.sqrt(np.mean(np.square(g)))
    print(f"shared-box null: rms significance {rms:.3f}, false fails {fails}/300")
    assert 0.9 < rms < 1.1
    assert fails <= 12


def test_planted_offset_inside_the_old_bound_now_fails():
    """An offset of 1.5 σ_tot in one bin: the old rule (σ_Δ = σ_tot) could only warn.

    With 8 cones whose scatter is 0.3 of the box error, σ_Δ ≈ 0.3 σ_box/√8 ≈ 0.08 σ_tot, so
    the offset is ≈ 19 σ_Δ: the fail must come out for every seed of 20.
    """
    tot = math.sqrt(2) * 0.05 * 20.0  # bin 2: σ_box = σ_cone = 5 % of 20
    shift = np.zeros(6)
    shift[2] = 1.5 * tot
    for seed in range(20):
        r = _shared_box_run(seed, shift=shift)
        assert r["verdict"] == "fail", r["reasons"]
        assert 2 in r["failing_bins"]
        assert any("real offset" in s for s in r["reasons"])


def test_real_but_small_offset_passes_with_a_note():
    # 0.5 σ_tot in one bin: real (many σ_Δ) but inside the error bar → pass, named.
    tot = math.sqrt(2) * 0.05 * 20.0
    shift = np.zeros(6)
    shift[2] = 0.5 * tot
    r = _shared_box_run(1, shift=shift)
    assert r["verdict"] == "pass"
    assert 2 in r["real_small_bins"]
    assert any("too small to matter" in s for s in r["reasons"])


def test_noisy_offset_warns_with_advice():
    # Offset 1.5 σ_tot in bin 1, but the cones scatter so much (sd 3 σ_tot) that 4 cones
    # cannot call it real: warn, and say how many cones would.
    rng = np.random.default_rng(3)
    cov = np.diag([1.0, 1.0, 1.0])
    box = exact_measurement([10.0, 10.0, 10.0], cov, 30, rng)
    wiggle = np.array([-1.0, 1.0, -1.0, 1.0]) * 3 * math.sqrt(2) * math.sqrt(3 / 4)
    cones = [exact_measurement([10.0 + 0.01 * w, 10.0 + 1.5 * math.sqrt(2) + w, 10.0],
                               cov, 30, rng) for w in wiggle]
    r = compare_statistic(box, cones).to_dict()
    assert r["verdict"] == "warn"
    assert r["noisy_bins"] == [1]
    assert r["cone_scatter"][1] == pytest.approx(3 * math.sqrt(2))
    assert r["cones_needed"] == cones_needed(1.5 * math.sqrt(2), 3 * math.sqrt(2), 3.0, 4)
    assert f"about {r['cones_needed']} cones" in " ".join(r["reasons"])


def test_chi2_rule_alone():
    # Every bin 2 σ_tot off, z_fail high so no single bin counts: only the χ² can fail.
    rng = np.random.default_rng(6)
    cov = np.eye(10) * 0.5
    box = exact_measurement(np.full(10, 5.0), cov, 200, rng)
    cones = [exact_measurement(np.full(10, 7.0), cov, 200, rng) for _ in range(3)]
    r = compare_statistic(box, cones, VerdictRules(z_fail=10.0)).to_dict()
    assert r["verdict"] == "fail" and r["p_value"] < 1e-3
    assert any("bias χ²" in s for s in r["reasons"])
    r = compare_statistic(box, cones, VerdictRules(z_fail=10.0, check_chi2=False)).to_dict()
    assert r["verdict"] == "pass"


def test_sigma_offset_forms():
    rng = np.random.default_rng(7)
    mu = np.array([4.0, 2.0, 1.0])
    cov = correlated_cov(0.1 * mu, 0.2)
    box = noisy_measurement(mu, cov, 20, rng)
    cones = [noisy_measurement(mu, cov, 20, rng) for _ in range(5)]
    cbox = box.covariance
    ccone = np.mean([c.covariance for c in cones], axis=0)
    s = np.cov(np.array([c.value for c in cones]), rowvar=False)
    r = compare_statistic(box, cones, cones_independent=True).to_dict()
    assert r["sigma_offset"] == pytest.approx(np.sqrt(np.diag(cbox) + np.diag(s) / 5))
    assert r["sigma_offset_method"].startswith("independent")
    r = compare_statistic(box, cones).to_dict()
    assert r["sigma_offset"] == pytest.approx(np.sqrt(np.diag(s) / 5))
    assert r["sigma_offset_dof"] == [4.0, 4.0, 4.0]
    assert r["sigma_offset_independent"] == pytest.approx(
        np.sqrt(np.diag(cbox) + np.diag(s) / 5))
    tot = np.sqrt(np.diag(cbox + ccone))
    assert r["detectable_offset"] == pytest.approx(
        np.fmax(tot, critical_t(3.0, 4) * np.array(r["sigma_offset"])))
    assert r["detectable_uniform_fraction"] == pytest.approx(
        min(np.array(r["detectable_offset"]) / np.abs(box.value)))
    assert r["cone_scatter"] == pytest.approx(np.sqrt(np.diag(s)))
    # the box estimator's own sampling variance is added (VPF spheres), as a known term
    box.extra["sampling_variance"] = [0.01, 0.02, 0.03]
    r = compare_statistic(box, cones).to_dict()
    assert r["sigma_offset"] == pytest.approx(np.sqrt([0.01, 0.02, 0.03] + np.diag(s) / 5))
    # the line-of-sight spread over the box's three axes is added with 2 degrees of freedom:
    # Welch–Satterthwaite ν = (a + b)² / (a²/4 + b²/2) for a = S/N (4 dof) and b = τ² (2 dof)
    del box.extra["sampling_variance"]
    tau2 = np.array([0.002, 0.0, 0.001])
    box.extra["los_variance"] = tau2.tolist()
    r = compare_statistic(box, cones).to_dict()
    a_ = np.diag(s) / 5
    assert r["sigma_offset"] == pytest.approx(np.sqrt(a_ + tau2))
    assert r["sigma_offset_dof"] == pytest.approx((a_ + tau2) ** 2 / (a_ ** 2 / 4 + tau2 ** 2 / 2))
    assert r["sigma_offset_dof"][1] == pytest.approx(4.0)


def test_single_cone_warns_and_falls_back():
    rng = np.random.default_rng(8)
    mu = np.array([3.0, 2.0, 1.0])
    cov = correlated_cov(0.1 * mu)
    box = noisy_measurement(mu, cov, 20, rng)
    cone = exact_measurement(box.value, cov, 20, rng)  # no offset at all
    r = compare_statistic(box, [cone], cones_independent=True).to_dict()
    assert r["verdict"] == "warn"
    assert r["cone_scatter"] is None and r["sigma_offset_independent"] is None
    assert r["sigma_offset_method"].startswith("one cone")
    assert any("one cone" in n for n in r["notes"])
    r = compare_statistic(box, [cone], VerdictRules(effective_cones=1.0)).to_dict()
    assert r["sigma_offset"] == pytest.approx(np.sqrt(np.diag(box.covariance)
                                                      + np.diag(cone.covariance)))


def test_zero_variance_bins():
    rng = np.random.default_rng(9)
    cov = np.diag([1.0, 1.0])
    box = exact_measurement([3.0, 4.0], cov, 20, rng)
    cones = [exact_measurement([3.2, 4.1], cov, 20, rng) for _ in range(3)]
    for m in [box, *cones]:  # a third bin, identical and error-free everywhere (e.g. P(0) = 0)
        m.value = np.append(m.value, 0.0)
        m.bins = np.append(m.bins, 3.0)
        m.delete_one = np.column_stack([m.delete_one, np.zeros(20)])
    r = compare_statistic(box, cones).to_dict()
    assert r["dof"] == 2 and r["chi2_bins"] == [0, 1]
    assert r["z"][2] is None and r["fractional_offset"][2] is None
    assert any("dropped from the χ²" in n for n in r["notes"])
    assert r["verdict"] == "pass"
    for c in cones:  # now the cones differ in the error-free bin: warn, infinite z
        c.value[2] = 0.5
    r = compare_statistic(box, cones).to_dict()
    assert r["verdict"] == "warn" and r["max_abs_z"] is None
    json.dumps(r, allow_nan=False)


def test_ill_conditioned_covariance_uses_pseudo_inverse():
    rng = np.random.default_rng(10)
    base = rng.normal(size=(30, 1))
    d = np.hstack([base, base, rng.normal(size=(30, 1))])  # bins 0 and 1 identical

    def meas(v):
        return Measurement("wp", np.array([1.0, 2.0, 3.0]), np.array(v, float),
                           delete_one=np.array(v, float) + 0.1 * d)

    r = compare_statistic(meas([1.0, 1.0, 1.0]), [meas([1.01, 1.01, 1.0])] * 2).to_dict()
    assert r["pseudo_inverse"] is True and r["dof"] == 2
    assert any("pseudo-inverse" in n for n in r["notes"])


def test_input_errors_are_named():
    rng = np.random.default_rng(11)
    box = exact_measurement([1.0, 2.0], C_PAIR, 10, rng)
    with pytest.raises(InputError, match="no cone"):
        compare_statistic(box, [])
    nojk = Measurement("wp", box.bins, box.value)
    with pytest.raises(InputError, match="cone 0 has no jackknife"):
        compare_statistic(box, [nojk])
    other = exact_measurement([1.0, 2.0], C_PAIR, 10, rng, bins=[5.0, 6.0])
    with pytest.raises(InputError, match="different bins"):
        compare_statistic(box, [other])
    wrong = exact_measurement([1.0, 2.0], C_PAIR, 10, rng, name="vpf")
    with pytest.raises(InputError, match="holds statistic 'vpf'"):
        compare_statistic(box, [wrong], where="bright/z1")
    bad = exact_measurement([1.0, 2.0], C_PAIR, 10, rng)
    bad.value = np.array([1.0, np.nan])
    with pytest.raises(InputError, match="bin 1 is not finite"):
        compare_statistic(box, [bad])


def test_output_is_json_safe_with_the_agreed_keys():
    rng = np.random.default_rng(12)
    box = exact_measurement([0.0, 2.0], C_PAIR, 10, rng)  # b = 0 in bin 0
    cones = [exact_measurement([0.1, 2.0], C_PAIR, 10, rng) for _ in range(2)]
    r = compare_statistic(box, cones).to_dict()
    text = json.dumps(r, allow_nan=False)
    assert json.loads(text) == r
    for key in ("verdict", "bins", "box", "cone_mean", "cones", "sigma_box", "sigma_cone",
                "sigma_total", "z", "max_abs_z", "chi2", "dof", "p_value", "detectable_offset",
                "fractional_offset", "sigma_offset", "cone_scatter", "hartlap_factor",
                "n_regions", "n_cones", "bin_label", "value_label", "notes", "reasons"):
        assert key in r, key
    assert r["fractional_offset"][0] is None
    assert len(r["cones"]) == 2 and len(r["cones"][0]) == 2


# --------------------------------------------------------------------------- rules, roll-up
def test_verdict_rules_validation():
    assert VerdictRules.from_mapping({"z_fail": 1.5}).z_fail == 1.5
    with pytest.raises(InputError) as e:
        VerdictRules(p_fail=2.0, min_cones=0)
    assert any("verdict.p_fail" in p for p in e.value.problems)
    assert any("verdict.min_cones" in p for p in e.value.problems)
    with pytest.raises(InputError, match="verdict.check_chi2"):
        VerdictRules(check_chi2="yes")
    with pytest.raises(InputError, match="verdict.zfail: unknown key"):
        VerdictRules.from_mapping({"zfail": 1.0})
    rules = VerdictRules(effective_cones=3, warn_is_failure=True)
    assert VerdictRules.from_mapping(rules.to_dict()) == rules
    for name in rules.to_dict():
        if name != "warn_is_failure":
            assert name in VERDICT_RULES_TEXT, name


def test_rollup_and_exit_codes():
    assert worst_verdict(["pass", "warn", "pass"]) == "warn"
    assert worst_verdict(["warn", "fail"]) == "fail"
    results = {"samples": {
        "a": {"cuts": {"c1": {"statistics": {"wp": {"verdict": "pass"},
                                             "vpf": {"verdict": "warn"}}},
                       "c2": {"statistics": {}}}},
        "b": {"cuts": {"c1": {"statistics": {"wp": {"verdict": "pass"}}}}}}}
    assert rollup_verdicts(results) == "warn"
    assert results["samples"]["a"]["cuts"]["c2"]["verdict"] == "warn"  # nothing checked
    assert results["samples"]["b"]["verdict"] == "pass"
    results["samples"]["b"]["cuts"]["c1"]["statistics"]["wp"]["verdict"] = "fail"
    before = json.dumps(results, sort_keys=True)
    r = rollup(results)  # typed, and the tree is left as it was
    assert json.dumps(results, sort_keys=True) == before
    assert r.overall == "fail" and r.samples == {"a": "warn", "b": "fail"}
    assert r.cuts[("a", "c2")] == "warn" and r.with_verdict("fail") == [("b", "c1", "wp")]
    assert (r.count("pass"), r.count("warn"), r.count("fail")) == (1, 1, 1)
    assert r.counts_text == "1 pass · 1 warn · 1 fail"
    assert rollup_verdicts(results) == "fail"
    assert exit_code("fail") == 1 and exit_code("warn") == 0 and exit_code("pass") == 0
    assert exit_code("warn", warn_is_failure=True) == 1
    with pytest.raises(InputError):
        exit_code("maybe")


def test_bins_where_every_cone_agrees_fall_back_to_the_upper_bound():
    # The tail of a count distribution: every cone finds no galaxy with N ≥ 20, the box a few.
    # Zero scatter from discrete values says nothing about the mean: σ_Δ falls back to
    # √(C_box + C_cone/N_eff) there, and the offset (1.5 σ_box) is not called real.
    rng = np.random.default_rng(30)
    cov = np.diag([1e-2, 1e-6])
    box = exact_measurement([0.5, 0.0015], cov, 20, rng)
    cones = []
    for v in (0.45, 0.52, 0.48, 0.55):
        c = exact_measurement([v, 0.0], np.diag([1e-2, 1e-12]), 20, rng)
        c.delete_one[:, 1] = 0.0  # empty in every region
        cones.append(c)
    r = compare_statistic(box, cones).to_dict()
    assert r["verdict"] == "warn" and r["noisy_bins"] == [1]
    assert r["sigma_offset"][1] == pytest.approx(math.sqrt(1e-6))
    assert abs(r["significance"][1]) == pytest.approx(1.5)  # Gaussian, not Student t
    assert any("every cone gives the same value" in n for n in r["notes"])


def test_singular_covariance_messages_say_what_to_do(caplog):
    """One exact relation (a distribution summing to one) is expected; more is advice."""
    import logging

    from conecheck.compare.chi2 import inverse_covariance

    rng = np.random.default_rng(3)
    x = rng.dirichlet(np.ones(6), size=40)  # rows sum to one: rank p − 1
    with caplog.at_level(logging.INFO, logger="conecheck"):
        inv = inverse_covariance(np.cov(x, rowvar=False), 40, "P(N)")
    assert inv.rank == 5 and "nothing to change" in inv.notes[0]
    assert not [r for r in caplog.records if r.levelno >= logging.WARNING]
    y = rng.standard_normal((40, 3)) @ rng.standard_normal((3, 7))  # rank 3 of 7
    caplog.clear()
    with caplog.at_level(logging.INFO, logger="conecheck"):
        inv = inverse_covariance(np.cov(y, rowvar=False), 40, "wp")
    assert inv.rank == 3 and "use more regions" in inv.notes[0]
    assert [r for r in caplog.records if r.levelno == logging.WARNING]


def test_the_typed_comparison_round_trips_through_results_json():
    # the statistic's entry of results.json is Comparison.to_dict(); reading it back gives
    # the same typed object, whose entry is the same again (no key or value lost)
    import json

    from conecheck.compare import Comparison, comparison_keys
    from conecheck.report import REQUIRED_STATISTIC_KEYS

    rng = np.random.default_rng(3)
    mu = np.array([100.0, 50.0, 20.0, 8.0])
    cov = correlated_cov(0.05 * mu, 0.4)
    box = noisy_measurement(mu, cov, 30, rng)
    cones = [noisy_measurement(mu * 1.02, cov, 30, rng) for _ in range(5)]
    c = compare_statistic(box, cones)
    entry = json.loads(json.dumps(c.to_dict(), allow_nan=False))
    assert tuple(entry) == comparison_keys()
    back = Comparison.from_dict(entry)
    assert back.to_dict() == entry
    assert back.verdict == c.verdict and back.max_abs_z == pytest.approx(c.max_abs_z)
    np.testing.assert_array_equal(back.failing_bins, c.failing_bins)
    assert back.cones.shape == (len(cones), c.n_bins)
    # the report's schema check asks only for keys the comparison writes
    assert set(REQUIRED_STATISTIC_KEYS) <= set(comparison_keys())
    # a damaged entry reads as missing values, not an exception
    broken = Comparison.from_dict({**entry, "cones": [[1.0], [1.0, 2.0]], "chi2": "x"})
    assert broken.cones.size == 0 and np.isnan(broken.chi2)
