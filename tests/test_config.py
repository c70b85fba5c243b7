"""The run configuration: template, validation messages, README reference, `init`/`check`."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from run_helpers import tiny_dict

from conecheck.cli import main
from conecheck.config import config_from_dict, load_config, resolved_toml
from conecheck.config_docs import README_BEGIN, README_END, missing_docs, reference_markdown
from conecheck.demo import template_text
from conecheck.errors import InputError

ROOT = Path(__file__).resolve().parent.parent


def _problems(d, tmp_path=".") -> list[str]:
    with pytest.raises(InputError) as exc:
        config_from_dict(d, "test.toml", tmp_path)
    return exc.value.problems


def test_template_validates_and_resolved_toml_round_trips(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(template_text())
    cfg = load_config(p)
    assert cfg.cones.n_cones == 12 and cfg.samples[1].cuts[1].label == "near"
    assert cfg.samples[1].cuts[1].mag_max == -21.0  # alternative cuts share the threshold
    q = tmp_path / "resolved.toml"
    q.write_text(resolved_toml(cfg))
    again = load_config(q)
    assert again.config_hash == cfg.config_hash


def test_every_problem_is_reported_with_its_key_path():
    d = tiny_dict(**{"cosmology.omega_x": 1.0, "statistics.wp.rp_min": "small",
                     "statistics.vpf.radii": [3.0, -1.0], "statistics.cic.r_cyl": -2.0,
                     "jackknife.box_layout": "spheres"})
    d["samples"][0]["z_min"] = 0.06  # above z_max
    probs = _problems(d)
    text = "\n".join(probs)
    assert len(probs) >= 6, probs
    for needle in ("cosmology.omega_x: unknown key", "statistics.wp.rp_min = 'small'",
                   "statistics.cic.r_cyl", "jackknife.box_layout = 'spheres'",
                   "samples[0]", "statistics.vpf.radii"):
        assert needle in text, (needle, text)


def test_pi_max_must_be_a_multiple_of_dpi():
    probs = _problems(tiny_dict(**{"statistics.wp.pi_max": 20.5}))
    assert any("statistics.wp" in p and "pi_max" in p for p in probs), probs


def test_too_few_jackknife_regions_names_the_minimum():
    # 10 cic bins need n > p + 2 (Hartlap, Simon & Schneider 2007, A&A 464, 399)
    d = tiny_dict(**{"statistics.cic.count_edges": list(range(11)),
                     "jackknife.sky_regions": 8})
    probs = _problems(d)
    assert any("jackknife.sky_regions" in p and "at least 13" in p for p in probs), probs


def test_cut_outside_shell_and_missing_sample_keys():
    d = tiny_dict()
    d["samples"][0]["z_max"] = 0.2
    assert "outside the survey shell" in "\n".join(_problems(d))
    d["samples"].append({"mag_max": -21.0})
    text = "\n".join(_problems(d))
    assert "samples[1].name: required" in text and "samples[1].z_min: required" in text


def test_randoms_disabled_with_wp_is_refused():
    probs = _problems(tiny_dict(**{"randoms.multiple": 0.0}))
    assert any(p.startswith("randoms") and "multiple" in p for p in probs), probs


def test_wrong_types_and_values():
    d = tiny_dict(**{"seed": -3, "cones.n_cones": 2.5, "survey.effects.rsd": "yes",
                     "compute.scheduler": "cluster"})
    text = "\n".join(_problems(d))
    for needle in ("seed = -3", "cones.n_cones = 2.5: expected an integer",
                   "survey.effects.rsd = 'yes': expected true or false",
                   "compute.scheduler = 'cluster'"):
        assert needle in text, (needle, text)


def test_output_directory_that_is_a_file(tmp_path):
    (tmp_path / "out").write_text("not a directory")
    probs = _problems(tiny_dict(**{"output.directory": "out"}), tmp_path)
    assert any("output.directory" in p and "is a file" in p for p in probs), probs


def test_readme_configuration_reference_is_in_step_with_the_schema():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    m = re.search(re.escape(README_BEGIN) + r"\n(.*?)" + re.escape(README_END), readme, re.S)
    assert m, "README.md lacks the generated configuration reference markers"
    assert m.group(1).strip() == reference_markdown().strip(), (
        "README configuration reference is stale: regenerate with "
        "python -m conecheck.config_docs")
    assert missing_docs() == []


def test_init_then_check_cli(tmp_path, capsys):
    p = tmp_path / "c.toml"
    assert main(["init", str(p)]) == 0
    assert main(["init", str(p)]) == 2  # refuses to overwrite
    assert main(["check", str(p)]) == 0
    out = capsys.readouterr()
    assert "[survey.fibres]" in out.out and "configuration OK" in out.err


def test_check_reports_bad_config_without_traceback(tmp_path, capsys):
    p = tmp_path / "bad.toml"
    p.write_text(template_text().replace("n_cones = 12", "n_cones = -1")
                 .replace('mask = "builtin:kestrel"', 'mask = "missing.fits"'))
    assert main(["check", str(p)]) == 2
    err = capsys.readouterr().err
    assert "cones.n_cones" in err and "Traceback" not in err
    p.write_text(template_text().replace('mask = "builtin:kestrel"', 'mask = "missing.fits"'))
    assert main(["check", str(p)]) == 2
    err = capsys.readouterr().err
    assert "survey.mask" in err and "missing.fits" in err


def test_check_names_a_missing_box_column(tmp_path, capsys):
    import numpy as np
    from astropy.table import Table

    t = Table({n: np.random.default_rng(1).uniform(0, 100, 50) for n in
               ("X", "Y", "Z", "VX", "VY", "VZ", "MAG")})
    t.write(tmp_path / "box.fits")
    text = (template_text().replace('source = "synthetic"', 'source = "file"\npath = "box.fits"')
            .replace('# columns = { x = "X", y = "Y", z = "Z", vx = "VX", vy = "VY", vz = "VZ",'
                     ' abs_mag = "M_r" }',
                     'columns = { x = "X", y = "Y", z = "Z", vx = "VX", vy = "VY", vz = "VZ",'
                     ' abs_mag = "M_r" }').replace(*NO_LENSING))
    p = tmp_path / "c.toml"
    p.write_text(text)
    assert main(["check", str(p)]) == 2
    err = capsys.readouterr().err
    assert "M_r" in err and "box.fits" in err


def test_not_toml(tmp_path, capsys):
    p = tmp_path / "x.toml"
    p.write_text("seed = = 3")
    assert main(["check", str(p)]) == 2
    assert "not valid TOML" in capsys.readouterr().err


# ------------------------------------------------------------------ bad box catalogues
#: The template's statistics without lensing, which a galaxy-file box cannot measure
#: without a particle file.
NO_LENSING = (',\n           "delta_sigma"]', "]")


def _box_config(tmp_path, box_name: str, columns: str = "", lensing: str = "") -> Path:
    cols = columns or ('columns = { x = "X", y = "Y", z = "Z", vx = "VX", vy = "VY", '
                       'vz = "VZ", abs_mag = "MAG" }')
    text = (template_text()
            .replace('source = "synthetic"',
                     f'source = "file"\npath = "{box_name}"\n{cols}\n{lensing}')
            .replace("box_size = 250.0", "box_size = 100.0"))
    if not lensing:
        assert NO_LENSING[0] in text
        text = text.replace(*NO_LENSING)
    p = tmp_path / "c.toml"
    p.write_text(text)
    return p


def _write_box(path, n=200, seed=1, **overrides):
    import numpy as np
    from astropy.table import Table

    rng = np.random.default_rng(seed)
    cols = {"X": rng.uniform(0, 100, n), "Y": rng.uniform(0, 100, n),
            "Z": rng.uniform(0, 100, n), "VX": rng.normal(0, 300, n),
            "VY": rng.normal(0, 300, n), "VZ": rng.normal(0, 300, n),
            "MAG": rng.uniform(-22, -19, n)}
    cols.update(overrides)
    Table(cols).write(path, overwrite=True)


@pytest.mark.parametrize("case, needle", [
    ("good", None),
    ("missing_file", "not found"),
    ("garbage", "box.fits"),
    ("wrong_format", "box.txt"),
    ("nan", "NaN/inf"),
    ("outside", "outside"),
    ("units", "units"),
])
def test_bad_box_catalogues_exit_2_with_a_readable_message(tmp_path, capsys, case, needle):
    import numpy as np

    name = "box.txt" if case == "wrong_format" else "box.fits"
    if case == "good":
        _write_box(tmp_path / name)
    elif case == "garbage":
        (tmp_path / name).write_bytes(b"this is not a FITS file" * 10)
    elif case == "wrong_format":
        (tmp_path / name).write_text("1 2 3\n")
    elif case == "nan":
        x = np.random.default_rng(2).uniform(0, 100, 200)
        x[7] = np.nan
        _write_box(tmp_path / name, X=x)
    elif case == "outside":
        x = np.random.default_rng(2).uniform(0, 100, 200)
        x[3] = 140.0
        _write_box(tmp_path / name, X=x)
    elif case == "units":  # positions in units of the box side, not Mpc/h
        rng = np.random.default_rng(3)
        _write_box(tmp_path / name, X=rng.uniform(0, 1, 200), Y=rng.uniform(0, 1, 200),
                   Z=rng.uniform(0, 1, 200))
    code = main(["check", str(_box_config(tmp_path, name))])
    err = capsys.readouterr().err
    if needle is None:
        assert code == 0, err
        return
    assert code == 2, err
    assert needle in err and "Traceback" not in err, err


@pytest.mark.parametrize("case", ["no_particles", "other_box", "good"])
def test_lensing_needs_the_matter_of_the_same_box(tmp_path, capsys, case):
    """ΔΣ of a file box: no particle file, or one from a box of another size, is refused
    with the key and the file named; the right one is accepted."""
    import numpy as np
    from astropy.table import Table

    _write_box(tmp_path / "box.fits")
    part = Table({"px": np.random.default_rng(3).uniform(0, 100, 500),
                  "py": np.random.default_rng(4).uniform(0, 100, 500),
                  "pz": np.random.default_rng(5).uniform(0, 100, 500)})
    part.meta["BOXSIZE"] = 120.0 if case == "other_box" else 100.0
    part.write(tmp_path / "particles.fits")
    lensing = "" if case == "no_particles" else (
        'particles = "particles.fits"\nparticle_mass = 1e11\n'
        'particle_columns = { x = "px", y = "py", z = "pz" }')
    p = _box_config(tmp_path, "box.fits", lensing=lensing or "# no particles")
    code = main(["check", str(p)])
    err = capsys.readouterr().err
    if case == "good":
        assert code == 0, err
        return
    assert code == 2 and "Traceback" not in err, err
    if case == "no_particles":
        assert "delta_sigma needs a matter tracer" in err and "box.particles" in err
    else:
        assert "particles.fits" in err and "120" in err and "BOXSIZE" in err


def test_every_toml_example_in_the_readme_parses():
    import sys

    if sys.version_info >= (3, 11):
        import tomllib
    else:  # pragma: no cover
        import tomli as tomllib
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```toml\n(.*?)```", readme, re.S)
    assert blocks, "README.md has no TOML example"
    for block in blocks:
        example = tomllib.loads(block)
        base = tomllib.loads(template_text())
        for key, value in example.items():
            if isinstance(value, dict) and isinstance(base.get(key), dict):
                base[key].update(value)
            else:
                base[key] = value
        config_from_dict(base, "README example")  # schema only: the files are examples


def test_parameter_shift_combinations_follow_the_measured_statistics():
    """A statistic taken out of statistics.measure leaves its combinations with a warning;
    a name that is no statistic at all is refused."""
    from conecheck.config import config_warnings

    d = tiny_dict(**{"parameter_shifts.combinations": ["number_density+wp+delta_sigma"]})
    cfg = config_from_dict(d, "t")
    assert any("delta_sigma not measured" in w for w in config_warnings(cfg))
    assert cfg.parameter_shifts.resolved(cfg.statistics.measure) == (("number_density", "wp"),)
    d = tiny_dict(**{"parameter_shifts.combinations": ["number_density+wq"]})
    with pytest.raises(InputError, match=r"combinations\[0\].*wq is not a statistic"):
        config_from_dict(d, "t")
