"""`conecheck mask ...` commands and the shipped demo footprint."""

from __future__ import annotations

import filecmp
from pathlib import Path

import healpy as hp
import numpy as np
import pytest
from astropy.table import Table

from conecheck import cli
from conecheck.footprint import (
    Footprint,
    SkyRegions,
    build_mask,
    demo_mask_path,
    demo_overlap_path,
    demo_regions_path,
)

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture()
def run(monkeypatch):
    """Run the CLI with only the mask command wired (other stages may be absent)."""
    monkeypatch.setattr(cli, "SUBCOMMANDS", {"mask": cli.SUBCOMMANDS["mask"]})
    return lambda *argv: cli.main(list(argv))


@pytest.fixture()
def regions_file(tmp_path) -> Path:
    path = tmp_path / "r.toml"
    path.write_text('[mask]\nname = "test survey"\n\n'
                    '[[region]]\nshape = "box"\nra_min = 350\nra_max = 30\n'
                    'dec_min = -10\ndec_max = 20\n\n'
                    '[[region]]\nshape = "cap"\nmode = "exclude"\nra = 10\ndec = 5\n'
                    'radius = 3\n')
    return path


def test_build_info_plot(run, regions_file, tmp_path, capsys):
    out = tmp_path / "mask.fits"
    assert run("mask", "build", str(regions_file), "-o", str(out), "--nside", "32",
               "--nest") == 0
    fp = Footprint.from_fits(out)
    assert fp.nside == 32 and fp.nest
    np.testing.assert_allclose(fp.values, build_mask(regions_file, 32, nest=True).values,
                               rtol=1e-7)
    assert run("mask", "info", str(out)) == 0
    text = capsys.readouterr().out
    assert "N_side           32  (NESTED" in text
    assert f"{fp.area_deg2:.2f} deg2" in text
    assert "connected pieces 1" in text
    assert "wraps through RA 0" in text
    png = tmp_path / "m.png"
    npz = tmp_path / "jk.npz"
    assert run("mask", "plot", str(out), "-o", str(png), "--regions", "5",
               "--save-regions", str(npz)) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert SkyRegions.load(npz).k == 5
    assert run("mask", "plot", str(out), "-o", str(tmp_path / "m2.png"),
               "--projection", "mollweide") == 0


def test_info_json_pieces_and_bbox(run, tmp_path, capsys):
    import json

    fp = build_mask({"region": [{"shape": "cap", "ra": 100, "dec": 10, "radius": 5},
                                {"shape": "cap", "ra": 140, "dec": -10, "radius": 5}]}, 32)
    fp.write_fits(tmp_path / "two.fits")
    assert run("mask", "info", str(tmp_path / "two.fits"), "--json") == 0
    info = json.loads(capsys.readouterr().out)
    assert info["connected_pieces"] == 2
    bb = info["bounding_box"]
    assert 94 < bb["ra_min"] < 96 and 144 < bb["ra_max"] < 146
    assert -16 < bb["dec_min"] < -14 and 14 < bb["dec_max"] < 16
    assert sum(h["pixels"] for h in info["histogram"]) == info["occupied_pixels"]


def test_from_randoms_command(run, tmp_path):
    truth = build_mask({"region": [{"shape": "cap", "ra": 30, "dec": 30, "radius": 20}]}, 16)
    ra, dec = truth.sample(200000, np.random.default_rng(0))
    Table({"RA": ra, "DEC": dec}).write(tmp_path / "randoms.fits")
    out = tmp_path / "m.fits"
    assert run("mask", "from-randoms", str(tmp_path / "randoms.fits"), "-o", str(out),
               "--nside", "16", "--ra-column", "RA", "--dec-column", "DEC") == 0
    assert Footprint.from_fits(out).area_sr == pytest.approx(truth.area_sr, rel=0.05)
    # missing column: exit code 2, message names the column
    assert run("mask", "from-randoms", str(tmp_path / "randoms.fits"), "-o", str(out),
               "--nside", "16") == 2


def test_user_errors_exit_2(run, tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text('[[region]]\nshape = "triangle"\n')
    assert run("mask", "build", str(bad), "-o", str(tmp_path / "x.fits"), "--nside", "8") == 2
    assert "region 1: shape = 'triangle'" in capsys.readouterr().err
    notmask = tmp_path / "n.fits"
    Table({"a": [1.0]}).write(notmask)
    assert run("mask", "info", str(notmask)) == 2
    assert "not a HEALPix map" in capsys.readouterr().err
    assert run("mask") == 2
    with pytest.raises(SystemExit):
        run("mask", "build", str(bad), "-o", "x.fits", "--nside", "12")


# ------------------------------------------------------------------ shipped demo
def test_demo_mask_shipped_and_consistent():
    path = demo_mask_path()
    assert path.is_file() and path.stat().st_size < 1_000_000
    fp = Footprint.from_fits(path)
    assert fp.nside == 128
    assert 1900 < fp.area_deg2 < 2000  # masks/README.md: 1953 deg²
    # package copies are the files in masks/ (when running from the repository)
    if (REPO / "masks").is_dir():
        for name, pkg in (("kestrel_mask.fits", path), ("kestrel_regions.toml",
                                                        demo_regions_path()),
                          ("kestrel_overlap.fits", demo_overlap_path())):
            assert filecmp.cmp(REPO / "masks" / name, pkg, shallow=False), name
    # the map is what the region file builds
    np.testing.assert_allclose(fp.values, build_mask(demo_regions_path(), 128).values,
                               atol=1e-7)
    overlap = Footprint.from_fits(demo_overlap_path())
    assert np.all(overlap.values[fp.values == 0] == 0)
    frac = overlap.values[fp.occupied].mean()
    assert 0.15 < frac < 0.5
    assert hp.npix2nside(overlap.npix) == 128
