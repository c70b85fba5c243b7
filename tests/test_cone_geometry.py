"""Cone geometry: sky coordinates, redshifts, rotations, replication, bad input."""

from __future__ import annotations

import logging

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import cartesian_to_spherical
from astropy.cosmology import FlatLambdaCDM, z_at_value
from cone_helpers import COSMO, cap_footprint, poisson_box, survey
from scipy import stats
from scipy.spatial.transform import Rotation

from conecheck.cone import ObserverSettings, SurveyShell, build_cone, replica_offsets
from conecheck.cone.build import cone_geometry
from conecheck.cone.geometry import (
    BoxCells,
    iter_shell_chunks,
    observer_position,
    rotation_matrix,
    sky_coordinates,
    sky_coverage,
)
from conecheck.errors import InputError


def test_sky_coordinates_match_astropy():
    # Reference: astropy.coordinates.cartesian_to_spherical (reference library).
    rng = np.random.default_rng(1)
    r = rng.normal(size=(2000, 3)) * rng.uniform(1, 1000, (2000, 1))
    r[:5] = [[1, 0, 0], [0, 1, 0], [-1, 0, 0], [0, -1e-12, 1], [1e-9, 0, -1]]
    ra, dec, chi = sky_coordinates(r)
    dist, lat, lon = cartesian_to_spherical(r[:, 0], r[:, 1], r[:, 2])
    np.testing.assert_allclose(chi, dist.value, rtol=1e-14)
    dra = (ra - lon.to_value(u.deg) + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(dra[np.abs(dec) < 89.999])) < 1e-10
    assert np.max(np.abs(dec - lat.to_value(u.deg))) < 1e-10
    assert np.all((ra >= 0) & (ra < 360))


def test_cone_positions_follow_rotation_and_replicas():
    # r = R (x + n L - o): rebuild every galaxy's box position from RA, Dec, chi_true.
    box = poisson_box(4000, 100.0, seed=2)
    rot = Rotation.from_euler("ZYZ", [30, 50, -20], degrees=True).as_matrix()
    o = np.array([10.0, 60.0, 95.0])
    sv = survey(rsd=False, errors=False, fibres=False, use_footprint=False,
                shell=SurveyShell(z_min=0.01, z_max=0.05, margin_mpch=0.0))
    cone, info = build_cone(box, sv, o, rot, np.random.default_rng(0))
    r = np.column_stack([np.cos(np.radians(cone["dec"])) * np.cos(np.radians(cone["ra"])),
                         np.cos(np.radians(cone["dec"])) * np.sin(np.radians(cone["ra"])),
                         np.sin(np.radians(cone["dec"]))]) * np.asarray(cone["chi_true"])[:, None]
    x = r @ rot + o  # R^T r + o = x + n L
    n = np.rint((x - box.position[cone["box_index"]]) / box.box_size)
    np.testing.assert_allclose(x - n * box.box_size, box.position[cone["box_index"]], atol=1e-9)
    assert info["n_replicas_used"] == len(np.unique(n, axis=0))


def test_cosmological_redshift_matches_astropy_z_at_value():
    # Reference: astropy.cosmology.z_at_value with FlatLambdaCDM(H0=100, Tcmb0=0):
    # distances in Mpc equal our Mpc/h.
    ref = FlatLambdaCDM(H0=100.0, Om0=COSMO.omega_m, Tcmb0=0.0)
    box = poisson_box(3000, 200.0, seed=3)
    sv = survey(rsd=False, errors=False, fibres=False, use_footprint=False,
                shell=SurveyShell(z_min=0.01, z_max=0.06))
    cone, _ = build_cone(box, sv, [100.0, 100.0, 100.0], None, np.random.default_rng(0))
    for row in cone[:: max(1, len(cone) // 6)]:
        z_ref = z_at_value(ref.comoving_distance, row["chi_true"] * u.Mpc, zmax=1.0).value
        assert abs(row["z_cos"] - z_ref) < 1e-7
    # no RSD, no errors: the observed redshift is the cosmological one
    np.testing.assert_array_equal(cone["z_obs"], cone["z_cos"])


@pytest.mark.parametrize("r_frac, expected", [(0.45, 1), (0.6, 7), (0.8, 19), (0.9, 27)])
def test_replica_count_from_central_observer(r_frac, expected):
    # Geometry of a cube around its centre: faces at L/2, edges at L/sqrt(2), corners at
    # sqrt(3) L/2 (elementary geometry).
    L = 100.0
    reps = replica_offsets([50.0, 50.0, 50.0], L, 0.0, r_frac * L)
    assert len(reps) == expected
    assert tuple(reps[0]) == (0, 0, 0)
    if expected == 7:
        assert {tuple(n) for n in reps} == {(0, 0, 0), (1, 0, 0), (-1, 0, 0), (0, 1, 0),
                                           (0, -1, 0), (0, 0, 1), (0, 0, -1)}


def test_replica_set_against_monte_carlo():
    # Independent check: replicas hit by points uniform in the shell around the observer.
    rng = np.random.default_rng(4)
    L, o, r_in, r_out = 100.0, np.array([12.0, 70.0, 33.0]), 120.0, 170.0
    reps = {tuple(n) for n in replica_offsets(o, L, r_in, r_out)}
    d = rng.normal(size=(400000, 3))
    d *= (np.cbrt(rng.uniform(r_in**3, r_out**3, len(d))) / np.linalg.norm(d, axis=1))[:, None]
    hit = {tuple(n) for n in np.unique(np.floor((o + d) / L).astype(int), axis=0)}
    assert hit <= reps
    # replicas the sample missed must be thin slivers that do reach the shell
    for n in reps - hit:
        x = (np.array(n) + rng.uniform(size=(200000, 3))) * L - o
        dist = np.linalg.norm(x, axis=1)
        assert np.any((dist >= r_in) & (dist <= r_out + 0.5)), n


def test_chunking_and_footprint_pruning_keep_every_galaxy():
    box = poisson_box(20000, 100.0, seed=5)
    fp = cap_footprint(32, 40.0, 20.0, 15.0)
    rot = Rotation.from_euler("ZYZ", [10, 80, 45], degrees=True).as_matrix()
    o = np.array([30.0, 40.0, 50.0])
    reps = replica_offsets(o, 100.0, 100.0, 250.0)
    cells = BoxCells.build(box.position, 100.0)

    def collect(coverage, chunk_rows):
        keys = []
        for ch in iter_shell_chunks(box.position, cells, 100.0, o, rot, reps, 100.0, 250.0,
                                    coverage, chunk_rows):
            ra, dec, _ = sky_coordinates(ch.r)
            inside = fp.contains(ra, dec)
            keys.append(ch.box_index[inside] * 10000 + ch.replica[inside])
        return np.sort(np.concatenate(keys))

    full = collect(None, 1 << 20)
    cov = sky_coverage(fp)
    assert cov is not None
    np.testing.assert_array_equal(collect(cov, 1 << 20), full)
    np.testing.assert_array_equal(collect(cov, 700), full)
    assert len(full) > 500


def test_random_rotations_are_isotropic():
    # A uniform rotation sends a fixed axis to a uniform direction: cos(theta) ~ U(-1, 1)
    # (Haar measure on SO(3)); KS test from scipy.stats.
    settings = ObserverSettings()
    z = np.array([rotation_matrix(settings, i, np.random.default_rng(i))[2, 2]
                  for i in range(400)])
    assert stats.kstest(z, stats.uniform(-1, 2).cdf).pvalue > 1e-3


def test_observer_placements():
    grid = ObserverSettings(placement="grid")
    pos = np.array([observer_position(grid, 90.0, 8, i, np.random.default_rng(0))
                    for i in range(8)])
    assert {tuple(p) for p in pos} == {(a, b, c) for a in (22.5, 67.5) for b in (22.5, 67.5)
                                       for c in (22.5, 67.5)}
    given = ObserverSettings(placement="given", positions=[1, 2, 3, 4, 5, 6])
    assert given.positions == ((1.0, 2.0, 3.0), (4.0, 5.0, 6.0))
    np.testing.assert_array_equal(observer_position(given, 10.0, 3, 2, None), [1.0, 2.0, 3.0])
    o1, r1 = cone_geometry(ObserverSettings(), 50.0, 4, seed=9, cone_index=2)
    o2, r2 = cone_geometry(ObserverSettings(), 50.0, 4, seed=9, cone_index=2)
    o3, _ = cone_geometry(ObserverSettings(), 50.0, 4, seed=9, cone_index=3)
    np.testing.assert_array_equal(o1, o2)
    np.testing.assert_array_equal(r1, r2)
    assert not np.allclose(o1, o3)
    assert np.all((o1 >= 0) & (o1 < 50.0))


def test_observer_outside_box_is_refused():
    box = poisson_box(100, 50.0)
    with pytest.raises(InputError, match="outside the box"):
        build_cone(box, survey(use_footprint=False), [10.0, 60.0, 5.0], None,
                   np.random.default_rng(0))
    with pytest.raises(InputError, match="outside the box"):
        observer_position(ObserverSettings(placement="given", positions=[[-1, 2, 3]]), 50.0, 1,
                          0, None)


def test_replication_policy_warn_refuse_and_cap(caplog):
    box = poisson_box(500, 50.0)
    shell = SurveyShell(z_min=0.01, z_max=0.03, margin_mpch=0.0)  # chi_max ~ 89 Mpc/h > L/2
    sv = survey(use_footprint=False, rsd=False, errors=False, fibres=False, shell=shell)
    with caplog.at_level(logging.WARNING, logger="conecheck.cone"):
        _, info = build_cone(box, sv, [25, 25, 25], None, np.random.default_rng(0))
    # the cone counts its repeats; the run warns once from the counts (run/validate.py)
    assert info["repeats_possible"] and info["n_repeated"] > 0
    assert "same structures" not in caplog.text
    sv = survey(use_footprint=False, shell=shell, observers=ObserverSettings(
        replication="refuse"))
    with pytest.raises(InputError, match="observers.replication"):
        build_cone(box, sv, [25, 25, 25], None, np.random.default_rng(0))
    sv = survey(use_footprint=False, shell=shell, observers=ObserverSettings(max_replicas=8))
    with pytest.raises(InputError, match="observers.max_replicas"):
        build_cone(box, sv, [25, 25, 25], None, np.random.default_rng(0))


def test_settings_validation_names_fields():
    with pytest.raises(InputError) as err:
        ObserverSettings(placement="given", rotation="sideways", max_replicas=0)
    text = " ".join(err.value.problems)
    for name in ("positions", "rotation", "max_replicas"):
        assert name in text
    with pytest.raises(InputError, match="z_max"):
        SurveyShell(z_min=0.2, z_max=0.1)
    with pytest.raises(InputError, match="positions"):
        ObserverSettings(placement="given", positions=[1, 2])
