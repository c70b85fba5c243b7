"""Randoms, writing cones and manifests, and seeding of many cones."""

from __future__ import annotations

import json

import numpy as np
import pytest
from astropy.table import Table
from cone_helpers import COSMO, cap_footprint, poisson_box
from scipy import stats

from conecheck.cone import (
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    ObserverSettings,
    RandomSettings,
    RedshiftErrorSettings,
    SurveyShell,
    build_all_cones,
    make_randoms,
    n_randoms,
    write_cones_directory,
)
from conecheck.cone.build import SurveyModel, build_cone, cone_geometry, cone_rngs
from conecheck.errors import InputError
from conecheck.footprint.jackknife import jackknife_regions


def test_randoms_uniform_in_volume_and_inside_footprint():
    # chi^3 uniform between the limits <=> uniform in comoving volume; KS test (scipy.stats).
    fp = cap_footprint(64, 30.0, -10.0, 12.0, value=0.5)
    t = make_randoms(fp, 100.0, 300.0, 20000, np.random.default_rng(1), cosmology=COSMO)
    assert len(t) == 20000
    assert np.all(fp.contains(t["ra"], t["dec"]))
    x = (np.asarray(t["chi_obs"]) ** 3 - 100.0**3) / (300.0**3 - 100.0**3)
    assert stats.kstest(x, "uniform").pvalue > 1e-3
    np.testing.assert_allclose(COSMO.comoving_distance(t["z_obs"]), t["chi_obs"], rtol=1e-7)
    # a wrong radial law must fail the same test: chi uniform (not chi^3)
    wrong = np.random.default_rng(2).uniform(100.0, 300.0, 20000)
    assert stats.kstest((wrong**3 - 100.0**3) / (300.0**3 - 100.0**3), "uniform").pvalue < 1e-6
    # seeded: same seed, same randoms
    t2 = make_randoms(fp, 100.0, 300.0, 20000, np.random.default_rng(1))
    np.testing.assert_array_equal(t["ra"], t2["ra"])


def test_randoms_shuffle_and_full_sky():
    data = np.array([120.0, 150.0, 150.0, 180.0])
    t = make_randoms(None, 100.0, 200.0, 5000, np.random.default_rng(3), radial="shuffle",
                     data_chi=data)
    assert set(np.unique(t["chi_obs"])) == {120.0, 150.0, 180.0}
    assert abs(np.mean(t["chi_obs"] == 150.0) - 0.5) < 0.05
    # full sky: isotropic, sin(dec) uniform (Archimedes' hat-box theorem)
    assert stats.kstest(np.sin(np.radians(t["dec"])), stats.uniform(-1, 2).cdf).pvalue > 1e-3
    with pytest.raises(InputError, match="shuffle"):
        make_randoms(None, 100.0, 200.0, 10, np.random.default_rng(0), radial="shuffle")
    with pytest.raises(InputError, match="chi_min"):
        make_randoms(None, 200.0, 100.0, 10, np.random.default_rng(0))
    assert n_randoms(1000.5, 20.0) == 20010
    with pytest.raises(InputError, match="multiple"):
        RandomSettings(multiple=0.0)


def _settings():
    return dict(shell=SurveyShell(z_min=0.01, z_max=0.04, m_lim=16.5),
                observers=ObserverSettings(placement="random", rotation="random"),
                effects=EffectSwitches(), fibres=FibreSettings(),
                correction=CorrectionSettings("nearest_upweight"),
                redshift_errors=RedshiftErrorSettings(), cosmology=COSMO)


def test_build_all_cones_is_order_independent():
    box = poisson_box(20000, 120.0, seed=4, sigma_v=250.0, mags=(-22.0, -17.0))
    fp = cap_footprint(32, 100.0, 40.0, 30.0)
    cones = build_all_cones(box, fp, n_cones=3, seed=11, **_settings())
    assert len(cones) == 3
    # cone 2 rebuilt alone from its own seeds is identical
    s = _settings()
    survey = SurveyModel(footprint=fp, **s)
    o, rot = cone_geometry(s["observers"], box.box_size, 3, 11, 2)
    alone, info = build_cone(box, survey, o, rot, cone_rngs(11, 2))
    t2, i2 = cones[2]
    assert i2["cone_index"] == 2 and i2["seed"] == 11
    for col in ("ra", "dec", "z_obs", "weight", "zflag"):
        np.testing.assert_array_equal(alone[col], t2[col])
    assert len(cones[0][0]) != len(cones[1][0]) or not np.array_equal(cones[0][0]["ra"],
                                                                        cones[1][0]["ra"])
    # upweighting conserves the target count inside the shell, up to edge effects
    assert abs(i2["sum_weight"] - i2["n_galaxies"] - i2["fibres"]["n_missed"]) \
        <= 0.02 * i2["n_galaxies"]
    with pytest.raises(InputError, match="n_cones"):
        build_all_cones(box, fp, n_cones=0, seed=1, **_settings())


def test_write_cones_directory_round_trip(tmp_path):
    box = poisson_box(8000, 100.0, seed=5, sigma_v=200.0, mags=(-22.0, -17.0))
    fp = cap_footprint(32, 200.0, 10.0, 25.0)
    cones = build_all_cones(box, fp, n_cones=2, seed=3, **_settings())
    regions = jackknife_regions(fp, 4, seed=0)
    rnd = make_randoms(fp, 30.0, 120.0, 1000, np.random.default_rng(0), cosmology=COSMO)
    manifest = {"seed": 3, "settings": SurveyModel(footprint=fp, **_settings()).settings_dict()}
    path = write_cones_directory(tmp_path / "out", cones, {"bright z<0.04": rnd}, manifest,
                                 regions)
    doc = json.loads(path.read_text())
    assert [f["file"] for f in doc["files"]] == ["cone_000.fits", "cone_001.fits",
                                                 "randoms_bright_z_0_04.fits"]
    assert doc["cones"][1]["cone_index"] == 1 and "n_replicas" in doc["cones"][1]
    assert doc["settings"]["fibres"]["angle_arcsec"] == 55.0
    assert doc["zflag_codes"]["2"].startswith("collided")
    t = Table.read(tmp_path / "out" / "cone_001.fits")
    for col in ("ra", "dec", "z_obs", "chi_obs", "weight", "zflag", "abs_mag", "region"):
        assert col in t.colnames
    assert str(t["ra"].unit) == "deg"
    np.testing.assert_allclose(t["ra"], cones[1][0]["ra"])
    np.testing.assert_array_equal(t["region"], regions.region_of(t["ra"], t["dec"]))
    r = Table.read(tmp_path / "out" / "randoms_bright_z_0_04.fits")
    assert len(r) == 1000 and "region" in r.colnames
