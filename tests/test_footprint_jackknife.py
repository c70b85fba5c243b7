"""Jackknife sky regions of near-equal area."""

from __future__ import annotations

import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.footprint import Footprint, SkyRegions, build_mask, jackknife_regions

SPEC = {"region": [
    {"shape": "box", "ra_min": 120, "ra_max": 220, "dec_min": 0, "dec_max": 50},
    {"shape": "cap", "ra": 170, "dec": 25, "radius": 6, "mode": "exclude"},
    {"shape": "box", "ra_min": 190, "ra_max": 215, "dec_min": 30, "dec_max": 45,
     "completeness": 0.6},
    {"shape": "stripe", "start": [225, 20], "end": [280, 10], "width": 3},
]}


@pytest.fixture(scope="module")
def footprint() -> Footprint:
    return build_mask(SPEC, 64)


@pytest.mark.parametrize("k", [2, 8, 25])
def test_equal_areas(footprint, k):
    reg = jackknife_regions(footprint, k, seed=1)
    assert reg.k == k
    # near-equal effective areas (the brief's target: within ~10–20 %; common practice)
    assert reg.area_spread < 1.12
    # areas are completeness-weighted and add up to the footprint's area
    assert reg.areas_deg2.sum() == pytest.approx(footprint.area_deg2, rel=1e-12)
    occ = footprint.occupied
    assert np.all(reg.region_map[occ] >= 0)
    assert np.all(np.delete(reg.region_map, occ) == -1)
    w = footprint.values[occ] * footprint.pixel_area_sr * (180 / np.pi) ** 2
    np.testing.assert_allclose(np.bincount(reg.region_map[occ], weights=w, minlength=k),
                               reg.areas_deg2)


def test_regions_are_compact():
    """No region is scattered: its pixels lie within a modest angle of its centre."""
    footprint = build_mask({"region": SPEC["region"][:3]}, 64)
    reg = jackknife_regions(footprint, 16, seed=2)
    v = footprint.occupied_vectors()
    lab = reg.region_map[footprint.occupied]
    c = np.stack([np.cos(np.radians(reg.centres_dec_deg)) * np.cos(np.radians(reg.centres_ra_deg)),
                  np.cos(np.radians(reg.centres_dec_deg)) * np.sin(np.radians(reg.centres_ra_deg)),
                  np.sin(np.radians(reg.centres_dec_deg))], axis=1)
    ang = np.degrees(np.arccos(np.clip(np.einsum("ij,ij->i", v, c[lab]), -1, 1)))
    # a region of ~300 deg² has a radius of ~10°
    assert ang.max() < 20


def test_deterministic_and_seeded(footprint):
    a = jackknife_regions(footprint, 10, seed=5)
    b = jackknife_regions(footprint, 10, seed=5)
    c = jackknife_regions(footprint, 10, seed=6)
    np.testing.assert_array_equal(a.region_map, b.region_map)
    assert not np.array_equal(a.region_map, c.region_map)


def test_region_of_is_a_pixel_function(footprint):
    reg = jackknife_regions(footprint, 6, seed=0)
    rng = np.random.default_rng(3)
    ra, dec = footprint.sample(5000, rng)
    got = reg.region_of(ra, dec)
    np.testing.assert_array_equal(got, reg.region_map[footprint.pixel_of(ra, dec)])
    assert np.all(got >= 0)
    assert reg.region_of(0.0, -60.0) == -1


@pytest.mark.parametrize("k", [3, 7, 12, 20])
def test_disconnected_pieces_stay_balanced(k):
    """A detached stripe holding a fractional number of regions shares one region."""
    fp = build_mask({"region": [
        {"shape": "box", "ra_min": 0, "ra_max": 60, "dec_min": -20, "dec_max": 20},
        {"shape": "stripe", "start": [80, -10], "end": [140, 10], "width": 3},
        {"shape": "cap", "ra": 20, "dec": 40, "radius": 1}]}, 64)
    reg = jackknife_regions(fp, k, seed=0)
    assert reg.area_spread < 1.1
    assert np.all(reg.region_map[fp.occupied] >= 0)
    assert reg.areas_deg2.sum() == pytest.approx(fp.area_deg2, rel=1e-12)


def test_too_many_regions_names_nside():
    fp = build_mask({"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 5}]}, 16)
    with pytest.raises(InputError, match=r"N_side >= \d+"):
        jackknife_regions(fp, fp.occupied.size + 1, seed=0)
    with pytest.raises(InputError, match="positive integer"):
        jackknife_regions(fp, 0)


def test_single_region(footprint):
    reg = jackknife_regions(footprint, 1)
    assert reg.k == 1 and reg.area_spread == 1.0


def test_save_load_round_trip(footprint, tmp_path):
    reg = jackknife_regions(footprint, 7, seed=3)
    reg.save(tmp_path / "jk.npz")
    back = SkyRegions.load(tmp_path / "jk.npz")
    np.testing.assert_array_equal(back.region_map, reg.region_map)
    np.testing.assert_array_equal(back.areas_deg2, reg.areas_deg2)
    assert (back.nside, back.nest, back.seed, back.k) == (64, False, 3, 7)
    with pytest.raises(InputError, match="not found"):
        SkyRegions.load(tmp_path / "none.npz")
