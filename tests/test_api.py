"""The Python front door (conecheck.api): the example script runs, the steps agree with the
run, plain arrays and tables are accepted, and bad input is named."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM
from astropy.table import Table
from run_helpers import tiny_dict

import conecheck as cc

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "validate_in_python.py"


def test_the_example_script_runs_a_whole_validation(tmp_path):
    assert len(EXAMPLE.read_text(encoding="utf-8").splitlines()) < 30
    done = subprocess.run([sys.executable, str(EXAMPLE)], cwd=tmp_path, capture_output=True,
                          text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    lines = done.stdout.splitlines()
    assert [ln.split()[0] for ln in lines[:2]] == ["number_density", "wp"]
    assert all(ln.split()[1] in ("pass", "warn", "fail") for ln in lines[:2])
    assert lines[2].startswith("whole run:")
    out = tmp_path / "example-report"
    assert (out / "results.json").is_file() and (out / "validation.pdf").stat().st_size > 0
    assert "region file" not in done.stderr  # the footprint page found its regions
    # nothing else was written: the whole run used a temporary directory
    assert sorted(p.name for p in tmp_path.iterdir()) == ["example-report"]


def test_steps_from_python_equal_the_run(tmp_path):
    cfg = cc.config_from_dict(tiny_dict(seed=41), "t", tmp_path)
    results, _ = cc.validate(cfg)
    box = cc.build_box(cfg)
    cones = cc.build_cones(box, cfg)
    stat = results["samples"]["broad"]["cuts"]["primary"]["statistics"]["number_density"]
    on_box = cc.measure_box(box, "number_density", config=cfg)
    on_cones = [cc.measure_cone(c, "number_density", config=cfg) for c in cones]
    # the same box, the same cones and the same estimator as the run: equal numbers
    np.testing.assert_array_equal(np.ravel(on_box.value), stat["box"])
    np.testing.assert_array_equal([np.ravel(m.value) for m in on_cones], stat["cones"])
    result = cc.compare(on_box, on_cones, config=cfg)
    assert result.verdict == stat["verdict"]
    assert result.to_dict() == stat  # the run stores exactly this entry
    assert not list(tmp_path.iterdir())  # validate() without a directory writes nothing


def test_lensing_from_python_equals_the_run(tmp_path):
    """ΔΣ step by step (the box's own matter; each cone's from cone_matter) gives the run's
    numbers exactly."""
    cfg = cc.config_from_dict(tiny_dict(seed=43, **{"statistics.measure": ["delta_sigma"],
                                                    "parameter_shifts.enabled": False}),
                              "t", tmp_path)
    results, _ = cc.validate(cfg)
    stat = results["samples"]["broad"]["cuts"]["primary"]["statistics"]["delta_sigma"]
    box = cc.build_box(cfg)
    assert box.matter is not None and len(box.matter) > 1000
    np.testing.assert_array_equal(cc.measure_box(box, "delta_sigma", config=cfg).value,
                                  stat["box"])
    cones = cc.build_cones(box, cfg)
    got = [cc.measure_cone(c, "delta_sigma", config=cfg, matter=cc.cone_matter(box, cfg, i))
           for i, c in enumerate(cones)]
    np.testing.assert_array_equal([m.value for m in got], stat["cones"])
    with pytest.raises(ValueError, match="no matter tracer"):
        cc.measure_cone(cones[0], "delta_sigma", config=cfg)


def test_plain_arrays_and_tables_are_measured():
    rng = np.random.default_rng(5)
    size, n = 100.0, 4000
    pos = rng.uniform(0, size, (n, 3))
    m = cc.measure_box(pos, "number_density", box_size=size)
    # the definition: N / L³ for a periodic box
    assert np.ravel(m.value)[0] == pytest.approx(n / size**3, rel=1e-12)
    t = Table({"x": pos[:, 0], "y": pos[:, 1], "z": pos[:, 2]})
    t.meta["BOXSIZE"] = size
    assert np.ravel(cc.measure_box(t, "number_density").value)[0] == pytest.approx(n / size**3)
    # a full-sky cone: n = N / V, the shell's comoving volume (definition of the estimator)
    ra = rng.uniform(0, 360, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    cone = {"ra": ra, "dec": dec, "z": rng.uniform(0.02, 0.05, n)}
    got = cc.measure_cone(cone, "number_density", z_min=0.02, z_max=0.05)
    # distances in Mpc/h from astropy (H0 = 100 km/s/Mpc, the default flat Ω_m = 0.3)
    d = FlatLambdaCDM(H0=100.0, Om0=0.3, Tcmb0=0.0).comoving_distance([0.02, 0.05]).value
    volume = 4 * np.pi / 3 * (d[1] ** 3 - d[0] ** 3)
    assert np.ravel(got.value)[0] == pytest.approx(n / volume, rel=1e-3)


@pytest.mark.parametrize("call, message", [
    (lambda: cc.measure_cone(np.zeros((5, 3)), "wp", z_min=0.1, z_max=0.2),
     "cone: expected an astropy Table or a mapping with columns ra, dec"),
    (lambda: cc.measure_cone({"ra": [1.0], "dec": [2.0]}, "wp", z_min=0.1, z_max=0.2),
     r"cone: missing column\(s\) z_obs"),
    (lambda: cc.measure_box(np.zeros((5, 2)), "wp", box_size=10.0),
     r"expected an \(N, 3\) array"),
    (lambda: cc.measure_box(np.zeros((5, 3)), "bispectrum", box_size=10.0),
     "statistic 'bispectrum': expected one of"),
    (lambda: cc.measure_box(np.zeros((5, 3)), "wp", box_size=10.0,
                            config=cc.demo_config(True), sample="faint"),
     "sample 'faint': the configuration has broad, luminous"),
])
def test_bad_input_from_python_is_named_and_is_a_value_error(call, message):
    with pytest.raises(ValueError, match=message) as exc:
        call()
    assert isinstance(exc.value, cc.InputError)
