"""Parameter shifts on an HOD box: derivatives by central differences, shifts from the Fisher
matrix (issue: verdicts with power).

Checks:
* the box's number-density derivative in log M_min equals the derivative of the expected
  central occupation ½[1 + erf((log M − log M_min)/σ)] (Zheng et al. 2007, ApJ 667, 760,
  eq. 2), summed over the same halos, within the binomial noise of the halos whose centrals
  switch between the two steps (common random numbers leave only those);
* an offset equal to D·δθ₀ built from the box's own derivatives returns δθ₀;
* the run writes the shifts per cut and combination, the optional rule fails a cut, and a
  box read from a file gets only the √χ² bound, saying so.
"""

from __future__ import annotations

import copy
import dataclasses
import math

import numpy as np
import pytest
from run_helpers import tiny_dict
from scipy.special import erf

from conecheck.box import populate
from conecheck.box.populate import KeyedDraws
from conecheck.box.sensitivity import (
    DECORATION_PARAMETERS,
    DEFAULT_STEPS,
    sample_threshold,
    step_values,
    varied_model,
)
from conecheck.compare import VerdictRules
from conecheck.compare.fisher import shifts_for_cut
from conecheck.config import config_from_dict
from conecheck.run.cache import content_digest
from conecheck.run.inputs import box_halos, load_box, load_box_and_halos
from conecheck.run.sensitivity import hod_derivatives_task, merge_derivatives
from conecheck.run.specs import DerivativesSpec, box_spec
from conecheck.run.tasks import box_task, measure_box_pair, measure_box_sample, sample_mask
from conecheck.run.validate import validate
from conecheck.streams import stream_key


@pytest.fixture(scope="module")
def setup():
    d = tiny_dict(seed=21)
    d["jackknife"]["box_n_side"] = 5  # 25 sub-volumes: enough for 15 bins (n ≥ p + 3)
    cfg = config_from_dict(d, "test")
    box, halos, hod = load_box_and_halos(cfg)
    spec = DerivativesSpec(box_spec(cfg, cfg.samples[0], content_digest(box)),
                           content_digest(halos), hod, tuple(sorted(DEFAULT_STEPS.items())))
    return cfg, hod_derivatives_task(spec, halos)


def test_one_task_per_parameter_joins_to_the_task_over_all(setup):
    """The run splits a sample's derivatives into one task per parameter (each seeded alike):
    joined in order they equal one task over every parameter, bit for bit, and a parameter
    the sample lacks adds nothing."""
    cfg, whole = setup
    box, halos, hod = load_box_and_halos(cfg)
    base = DerivativesSpec(box_spec(cfg, cfg.samples[0], content_digest(box)),
                           content_digest(halos), hod, tuple(sorted(DEFAULT_STEPS.items())))
    parts = [hod_derivatives_task(dataclasses.replace(base, parameters=(name,)), halos)
             for name in reversed(whole["parameters"])][::-1]
    parts.insert(2, {"parameters": [], "values": [], "steps": [], "derivatives": {},
                     "notes": ["no such parameter here"]})
    joined = merge_derivatives(parts)
    assert joined["parameters"] == whole["parameters"]
    assert len(whole["parameters"]) == 5 + len(DECORATION_PARAMETERS)
    assert joined["values"] == whole["values"] and joined["steps"] == whole["steps"]
    assert joined["derivatives"].keys() == whole["derivatives"].keys()
    for stat, d in whole["derivatives"].items():
        assert np.array_equal(joined["derivatives"][stat], d), stat
    assert joined["notes"] == whole["notes"] + ["no such parameter here"]


@pytest.mark.parametrize("scatter,dilution", [(0.0, 1.0), (150.0, 1.0), (0.0, 0.7)])
def test_the_boxes_of_a_step_measured_together_equal_each_measured_whole(scatter, dilution):
    """The ± boxes of a step share most galaxies (keyed draws): measured together, wp counts
    their shared pairs once (the pair estimator) and every statistic equals the box measured
    on its own, bit for bit, with and without a redshift error on the box (whose draws
    are keyed per galaxy too), and with the boxes thinned to a survey's completeness for
    the statistics that count in cells."""
    d = tiny_dict(seed=21)
    d["statistics"]["measure"] = ["number_density", "wp", "cic", "vpf"]
    d["box"]["redshift_scatter_kms"] = scatter
    cfg = config_from_dict(d, "test")
    box, halos, hod = load_box_and_halos(cfg)
    spec = dataclasses.replace(box_spec(cfg, cfg.samples[0], content_digest(box)),
                               dilution=dilution)
    assert spec.effects.redshift_scatter_kms == scatter
    thr = sample_threshold(hod, cfg.samples[0].mag_max)
    lo, hi = step_values(hod, thr, "log_m1", DEFAULT_STEPS["log_m1"])
    draws = KeyedDraws(stream_key(cfg.seed, "test-pair"))
    boxes = [populate(halos, varied_model(hod, thr, "log_m1", v), draws, spec.model())
             for v in (lo, hi)]
    shared = np.intersect1d(boxes[0].draw_key, boxes[1].draw_key).size
    assert 0.5 * len(boxes[0]) < shared < len(boxes[0])
    together = measure_box_pair(spec, *boxes)
    for box_, got in zip(boxes, together, strict=True):
        alone = measure_box_sample(spec, box_, np.ones(len(box_), bool), jackknife=False)
        assert got.keys() == alone.keys()
        for name, m in alone.items():
            np.testing.assert_array_equal(got[name].value, m.value, err_msg=name)
        assert got["cic"].extra == alone["cic"].extra
    with pytest.raises(ValueError, match="draw_key"):
        measure_box_pair(spec, box, box)


def test_density_derivative_matches_the_expected_central_occupation(setup):
    cfg, deriv = setup
    halos, model, _ = box_halos(cfg)
    p = next(t for t in model.thresholds if t.mag_max == -20.0).params
    j = deriv["parameters"].index("log_mmin")
    h = deriv["steps"][j]
    logm = np.log10(halos.mass)

    def ncen(log_mmin):
        return 0.5 * (1 + erf((logm - log_mmin) / p.sigma_logm))

    lo, hi = ncen(p.log_mmin - h), ncen(p.log_mmin + h)
    volume = halos.box_size ** 3
    expected = (hi.sum() - lo.sum()) / (2 * h) / volume
    # each halo switches with probability |p₊ − p₋| (one shared uniform draw): binomial noise
    sd = math.sqrt(np.sum(np.abs(hi - lo) * (1 - np.abs(hi - lo)))) / (2 * h) / volume
    got = deriv["derivatives"]["number_density"][0, j]
    print(f"dn/dlog_mmin: {got:.4g} against {expected:.4g} ± {sd:.2g}")
    assert expected < 0 and abs(got - expected) < 5 * sd


def test_an_offset_along_the_derivatives_returns_the_parameters(setup):
    cfg, deriv = setup
    box = load_box(cfg)
    box = box_task(box_spec(cfg, cfg.samples[0], content_digest(box)), box)["measurements"]
    combo = tuple(cfg.statistics.measure)  # 1 + 5 + 6 + 3 = 15 bins, 25 box sub-volumes
    dmat = np.vstack([deriv["derivatives"][s] for s in combo])
    dtheta = 0.02 * np.array([1.0, -0.5, 1.0, 0.5, -1.0, 1.0, 1.0])[:dmat.shape[1]]
    shift = dmat @ dtheta
    cones, start = [], 0
    cone = {}
    for s in combo:
        m = copy.deepcopy(box[s])
        n = np.asarray(m.value).size
        m.value = np.asarray(m.value) + shift[start:start + n]
        m.delete_one = np.asarray(m.delete_one) + shift[start:start + n][None, :]
        cone[s] = m
        start += n
    cones.append(cone)
    out = shifts_for_cut(box, cones, [combo], VerdictRules(), deriv["derivatives"],
                         deriv["parameters"])
    rec = out["combinations"]["+".join(combo)]
    assert "note" not in rec, rec.get("note")
    np.testing.assert_allclose(rec["shift"], dtheta, rtol=1e-6, atol=1e-9)


def test_run_reports_shifts_and_the_optional_rule(tmp_path):
    d = tiny_dict(seed=22, **{"cones.n_cones": 3})
    d["parameter_shifts"] = {"combinations": ["number_density+wp"]}
    res, _ = validate(config_from_dict(d, "t", tmp_path), tmp_path / "a", progress=False)
    cut = res["samples"]["broad"]["cuts"]["primary"]
    ps = cut["parameter_shifts"]
    assert ps["parameters"][:5] == ["log_mmin", "sigma_logm", "log_m0", "log_m1", "alpha"]
    rec = ps["combinations"]["number_density+wp"]
    assert len(rec["conditional_shift_in_sigma"]) == len(ps["parameters"])
    assert rec["max_abs_shift_in_sigma"] <= rec["chi2_bound"] + 1e-9
    assert "verdict" not in ps  # the rule is off by default
    # a limit far below the measured shift fails the cut (and the run)
    d["verdict"] = {"max_parameter_shift": rec["max_abs_shift_in_sigma"] / 2}
    res, code = validate(config_from_dict(d, "t", tmp_path), tmp_path / "b", progress=False)
    cut = res["samples"]["broad"]["cuts"]["primary"]
    assert cut["parameter_shifts"]["verdict"] == "fail" and cut["verdict"] == "fail"
    assert "would move" in cut["parameter_shifts"]["reason"] and code == 1


def test_a_box_without_hod_gets_the_bound_only(tmp_path):
    cfg = config_from_dict(tiny_dict(seed=23), "t")
    box = load_box(cfg)
    keep = sample_mask(box, cfg.samples[0])
    from astropy.table import Table

    t = Table({"x": box.position[:, 0], "y": box.position[:, 1], "z": box.position[:, 2],
               "vx": box.velocity[:, 0], "vy": box.velocity[:, 1], "vz": box.velocity[:, 2],
               "abs_mag": box.abs_mag})
    t.meta["BOXSIZE"] = box.box_size
    t.write(tmp_path / "box.fits")
    assert keep.sum() > 100
    d = tiny_dict(seed=23, **{"cones.n_cones": 3, "box.source": "file",
                              "box.path": str(tmp_path / "box.fits"),
                              "box.box_size": box.box_size, "box.redshift": box.redshift})
    res, _ = validate(config_from_dict(d, "t", tmp_path), tmp_path / "run", progress=False)
    ps = res["samples"]["broad"]["cuts"]["primary"]["parameter_shifts"]
    assert ps["parameters"] is None and "no HOD" in ps["method"]
    rec = ps["combinations"]["number_density+wp"]
    assert rec["chi2_bound"] >= 0 and "shift" not in rec
