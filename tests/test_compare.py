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
    exit_code,
    hartlap_factor,
    min_regions_needed,
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
    z = (1/√2, 1/√1). For 2 degrees of freedom the χ² survival function is exp(−χ²/2)
    (textbook closed form), so p = exp(−8/21).
    """
    rng = np.random.default_rng(0)
    box = exact_measurement([10.0, 20.0], C_PAIR, 12, rng)
    cones = [exact_measurement([11.0, 21.0], C_PAIR, 10, rng) for _ in range(2)]
    r = compare_statistic(box, cones, VerdictRules())
    assert r["n_regions"] == 10
    assert r["hartlap_factor"] == pytest.approx(2 / 3)
    assert r["chi2"] == pytest.approx(16 / 21, rel=1e-10)
    assert r["dof"] == 2
    assert r["p_value"] == pytest.approx(math.exp(-8 / 21), rel=1e-10)
    assert r["z"] == pytest.approx([1 / math.sqrt(2), 1.0], rel=1e-10)
    assert r["sigma_total"] == pytest.approx([math.sqrt(2), 1.0])
    assert r["fractional_offset"] == pytest.approx([0.1, 0.05])
    assert r["max_abs_z"] == pytest.approx(1.0)


def test_p_values_against_scipy_and_closed_form():
    # One degree of freedom: P(χ²₁ > x) = erfc(√(x/2)) (textbook; scipy.special.erfc).
    res = bias_chi2([1.3], [[1.0]], n_regions=1000)
    h = (1000 - 1 - 2) / 999
    assert res.chi2 == pytest.approx(h * 1.69)
    assert res.p_value == pytest.approx(special.erfc(math.sqrt(res.chi2 / 2)), rel=1e-12)
    # General p: scipy.stats.chi2 survival function (reference library).
    rng = np.random.default_rng(4)
    cov = correlated_cov(np.linspace(1, 3, 6), 0.3)
    d = rng.normal(size=6) * 2
    res = bias_chi2(d, cov, n_regions=40)
    direct = (40 - 6 - 2) / 39 * d @ np.linalg.solve(cov, d)
    assert res.chi2 == pytest.approx(direct, rel=1e-10)
    assert res.p_value == pytest.approx(stats.chi2.sf(direct, 6), rel=1e-10)


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
    assert compare_statistic(box, cones)["hartlap_factor"] == pytest.approx(1 / 7)


# --------------------------------------------------------------------------- verdicts
def _null_run(seed: int, independent: bool, n_cones: int = 10, k: int = 30) -> dict:
    rng = np.random.default_rng(seed)
    mu = np.array([100.0, 50.0, 20.0, 8.0, 3.0, 1.0])
    cov = correlated_cov(0.05 * mu, 0.4)
    box = noisy_measurement(mu, cov, k, rng)
    cones = [noisy_measurement(mu, cov, k, rng) for _ in range(n_cones)]
    return compare_statistic(box, cones, VerdictRules(), cones_independent=independent)


def test_null_setup_rarely_fails():
    """Box and cones drawn from one distribution: the false-fail fraction must stay small.

    Per bin, a fail needs a ≥ 3 σ_Δ offset (two-sided Gaussian tail 0.27 %, inflated by
    the noise of jackknife σ estimated from 30 regions and of a 10-cone scatter), over 6
    bins, plus the χ² rule at p < 0.001: a few per cent in the independent-cone form (about
    1.7 % over 400 seeds when this test was written). With 20 seeds, ≤ 2 fails (10 %)
    leaves ample room; the conservative shared-structure form can only fail less. Warns
    are frequent in a null of this kind — the box alone scatters by σ_box ≈ 0.7 σ_tot,
    so some bin's offset exceeds σ_tot without being significant; we report that rate.
    """
    fails, warns = {}, {}
    for independent in (True, False):
        verdicts = [_null_run(seed, independent)["verdict"] for seed in range(20)]
        fails[independent] = verdicts.count("fail") / 20
        warns[independent] = verdicts.count("warn") / 20
    print(f"null set-up: false-fail fraction {fails}, warn fraction {warns}")
    assert fails[True] <= 0.10
    assert fails[False] <= fails[True]


def test_planted_offset_fails():
    rng = np.random.default_rng(2)
    mu = np.array([100.0, 50.0, 20.0, 8.0, 3.0])
    cov = correlated_cov(0.03 * mu, 0.3)
    tot = np.sqrt(2 * np.diag(cov))
    box = noisy_measurement(mu, cov, 40, rng)
    shift = np.zeros(5)
    shift[2] = 6 * tot[2]  # six total-error sigmas in one bin
    cones = [noisy_measurement(mu + shift, cov, 40, rng) for _ in range(10)]
    r = compare_statistic(box, cones)
    assert r["verdict"] == "fail"
    assert 2 in r["failing_bins"]
    assert any("significant" in s for s in r["reasons"])


def test_noisy_offset_warns():
    # Offset 1.5 σ_tot in one bin, but with the shared-structure σ_Δ = σ_tot it is only
    # 1.5 σ_Δ: outside the error bar, not significant → the run cannot tell.
    rng = np.random.default_rng(3)
    cov = np.diag([1.0, 1.0, 1.0])
    box = exact_measurement([10.0, 10.0, 10.0], cov, 30, rng)
    cones = [exact_measurement([10.0, 10.0 + 1.5 * math.sqrt(2), 10.0], cov, 30, rng)
             for _ in range(4)]
    r = compare_statistic(box, cones)
    assert r["verdict"] == "warn"
    assert r["noisy_bins"] == [1]
    assert r["sigma_offset"] == pytest.approx([math.sqrt(2)] * 3)
    assert "too noisy" in " ".join(r["reasons"])


def test_chi2_rule_alone():
    # Every bin 2 σ_tot off, z_fail high so no single bin counts: only the χ² can fail.
    rng = np.random.default_rng(6)
    cov = np.eye(10) * 0.5
    box = exact_measurement(np.full(10, 5.0), cov, 200, rng)
    cones = [exact_measurement(np.full(10, 7.0), cov, 200, rng) for _ in range(2)]
    r = compare_statistic(box, cones, VerdictRules(z_fail=10.0))
    assert r["verdict"] == "fail" and r["p_value"] < 1e-3
    assert any("bias χ²" in s for s in r["reasons"])
    r = compare_statistic(box, cones, VerdictRules(z_fail=10.0, check_chi2=False))
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
    r = compare_statistic(box, cones, cones_independent=True)
    assert r["sigma_offset"] == pytest.approx(np.sqrt(np.diag(cbox) + np.diag(s) / 5))
    assert r["sigma_offset_method"].startswith("independent")
    r = compare_statistic(box, cones, VerdictRules(effective_cones=2.0))
    assert r["sigma_offset"] == pytest.approx(np.sqrt(np.diag(cbox) + np.diag(ccone) / 2))
    assert r["sigma_offset_independent"] == pytest.approx(
        np.sqrt(np.diag(cbox) + np.diag(s) / 5))
    assert r["detectable_offset"] == pytest.approx(2 * np.array(r["sigma_offset"]))
    assert r["cone_scatter"] == pytest.approx(np.sqrt(np.diag(s)))


def test_single_cone_warns_and_falls_back():
    rng = np.random.default_rng(8)
    mu = np.array([3.0, 2.0, 1.0])
    cov = correlated_cov(0.1 * mu)
    box = noisy_measurement(mu, cov, 20, rng)
    cone = exact_measurement(box.value, cov, 20, rng)  # no offset at all
    r = compare_statistic(box, [cone], cones_independent=True)
    assert r["verdict"] == "warn"
    assert r["cone_scatter"] is None and r["sigma_offset_independent"] is None
    assert r["sigma_offset_method"].startswith("shared")
    assert any("one cone" in n for n in r["notes"])


def test_zero_variance_bins():
    rng = np.random.default_rng(9)
    cov = np.diag([1.0, 1.0])
    box = exact_measurement([3.0, 4.0], cov, 20, rng)
    cones = [exact_measurement([3.2, 4.1], cov, 20, rng) for _ in range(3)]
    for m in [box, *cones]:  # a third bin, identical and error-free everywhere (e.g. P(0) = 0)
        m.value = np.append(m.value, 0.0)
        m.bins = np.append(m.bins, 3.0)
        m.delete_one = np.column_stack([m.delete_one, np.zeros(20)])
    r = compare_statistic(box, cones)
    assert r["dof"] == 2 and r["chi2_bins"] == [0, 1]
    assert r["z"][2] is None and r["fractional_offset"][2] is None
    assert any("dropped from the χ²" in n for n in r["notes"])
    assert r["verdict"] == "pass"
    for c in cones:  # now the cones differ in the error-free bin: warn, infinite z
        c.value[2] = 0.5
    r = compare_statistic(box, cones)
    assert r["verdict"] == "warn" and r["max_abs_z"] is None
    json.dumps(r, allow_nan=False)


def test_ill_conditioned_covariance_uses_pseudo_inverse():
    rng = np.random.default_rng(10)
    base = rng.normal(size=(30, 1))
    d = np.hstack([base, base, rng.normal(size=(30, 1))])  # bins 0 and 1 identical

    def meas(v):
        return Measurement("wp", np.array([1.0, 2.0, 3.0]), np.array(v, float),
                           delete_one=np.array(v, float) + 0.1 * d)

    r = compare_statistic(meas([1.0, 1.0, 1.0]), [meas([1.01, 1.01, 1.0])] * 2)
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
    r = compare_statistic(box, cones)
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
    assert rollup_verdicts(results) == "fail"
    assert exit_code("fail") == 1 and exit_code("warn") == 0 and exit_code("pass") == 0
    assert exit_code("warn", warn_is_failure=True) == 1
    with pytest.raises(InputError):
        exit_code("maybe")
