"""Fibre-collision emulator and corrections."""

from __future__ import annotations

import itertools

import healpy as hp
import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from astropy.cosmology import FlatLambdaCDM
from astropy.table import Table
from cone_helpers import COSMO, cap_footprint, separations_arcsec, survey, thomas_box
from hypothesis import given, settings
from hypothesis import strategies as st

from conecheck.cone import (
    CORRECTIONS,
    ZFLAG_COLLIDED,
    ZFLAG_NEAREST_REDSHIFT,
    ZFLAG_OWN_FIBRE,
    ZFLAG_SECOND_PASS,
    FibreSettings,
    FullSky,
    SurveyShell,
    assign_fibres,
    build_cone,
    load_overlap_map,
)
from conecheck.cone.fibres import collision_pairs, decollide
from conecheck.errors import InputError
from conecheck.sphere import radec_to_vec as unit_vectors

NO_SECOND = FibreSettings(overlap_fraction=0.0)


def test_poisson_sky_neighbour_law_and_sparse_limit():
    # Poisson nearest-neighbour law (Hertz 1909; Chandrasekhar 1943, Rev. Mod. Phys. 15, 1,
    # from memory): for N uniform points on the sphere, P(a neighbour within theta) =
    # 1 - (1 - A_cap/4pi)^(N-1), A_cap = 2pi(1 - cos theta) -> 1 - exp(-n pi theta^2).
    n = 200000
    ra, dec = FullSky().sample(n, np.random.default_rng(1))
    n_sky = n / (4 * np.pi)
    theta = np.sqrt(0.01 / (np.pi * n_sky))  # lambda = n pi theta^2 = 0.01 (sparse)
    res = assign_fibres(ra, dec, FibreSettings(angle_arcsec=np.degrees(theta) * 3600,
                                               overlap_fraction=0.0),
                        np.random.default_rng(2))
    p = 1 - (1 - (1 - np.cos(theta)) / 2) ** (n - 1)
    s = res.stats
    n_nb = s["n_with_neighbour"]
    # neighbours come in pairs: Poisson error of the pair count, 4 sigma
    assert abs(n_nb / n - p) < 4 * np.sqrt(n_nb / 2) * 2 / n
    # sparse limit: nearly all groups are pairs, each losing one member, so the fraction
    # without a fibre is half the neighbour fraction up to O(lambda) = 1 % from triplets
    assert abs(s["collided_fraction"] / s["neighbour_fraction"] - 0.5) < 0.02
    assert s["recovered_fraction"] == 0.0


def _points(draw_xy, n, scale):
    x, y = np.asarray(draw_xy[:n]).T if n else (np.zeros(0), np.zeros(0))
    return 150.0 + x * scale, 20.0 + y * scale


def _brute_mis_size(n, pairs):
    # Independent reference: exhaustive search over all subsets (itertools).
    edges = {tuple(p) for p in pairs.tolist()}
    for k in range(n, 0, -1):
        for sub in itertools.combinations(range(n), k):
            if not any((a, b) in edges for a, b in itertools.combinations(sub, 2)):
                return k
    return 0


coords = st.lists(st.tuples(st.floats(0, 1), st.floats(0, 1)), min_size=0, max_size=40)


@settings(max_examples=60, deadline=None)
@given(coords, st.integers(0, 2**31), st.sampled_from([2, 4, 10]),
       st.booleans())
def test_no_two_fibred_targets_collide_on_one_pass(pts, seed, exact_max, second_coll):
    ra, dec = _points(pts, len(pts), 0.05)  # 3' patch: dense groups at theta = 55"
    fs = FibreSettings(overlap_fraction=0.7, exact_group_max=exact_max,
                       second_pass_collisions=second_coll)
    res = assign_fibres(ra, dec, fs, np.random.default_rng(seed))
    theta = 55.0 / 3600.0
    first = np.flatnonzero(res.first_pass)
    second = np.flatnonzero(res.second_pass)
    for group in (first, second) if second_coll else (first,):
        if len(group) > 1:
            sep = separations_arcsec(ra[group], dec[group])
            assert sep[np.triu_indices(len(group), 1)].min() >= 55.0 * (1 - 1e-9)
    # maximal: every target without a first-pass fibre collides with one that has one
    lost = np.flatnonzero(~res.first_pass)
    if len(lost) and len(first):
        sep = separations_arcsec(ra[lost], dec[lost], ra[first], dec[first])
        assert np.all(sep.min(axis=1) < 55.0)
    assert res.stats["n_collided"] == len(lost)
    # exact groups: as many fibres as a brute-force maximum independent set
    if len(pts) <= exact_max:
        pairs = collision_pairs(unit_vectors(ra, dec), np.radians(theta))
        assert len(first) == _brute_mis_size(len(pts), pairs)


def test_small_group_rules():
    rng = np.random.default_rng(0)
    # chain of three: the two ends get fibres (exact maximum independent set)
    pairs = np.array([[0, 1], [1, 2]])
    for exact_max in (3, 2):  # exact solver and greedy rule agree on a chain
        fib, groups = decollide(3, pairs, rng, exact_max)
        assert fib.tolist() == [True, False, True]
    assert groups["n_greedy_groups"] == 1
    # triangle: one member, each equally often
    picks = np.array([np.flatnonzero(decollide(3, np.array([[0, 1], [1, 2], [0, 2]]), rng)[0])
                      for _ in range(600)]).ravel()
    assert np.all(np.bincount(picks, minlength=3) > 150)
    # isolated pairs: one member at random, vectorised over 4000 pairs
    pairs = np.arange(8000).reshape(-1, 2)
    fib, groups = decollide(8000, pairs, rng)
    assert np.all(fib[0::2] ^ fib[1::2])
    assert abs(fib[0::2].mean() - 0.5) < 4 * np.sqrt(0.25 / 4000)
    assert groups["groups_by_size"] == {"2": 4000}
    # a star: all leaves beat the hub
    star = np.array([[0, i] for i in range(1, 8)])
    assert decollide(8, star, rng, 10)[0].tolist() == [False] + [True] * 7
    assert decollide(8, star, rng, 2)[0].tolist() == [False] + [True] * 7


def test_greedy_rule_on_large_groups_is_independent_and_maximal():
    rng = np.random.default_rng(3)
    n = 3000
    xyz = unit_vectors(rng.uniform(0, 1, n), rng.uniform(0, 1, n))
    pairs = collision_pairs(xyz, np.radians(0.03))
    fib, groups = decollide(n, pairs, rng, exact_group_max=4)
    assert groups["largest_group"] > 4 and groups["n_greedy_groups"] > 0
    assert not np.any(fib[pairs[:, 0]] & fib[pairs[:, 1]])
    covered = fib.copy()
    covered[pairs[:, 0][fib[pairs[:, 1]]]] = True
    covered[pairs[:, 1][fib[pairs[:, 0]]]] = True
    assert covered.all()


def test_clustered_box_collided_fraction_is_plausible():
    # Thomas (Neyman-Scott) process seen at ~100 targets/deg^2, as in low-z fibre surveys.
    # Trade figure (Blanton et al. 2005, AJ 129, 2562, from memory): ~6 % of targets are
    # lost to collisions; we ask for a few to ~15 %, and more than for unclustered points
    # of the same density on the same footprint.
    box = thomas_box(4000, 10.0, 0.3, 100.0, seed=4)
    fp = cap_footprint(64, 200.0, 30.0, 10.0)
    sv = survey(fp, errors=False, fibre_settings=FibreSettings(overlap_fraction=0.3),
                correction="none", shell=SurveyShell(z_min=0.02, z_max=0.1))
    cone, info = build_cone(box, sv, [50, 50, 50], None, np.random.default_rng(5))
    s = info["fibres"]
    density = s["n_targets"] / fp.area_deg2
    assert 50 < density < 200
    ra, dec = fp.sample(s["n_targets"], np.random.default_rng(6))
    poisson = assign_fibres(ra, dec, NO_SECOND, np.random.default_rng(7)).stats
    assert 0.01 < s["collided_fraction"] < 0.15
    assert s["collided_fraction"] > poisson["collided_fraction"] * 1.2
    assert 0.15 < s["recovered_fraction"] < 0.45  # 30 % overlap probability
    assert len(cone) == s["n_targets"] - s["n_missed"]


def _targets(n=3000, seed=8):
    rng = np.random.default_rng(seed)
    ra, dec = rng.uniform(10, 12, n), rng.uniform(-1, 1, n)
    t = Table({"ra": ra, "dec": dec, "z_obs": rng.uniform(0.02, 0.1, n)})
    t["z_obs_true"] = t["z_obs"]
    t["chi_obs"] = COSMO.comoving_distance(t["z_obs"])
    t["weight"] = np.ones(n)
    res = assign_fibres(ra, dec, FibreSettings(angle_arcsec=120.0), rng)
    zflag = np.where(res.second_pass, ZFLAG_SECOND_PASS, ZFLAG_OWN_FIBRE)
    t["zflag"] = np.where(res.fibred, zflag, ZFLAG_COLLIDED).astype(np.int16)
    return t, res.fibred


def test_corrections_against_astropy_nearest_match():
    # Reference: astropy SkyCoord.match_to_catalog_sky for the nearest fibred neighbour,
    # astropy comoving_distance for the recomputed distance (reference library).
    t, fib = _targets()
    assert (~fib).sum() > 20
    lost = SkyCoord(t["ra"][~fib] * u.deg, t["dec"][~fib] * u.deg)
    kept = SkyCoord(t["ra"][fib] * u.deg, t["dec"][fib] * u.deg)
    j, _, _ = lost.match_to_catalog_sky(kept)
    nn = np.flatnonzero(fib)[j]
    rng = np.random.default_rng(0)

    out = CORRECTIONS["nearest_redshift"](t, fib, rng, COSMO)
    assert len(out) == len(t)
    np.testing.assert_allclose(out["z_obs"][~fib], t["z_obs"][nn])
    ref = FlatLambdaCDM(H0=100.0, Om0=COSMO.omega_m, Tcmb0=0.0)
    np.testing.assert_allclose(out["chi_obs"][~fib],
                               ref.comoving_distance(t["z_obs"][nn]).value, rtol=1e-6)
    assert np.all(out["zflag"][~fib] == ZFLAG_NEAREST_REDSHIFT)
    np.testing.assert_array_equal(out["z_obs_true"], t["z_obs"])

    up = CORRECTIONS["nearest_upweight"](t, fib, rng, COSMO)
    assert len(up) == fib.sum()
    assert np.isclose(up["weight"].sum(), len(t))
    extra = np.bincount(nn, minlength=len(t))[fib]
    np.testing.assert_allclose(up["weight"], 1.0 + extra)

    none = CORRECTIONS["none"](t, fib, rng, COSMO)
    assert len(none) == fib.sum() and np.all(none["weight"] == 1.0)
    assert set(np.unique(none["zflag"])) <= {ZFLAG_OWN_FIBRE, ZFLAG_SECOND_PASS}


def test_overlap_map_from_fits(tmp_path):
    nside = 16
    vals = np.zeros(hp.nside2npix(nside))
    ra, dec = hp.pix2ang(nside, np.arange(vals.size), lonlat=True)
    vals[ra < 180] = 1.0
    path = tmp_path / "overlap.fits"
    hp.write_map(path, vals, nest=False, dtype=np.float64)
    omap = load_overlap_map(str(path))
    rng = np.random.default_rng(9)
    ra_t = np.concatenate([rng.uniform(90, 90.3, 600), rng.uniform(270, 270.3, 600)])
    dec_t = rng.uniform(0, 0.3, 1200)
    fs = FibreSettings(angle_arcsec=60.0, second_pass_collisions=False)
    res = assign_fibres(ra_t, dec_t, fs, rng, omap)
    assert res.stats["n_collided"] > 20
    collided = ~res.first_pass
    east = ra_t < 180
    assert np.all(res.fibred[east])  # probability 1: every collided target recovered
    assert not np.any(res.second_pass[~east])
    assert res.stats["n_missed"] == int((collided & ~east).sum())
    bad = tmp_path / "bad.fits"
    hp.write_map(bad, vals * 3, dtype=np.float64)
    with pytest.raises(InputError, match="overlap_map"):
        load_overlap_map(str(bad))
    with pytest.raises(InputError, match="overlap_map"):
        load_overlap_map(str(tmp_path / "missing.fits"))


def test_fibre_settings_validation():
    with pytest.raises(InputError) as err:
        FibreSettings(angle_arcsec=-3, overlap_fraction=1.5, exact_group_max=40)
    text = " ".join(err.value.problems)
    assert "angle_arcsec = -3" in text and "overlap_fraction" in text
    assert "exact_group_max" in text
