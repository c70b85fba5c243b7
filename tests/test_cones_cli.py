"""`conecheck cones CONFIG -o DIR`: cones and randoms as FITS with a manifest."""

from __future__ import annotations

import json

import numpy as np
import tomli_w
from astropy.table import Table
from run_helpers import tiny_dict

from conecheck.cli import main


def test_cones_command_writes_cones_randoms_and_manifest(tmp_path):
    d = tiny_dict(**{"survey.effects.fibres": True, "survey.correction.name": "nearest_upweight"})
    cfg = tmp_path / "c.toml"
    cfg.write_text(tomli_w.dumps(d))
    assert main(["cones", str(cfg), "-o", str(tmp_path / "cones"), "-q"]) == 0
    man = json.loads((tmp_path / "cones" / "manifest.json").read_text())
    kinds = [f["kind"] for f in man["files"]]
    assert kinds.count("cone") == d["cones"]["n_cones"] and kinds.count("randoms") == 1
    assert man["effects"]["fibres"] is True and man["correction"] == "nearest_upweight"
    cone = Table.read(tmp_path / "cones" / "cone_000.fits")
    for col in ("ra", "dec", "z_obs", "chi_obs", "weight", "zflag", "abs_mag", "region"):
        assert col in cone.colnames, col
    # up-weighting conserves the targets' total weight inside the shell to within the few
    # collided galaxies whose fibred neighbour falls outside it
    assert np.all(np.asarray(cone["weight"]) >= 1.0)
    rnd = Table.read(tmp_path / "cones" / "randoms_broad__primary.fits")
    assert len(rnd) > 3 * len(cone[np.asarray(cone["abs_mag"]) < -20.0])
    assert np.all(np.asarray(rnd["region"]) >= 0)
    # the cone's own header says how it was made, without the manifest
    from astropy.io import fits

    head = fits.getheader(tmp_path / "cones" / "cone_000.fits", 1)
    info = man["cones"][0]
    assert [head["OBS_X"], head["OBS_Y"], head["OBS_Z"]] == info["observer_mpch"]
    assert head["NREPLIC"] == info["n_replicas"] and head["SEED"] == d["seed"]
    assert head["OMEGA_M"] == d["cosmology"]["omega_m"] and head["CONECHK"]
    assert head["TUNIT" + str(cone.colnames.index("chi_obs") + 1)].startswith("Mpc")


def test_cones_command_refuses_a_file_as_output(tmp_path, capsys):
    cfg = tmp_path / "c.toml"
    cfg.write_text(tomli_w.dumps(tiny_dict()))
    (tmp_path / "out").write_text("x")
    assert main(["cones", str(cfg), "-o", str(tmp_path / "out")]) == 2
    assert "is a file" in capsys.readouterr().err


def test_shuffled_randoms_take_their_distances_from_cone_0(tmp_path):
    d = tiny_dict(**{"randoms.radial": "shuffle"})
    cfg = tmp_path / "c.toml"
    cfg.write_text(tomli_w.dumps(d))
    assert main(["cones", str(cfg), "-o", str(tmp_path / "cones"), "-q"]) == 0
    cone = Table.read(tmp_path / "cones" / "cone_000.fits")
    sample = d["samples"][0]
    z = np.asarray(cone["z_obs"])
    sel = ((np.asarray(cone["abs_mag"]) < sample["mag_max"]) & (z >= sample["z_min"])
           & (z < sample["z_max"]))
    rnd = Table.read(tmp_path / "cones" / "randoms_broad__primary.fits")
    assert np.all(np.isin(np.asarray(rnd["chi_obs"]), np.asarray(cone["chi_obs"])[sel]))
    man = json.loads((tmp_path / "cones" / "manifest.json").read_text())
    assert man["randoms_radial"] == "shuffle"
