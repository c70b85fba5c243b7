"""`conecheck mockbox`: halo files and synthetic boxes through the CLI."""

from __future__ import annotations

import numpy as np
import pytest
from astropy.table import Table

from conecheck import cli
from conecheck.box import default_hod_path
from conecheck.catalog import read_galaxy_box


@pytest.fixture
def run(monkeypatch):
    # only this subcommand: the others belong to other stages
    monkeypatch.setattr(cli, "SUBCOMMANDS", {"mockbox": cli.SUBCOMMANDS["mockbox"]})
    return lambda *argv: cli.main(["mockbox", *argv])


def halo_file(path, n=3000, mass=None, drop=None, seed=0):
    rng = np.random.default_rng(seed)
    t = Table({"X": rng.uniform(0, 200, n), "y": rng.uniform(0, 200, n),
               "z": rng.uniform(0, 200, n), "vx": rng.normal(0, 300, n),
               "vy": rng.normal(0, 300, n), "vz": rng.normal(0, 300, n),
               "M200m": 10 ** rng.uniform(11.5, 14.5, n) if mass is None else mass})
    if drop:
        t.remove_column(drop)
    t.meta["BOXSIZE"] = 200.0
    t.meta["REDSHIFT"] = 0.15
    t.write(path)
    return path


def test_mockbox_from_halo_file(run, tmp_path, capsys):
    halos = halo_file(tmp_path / "halos.fits")
    out = tmp_path / "box.fits"
    rc = run("--halos", str(halos), "--column", "x=X", "--column", "mass=M200m",
             "--hod", str(default_hod_path()), "-o", str(out), "--seed", "4")
    assert rc == 0
    box = read_galaxy_box(out)
    assert box.box_size == 200.0 and box.redshift == 0.15 and len(box) > 100
    text = capsys.readouterr().out
    assert f"{len(box)} galaxies" in text and "-21.00" in text
    t = Table.read(out)
    assert t.meta["SEED"] == 4 and len(t.meta["HALOSHA"]) == 64
    # same seed, same galaxies
    out2 = tmp_path / "box2.fits"
    run("--halos", str(halos), "--column", "x=X", "--column", "mass=M200m", "-o", str(out2),
        "--seed", "4")
    assert np.array_equal(read_galaxy_box(out2).position, box.position)


def test_mockbox_synthetic(run, tmp_path):
    out = tmp_path / "syn.fits"
    assert run("--synthetic", "--box-size", "120", "--grid", "32", "--seed", "1",
               "-o", str(out)) == 0
    t = Table.read(out)
    assert t.meta["GRID"] == 32 and t.meta["SEED"] == 1 and "synthetic" in t.meta["BOXMADE"]
    assert "threshold" in t.meta["HODPARS"]


def test_mockbox_synthetic_defaults_are_the_runs():
    """`mockbox --synthetic` and a run's synthetic box start from the same settings."""
    import argparse

    from conecheck.box.commands import add_arguments
    from conecheck.config import SYNTHETIC_BOX_SIZE, BoxConfig, CosmologyConfig
    from conecheck.cosmology import Cosmology

    p = argparse.ArgumentParser()
    add_arguments(p)
    args = p.parse_args(["--synthetic", "-o", "x.fits"])
    assert (args.sigma8, args.n_s, args.omega_b) == (BoxConfig.sigma8, BoxConfig.n_s,
                                                     BoxConfig.omega_b)
    assert (args.omega_m, args.hubble_h) == (CosmologyConfig.omega_m, CosmologyConfig.h)
    assert args.box_size is None and SYNTHETIC_BOX_SIZE == 250.0  # filled in by main
    assert Cosmology(omega_m=args.omega_m, h=args.hubble_h).h == CosmologyConfig.h


@pytest.mark.parametrize("case,match", [
    ("nomass", "missing column(s) 'mass'; the file has"),
    ("negative", "non-positive"),
    ("nogalaxy", "no galaxy"),
    ("nosize", "--box-size"),
    ("badgrid", "too small"),
])
def test_mockbox_bad_input_exit_2(run, tmp_path, capsys, case, match):
    out = str(tmp_path / "box.fits")
    halos = tmp_path / "h.fits"
    if case == "nomass":
        args = ["--halos", str(halo_file(halos, drop="M200m")), "--column", "x=X"]
    elif case == "negative":
        mass = np.full(3000, 1e13)
        mass[7] = -1.0
        args = ["--halos", str(halo_file(halos, mass=mass)), "--column", "x=X",
                "--column", "mass=M200m"]
    elif case == "nogalaxy":
        args = ["--halos", str(halo_file(halos, mass=np.full(3000, 1e11))),
                "--column", "x=X", "--column", "mass=M200m"]
    elif case == "nosize":  # a halo file without a BOXSIZE header and no --box-size
        from astropy.table import Table as _T

        t = _T.read(halo_file(halos))
        del t.meta["BOXSIZE"]
        t.write(halos, overwrite=True)
        args = ["--halos", str(halos), "--column", "x=X", "--column", "mass=M200m"]
    else:
        args = ["--synthetic", "--box-size", "20", "--grid", "64"]
    assert run(*args, "-o", out) == 2
    assert match in capsys.readouterr().err
