"""Tiles and their fibre budget.

References: the covering property of the Fibonacci lattice is measured against HEALPix
probe points (healpy); tile membership is counted by brute force with astropy's angular
separations; a tile that covers n targets with f fibres assigns min(n, f) of them
(pigeonhole, no source needed).
"""

from __future__ import annotations

import healpy as hp
import numpy as np
import pytest
from astropy.table import Table
from cone_helpers import COSMO, cap_footprint, poisson_box, separations_arcsec
from scipy.spatial import cKDTree

from conecheck.cone import SurveyModel
from conecheck.cone.build import build_cone, cone_rngs
from conecheck.cone.settings import (
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    SurveyShell,
    TileSettings,
)
from conecheck.cone.tiles import assign_budget, make_tiling, regular_centres
from conecheck.errors import InputError
from conecheck.sphere import radec_to_vec


@pytest.mark.parametrize("radius", [0.7, 2.5])
def test_regular_tiling_leaves_no_point_of_the_sphere_uncovered(radius):
    ra, dec, _ = regular_centres(radius, 1)
    probes = np.column_stack(hp.pix2vec(256, np.arange(hp.nside2npix(256))))
    chord, _ = cKDTree(radec_to_vec(ra, dec)).query(probes)
    farthest = np.degrees(2 * np.arcsin(chord.max() / 2))
    assert farthest < radius  # measured 0.86-0.94 R


def test_tiles_assign_min_of_targets_and_fibres_as_a_brute_force_count_predicts(tmp_path):
    """Four separate tiles with 60, 180, 420 and 900 targets and 200 fibres each: every tile
    assigns min(n, 200), so the assigned fraction falls as 200 / n with the local density;
    targets on no tile get nothing."""
    rng = np.random.default_rng(7)
    centres = [(20.0, 10.0), (60.0, 10.0), (100.0, 10.0), (140.0, 10.0)]
    radius = 2.0
    path = tmp_path / "tiles.ecsv"
    Table({"ra": [c[0] for c in centres], "dec": [c[1] for c in centres]}).write(path)
    tiling = make_tiling(TileSettings(centres=str(path), radius_deg=radius,
                                      fibres_per_tile=200), None)
    ra, dec = [], []
    for (ra0, dec0), n in zip(centres, (60, 180, 420, 900), strict=True):
        r = radius * 1.3 * np.sqrt(rng.random(3 * n))  # a disc wider than the tile
        phi = rng.uniform(0, 2 * np.pi, 3 * n)
        ra.append(ra0 + r * np.cos(phi) / np.cos(np.radians(dec0)))
        dec.append(dec0 + r * np.sin(phi))
    ra, dec = np.concatenate(ra), np.concatenate(dec)
    sep = separations_arcsec(np.array([c[0] for c in centres]),
                             np.array([c[1] for c in centres]), ra, dec) / 3600.0
    inside = sep < radius  # brute-force membership, (tile, target)
    assert inside.sum(axis=0).max() == 1  # the tiles do not overlap
    assigned, stats = assign_budget(ra, dec, np.ones(len(ra), bool), np.zeros(len(ra), bool),
                                    tiling, np.random.default_rng(1))
    n_in = inside.sum(axis=1)
    got = np.array([assigned[row].sum() for row in inside])
    np.testing.assert_array_equal(got, np.minimum(n_in, 200))
    fraction = got / n_in
    assert np.all(np.diff(fraction) < 0) and fraction[0] == 1.0
    off = ~inside.any(axis=0)
    assert not assigned[off].any() and stats["n_off_tiles"] == off.sum()
    assert stats["n_budget_lost"] == len(ra) - assigned.sum()
    # the load diagnostic counts the same losses
    assert sum(stats["load_lost"]) == stats["n_budget_lost"] - stats["n_off_tiles"]


def test_a_target_a_full_tile_leaves_gets_its_chance_on_a_later_tile(tmp_path):
    """Tile A (pass 1) covers 300 targets with 200 fibres; tile B (pass 2) overlaps it and
    covers only targets A also covers. A fibres 200; every target it leaves inside the
    overlap must be fibred by B (it has fibres to spare), and those outside stay lost."""
    rng = np.random.default_rng(3)
    path = tmp_path / "tiles.ecsv"
    Table({"ra": [180.0, 181.5], "dec": [0.0, 0.0], "pass": [1, 2]}).write(path)
    tiling = make_tiling(TileSettings(centres=str(path), radius_deg=1.0, fibres_per_tile=200),
                         None)
    r = np.sqrt(rng.random(300)) * 0.999
    phi = rng.uniform(0, 2 * np.pi, 300)
    ra, dec = 180.0 + r * np.cos(phi), r * np.sin(phi)
    inside = separations_arcsec([180.0, 181.5], [0.0, 0.0], ra, dec) / 3600.0 < 1.0
    assert inside[0].all() and 30 < inside[1].sum() < 100  # the set-up described
    assigned, stats = assign_budget(ra, dec, np.ones(300, bool), np.zeros(300, bool), tiling,
                                    np.random.default_rng(1))
    assert assigned[inside[1]].all()
    only_a = ~inside[1]
    # A gave 200 fibres, some to overlap targets; the rest of A's targets are lost
    assert assigned.sum() == 200 + (inside[1].sum() - (200 - assigned[only_a].sum()))
    assert stats["n_budget_lost"] == int((~assigned).sum()) > 0


def survey_with(tiles: TileSettings | None, footprint=None) -> SurveyModel:
    fx = EffectSwitches(footprint=footprint is not None, flux_limit=False)
    return SurveyModel(cosmology=COSMO, shell=SurveyShell(z_min=0.01, z_max=0.05),
                       footprint=footprint, effects=fx,
                       fibres=FibreSettings(angle_arcsec=200.0, overlap_fraction=0.4),
                       correction=CorrectionSettings("nearest_redshift"),
                       tiles=tiles or TileSettings())


def test_unlimited_fibres_reproduce_the_collision_only_cones_exactly():
    box = poisson_box(150_000, 250.0, seed=5, sigma_v=300.0)
    fp = cap_footprint(64, 200.0, -30.0, 25.0)
    o = [125.0] * 3
    plain, pinfo = build_cone(box, survey_with(None, fp), o, None, cone_rngs(9, 0))
    tiles = TileSettings(centres="regular", radius_deg=1.5, fibres_per_tile=10**9, passes=2)
    tiled, tinfo = build_cone(box, survey_with(tiles, fp), o, None, cone_rngs(9, 0))
    assert pinfo["fibres"]["collided_fraction"] > 0.01  # collisions do happen
    assert tinfo["fibres"]["budget"]["n_budget_lost"] == 0
    assert tiled.colnames == plain.colnames
    for c in plain.colnames:
        np.testing.assert_array_equal(tiled[c], plain[c])
    # with a budget the same cone loses targets where tiles crowd, and the corrections act
    # on them like on collided ones
    tight = TileSettings(centres="regular", radius_deg=1.5, fibres_per_tile=30)
    short, sinfo = build_cone(box, survey_with(tight, fp), o, None, cone_rngs(9, 0))
    b = sinfo["fibres"]["budget"]
    assert b["n_budget_lost"] > 0 and sinfo["fibres"]["no_fibre_fraction"] > \
        pinfo["fibres"]["missed_fraction"]
    assert (np.asarray(short["zflag"]) == 2).sum() > (np.asarray(plain["zflag"]) == 2).sum()


def test_bad_tiles_name_the_key(tmp_path):
    with pytest.raises(InputError, match="fibres_per_tile"):
        TileSettings(centres="regular", fibres_per_tile=0)
    fp = cap_footprint(32, 0.0, 60.0, 10.0)
    path = tmp_path / "t.csv"
    Table({"ra": [0.0, 180.0], "dec": [60.0, -60.0]}).write(path)
    with pytest.raises(InputError, match=r"survey.tiles.centres.*1 of 2 tiles lie entirely off"):
        make_tiling(TileSettings(centres=str(path)), fp)
    Table({"x": [0.0]}).write(tmp_path / "bad.csv")
    with pytest.raises(InputError, match="missing column"):
        make_tiling(TileSettings(centres=str(tmp_path / "bad.csv")), fp)
    with pytest.raises(InputError, match="file not found"):
        make_tiling(TileSettings(centres=str(tmp_path / "none.csv")), fp)
