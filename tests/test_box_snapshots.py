"""Evolving cones from several snapshots.

The n(z) of a cone built from two Poisson snapshots of different density must step from one
density to the other where the snapshots hand over (counts per comoving volume, Poisson
errors); the box side combines snapshot measurements linearly (checked against the
definition of the weighted sum and of the jackknife covariance).
"""

from __future__ import annotations

import numpy as np
import pytest
from cone_helpers import COSMO, poisson_box
from run_helpers import tiny_dict

from conecheck.box.snapshots import snapshot_chi_edges, snapshot_weights, stack_snapshots
from conecheck.cone import SurveyModel
from conecheck.cone.build import build_cone, cone_rngs
from conecheck.cone.settings import EffectSwitches, SurveyShell
from conecheck.config import config_from_dict
from conecheck.errors import InputError
from conecheck.stats.base import LOS_VARIANCE, Measurement, combine_measurements


def test_cone_density_steps_where_the_snapshots_hand_over():
    """Snapshot 0 holds n, snapshot 1 holds 2n (Poisson boxes); the hand-over lies at the
    midpoint in χ of z = 0.02 and 0.04. Every 10 Mpc/h shell wholly on one side must hold
    its snapshot's density within 4 Poisson σ (σ = √N / V), and every galaxy must come from
    the snapshot whose range holds its true distance."""
    n0 = 100_000
    a = poisson_box(n0, 200.0, seed=1, sigma_v=200.0)
    b = poisson_box(2 * n0, 200.0, seed=2, sigma_v=200.0)
    edges = snapshot_chi_edges([0.02, 0.04], [None, None], COSMO)
    chi_mid = 0.5 * float(COSMO.comoving_distance(0.02) + COSMO.comoving_distance(0.04))
    assert edges[0] == pytest.approx(chi_mid)
    box = stack_snapshots([a, b], [0.02, 0.04], edges)
    fx = EffectSwitches(footprint=False, fibres=False, flux_limit=False)
    survey = SurveyModel(cosmology=COSMO, shell=SurveyShell(z_min=0.01, z_max=0.05),
                         effects=fx)
    cone, _ = build_cone(box, survey, [100.0] * 3, None, cone_rngs(1, 0))
    chi, snap = np.asarray(cone["chi_true"]), np.asarray(cone["snapshot"])
    assert np.all(snap[chi < edges[0]] == 0) and np.all(snap[chi >= edges[0]] == 1)
    shells = np.arange(40.0, 141.0, 10.0)
    count, _ = np.histogram(chi, shells)
    vol = 4 * np.pi / 3 * np.diff(shells**3)
    mean_density = n0 / 200.0**3
    whole = (shells[1:] <= edges[0]) | (shells[:-1] >= edges[0])
    expect = np.where(shells[:-1] >= edges[0], 2.0, 1.0) * mean_density
    z = (count / vol - expect) / (np.sqrt(count) / vol)
    assert whole.sum() >= 8 and np.all(np.abs(z[whole]) < 4), z
    # the step itself: from ≈ n to ≈ 2n
    assert np.all(count[whole & (shells[1:] <= edges[0])] / vol[whole & (shells[1:] <= edges[0])]
                  < 1.3 * mean_density)


def test_snapshot_weights_follow_volume_and_expected_galaxies():
    a = poisson_box(10, 100.0, seed=1)
    box = stack_snapshots([a, a, a], [0.02, 0.04, 0.06], (80.0, 140.0))
    w_vol, w_gal = snapshot_weights(box, [1.0, 2.0, 4.0], 60.0, 100.0)
    v = np.array([80**3 - 60**3, 100**3 - 80**3, 0.0])
    np.testing.assert_allclose(w_vol, v / v.sum())
    np.testing.assert_allclose(w_gal, v * [1, 2, 4] / (v * [1, 2, 4]).sum())


def test_combined_measurement_is_the_weighted_sum_with_its_jackknife():
    rng = np.random.default_rng(0)
    parts = [Measurement("wp", np.arange(4.0), rng.normal(size=4), rng.normal(size=(9, 4)),
                         extra={LOS_VARIANCE: rng.random(4).tolist()}) for _ in range(2)]
    w = np.array([0.3, 0.7])
    m = combine_measurements(parts, w)
    np.testing.assert_allclose(m.value, 0.3 * parts[0].value + 0.7 * parts[1].value)
    d = 0.3 * parts[0].delete_one + 0.7 * parts[1].delete_one
    # the jackknife covariance of the combination is that of the combined delete-one vectors
    dev = d - d.mean(axis=0)
    np.testing.assert_allclose(m.covariance, 8 / 9 * dev.T @ dev)
    np.testing.assert_allclose(m.extra[LOS_VARIANCE],
                               0.09 * np.asarray(parts[0].extra[LOS_VARIANCE])
                               + 0.49 * np.asarray(parts[1].extra[LOS_VARIANCE]))


@pytest.mark.parametrize(("snapshots", "match"), [
    ([{"redshift": 0.07}, {"redshift": 0.03}], r"snapshots\[1\].redshift = 0.03: .*increasing"),
    ([{"redshift": 0.03, "z_max": 0.09}, {"redshift": 0.07}],
     r"snapshots\[0\].z_max = 0.09: .*must not overlap"),
    ([{"path": "a.fits"}], r"snapshots\[0\].redshift: required"),
])
def test_bad_snapshot_lists_name_the_key(snapshots, match):
    with pytest.raises(InputError, match=match):
        config_from_dict(tiny_dict(**{"box.redshift": None, "box.snapshots": snapshots}))


def test_snapshots_replace_the_single_box_keys_and_need_their_files():
    with pytest.raises(InputError, match="remove box.path and box.redshift"):
        config_from_dict(tiny_dict(**{"box.snapshots": [{"redshift": 0.05}]}))
    d = tiny_dict(**{"box.redshift": None, "box.source": "file",
                     "box.snapshots": [{"redshift": 0.03}, {"redshift": 0.06, "path": "b"}]})
    with pytest.raises(InputError, match=r"snapshots\[0\].path: source = 'file'"):
        config_from_dict(d)


def test_a_snapshot_file_without_magnitudes_names_its_key(tmp_path):
    from astropy.table import Table

    from conecheck.run.inputs import load_box_and_halos

    rng = np.random.default_rng(0)
    for name, mags in (("z03.fits", True), ("z07.fits", False)):
        t = Table({c: rng.uniform(0, 100, 50) for c in ("x", "y", "z")}
                  | {c: np.zeros(50) for c in ("vx", "vy", "vz")})
        if mags:
            t["abs_mag"] = rng.uniform(-22, -19, 50)
        t.meta.update(BOXSIZE=100.0)
        t.write(tmp_path / name)
    d = tiny_dict(**{"box.redshift": None, "box.source": "file", "box.box_size": 100.0,
                     "box.snapshots": [{"redshift": 0.03, "path": "z03.fits"},
                                       {"redshift": 0.07, "path": "z07.fits"}]})
    cfg = config_from_dict(d, "c.toml", tmp_path)
    with pytest.raises(InputError, match=r"box.snapshots\[1\] .*z07.fits.*abs_mag"):
        load_box_and_halos(cfg)
