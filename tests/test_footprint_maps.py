"""Footprint maps: areas, lookups, sampling, disc fractions, FITS input/output."""

from __future__ import annotations

import logging

import healpy as hp
import numpy as np
import pytest
from astropy.io import fits
from scipy import stats

from conecheck.errors import InputError
from conecheck.footprint import Footprint, build_mask, discs


def cap_map(nside: int, ra: float, dec: float, radius_deg: float, nest: bool = False,
            value: float = 1.0) -> np.ndarray:
    vals = np.zeros(hp.nside2npix(nside))
    vec = hp.ang2vec(ra, dec, lonlat=True)
    vals[hp.query_disc(nside, vec, np.radians(radius_deg), nest=nest)] = value
    return vals


def test_pixel_area_matches_gorski_and_healpy():
    for nside in (1, 16, 128, 48):
        fp = Footprint.from_map(np.ones(hp.nside2npix(nside)))
        # Górski et al. 2005, ApJ 622, 759: Ω_pix = 4π / (12 N_side²)
        assert fp.pixel_area_sr == pytest.approx(4 * np.pi / (12 * nside**2), rel=1e-14)
        # healpy.nside2pixarea (reference library)
        assert fp.pixel_area_sr == pytest.approx(hp.nside2pixarea(nside), rel=1e-14)


def test_full_sky_area():
    fp = Footprint.from_map(np.ones(hp.nside2npix(32)))
    # 4π sr = 41 252.96 deg² (4π (180/π)²; standard value)
    assert fp.area_deg2 == pytest.approx(41252.96, abs=0.01)
    assert fp.area_sr == pytest.approx(4 * np.pi)
    assert fp.sky_fraction == pytest.approx(1.0)


def test_cap_area_from_region_mask():
    for nside, theta in ((64, 20.0), (128, 7.0)):
        fp = build_mask({"region": [{"shape": "cap", "ra": 40.0, "dec": -25.0,
                                     "radius": theta}]}, nside)
        # spherical cap of half-angle θ: Ω = 2π(1 − cos θ) (textbook geometry)
        exact = 2 * np.pi * (1 - np.cos(np.radians(theta)))
        # pixelisation accuracy: edge pixels are averaged over 64 sub-pixels
        assert fp.area_sr == pytest.approx(exact, rel=2e-3)


def test_completeness_and_pixel_lookup_match_healpy():
    rng = np.random.default_rng(1)
    vals = rng.uniform(0, 1, hp.nside2npix(16))
    for nest in (False, True):
        fp = Footprint.from_map(vals, nest=nest)
        ra, dec = rng.uniform(-30, 400, 1000), rng.uniform(-90, 90, 1000)
        # healpy.ang2pix with lonlat (reference library)
        pix = hp.ang2pix(16, ra, dec, nest=nest, lonlat=True)
        np.testing.assert_array_equal(fp.pixel_of(ra, dec), pix)
        np.testing.assert_array_equal(fp.completeness(ra, dec), vals[pix])
        np.testing.assert_array_equal(fp.contains(ra, dec), vals[pix] > 0)


def test_occupied_vectors_are_pixel_centres():
    vals = cap_map(32, 100, 20, 10)
    fp = Footprint.from_map(vals)
    v = fp.occupied_vectors()
    assert v.shape == (np.count_nonzero(vals), 3)
    np.testing.assert_allclose(np.linalg.norm(v, axis=1), 1.0)
    np.testing.assert_array_equal(hp.vec2pix(32, v[:, 0], v[:, 1], v[:, 2]), fp.occupied)


@pytest.mark.parametrize("nside,nest", [(64, False), (64, True), (48, False)])
def test_sample_uniform_on_cap_ks(nside, nest):
    """Uniform per solid angle: cos of the angle from the cap centre is uniform."""
    radius = 15.0
    ra0, dec0 = 210.0, 35.0
    fp = build_mask({"region": [{"shape": "cap", "ra": ra0, "dec": dec0, "radius": radius}]},
                    64, nest=nest) if nside == 64 else \
        Footprint.from_map(cap_map(nside, ra0, dec0, radius))
    rng = np.random.default_rng(7)
    ra, dec = fp.sample(20000, rng)
    assert ra.shape == dec.shape == (20000,)
    assert np.all(fp.contains(ra, dec))
    c0 = hp.ang2vec(ra0, dec0, lonlat=True)
    cos_t = hp.ang2vec(ra, dec, lonlat=True) @ c0
    # The pixelised cap edge is ragged: test inside a disc entirely within the footprint,
    # where the law must be exactly uniform in cos θ (scipy.stats.kstest).
    inner = np.cos(np.radians(radius - 2.0))
    sel = cos_t[cos_t >= inner]
    res = stats.kstest(sel, stats.uniform(loc=inner, scale=1 - inner).cdf)
    assert res.pvalue > 1e-3
    # Points per area inside vs whole: the inner cap holds its share of the area.
    frac = sel.size / cos_t.size
    expect = (1 - inner) * 2 * np.pi / fp.area_sr
    assert frac == pytest.approx(expect, abs=4 * np.sqrt(expect / cos_t.size))


def test_sample_thinned_by_completeness():
    nside = 16
    vals = np.zeros(hp.nside2npix(nside))
    north = np.arange(vals.size) < vals.size // 2
    vals[north] = 1.0
    vals[~north] = 0.25
    fp = Footprint.from_map(vals)
    ra, dec = fp.sample(100000, np.random.default_rng(3))
    n_north = np.count_nonzero(north[fp.pixel_of(ra, dec)])
    p = 1.0 / 1.25  # equal areas, completeness 1 : 0.25 (binomial expectation)
    assert n_north / 1e5 == pytest.approx(p, abs=5 * np.sqrt(p * (1 - p) / 1e5))


def test_sample_reproducible_and_zero():
    fp = Footprint.from_map(cap_map(32, 0, 0, 10))
    a = fp.sample(100, np.random.default_rng(5))
    b = fp.sample(100, np.random.default_rng(5))
    np.testing.assert_array_equal(a[0], b[0])
    assert fp.sample(0, np.random.default_rng(5))[0].size == 0


def test_disc_fraction_on_meridian_edge_is_half():
    box = {"region": [{"shape": "box", "ra_min": 100.0, "ra_max": 160.0, "dec_min": -30.0,
                       "dec_max": 30.0}]}
    fp = build_mask(box, 64)
    # A disc centred on a straight (great-circle) edge is half inside by symmetry.
    f = fp.disc_fraction([100.0, 160.0, 130.0], [0.0, 0.0, 0.0], [2.0, 5.0, 3.0])
    assert f[0] == pytest.approx(0.5, abs=0.02)
    assert f[1] == pytest.approx(0.5, abs=0.02)
    assert f[2] == pytest.approx(1.0)
    assert fp.disc_fraction(300.0, 0.0, 3.0) == pytest.approx(0.0)


def test_disc_fraction_cap_ratio_and_completeness():
    R = 10.0
    fp = build_mask({"region": [{"shape": "cap", "ra": 50, "dec": 40, "radius": R,
                                 "completeness": 0.6}]}, 64)
    # Concentric larger disc: fraction = cap area ratio (1 − cos R)/(1 − cos R') × c.
    for r_big in (12.0, 20.0):
        expect = 0.6 * (1 - np.cos(np.radians(R))) / (1 - np.cos(np.radians(r_big)))
        assert fp.disc_fraction(50, 40, r_big) == pytest.approx(expect, rel=0.01)
    # Discs deep inside take the completeness; many centres at once.
    rng = np.random.default_rng(2)
    n = 2000
    f = fp.disc_fraction(50 + rng.uniform(-2, 2, n), 40 + rng.uniform(-2, 2, n),
                         rng.uniform(0.05, 3.0, n))
    np.testing.assert_allclose(f, 0.6)


def test_disc_fraction_fast_path_agrees_with_exact_queries():
    fp = build_mask({"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 8},
                                {"shape": "cap", "ra": 2, "dec": 1, "radius": 1.5,
                                 "mode": "exclude"}]}, 64)
    rng = np.random.default_rng(4)
    ra, dec = rng.uniform(-10, 10, 300), rng.uniform(-10, 10, 300)
    rad = rng.uniform(0.3, 4.0, 300)
    f = fp.disc_fraction(ra, dec, rad)
    # Independent midpoint-rule estimate: healpy.query_disc at N_side 2048 for every disc.
    ref = np.empty(300)
    for i in range(300):
        sub = hp.query_disc(2048, hp.ang2vec(ra[i], dec[i], lonlat=True), np.radians(rad[i]),
                            nest=True)
        ref[i] = fp.reordered(True).values[sub >> 10].mean()
    np.testing.assert_allclose(f, ref, atol=0.015)


@pytest.mark.parametrize("nest", [False, True])
def test_disc_fraction_is_the_mean_over_healpys_nested_disc_query(monkeypatch, nest):
    """Every disc sent through the sub-pixel query (an edge margin of 10⁶ ρ_max) gets the
    mean completeness of the sub-pixels healpy's own nested ``query_disc`` returns at the
    same N_side_q (the module queries in RING order and converts): exactly on a map of 0s
    and 1s, whose sums are exact in any order, and to rounding on a fractional map."""
    nside = 32
    rng = np.random.default_rng(19)
    theta, phi = hp.pix2ang(nside, np.arange(hp.nside2npix(nside)), nest=nest)
    block = (np.floor(np.degrees(phi) / 9.0) * 7 + np.floor(np.degrees(theta) / 7.0)) % 13
    fractional = np.where(block < 3, 0.0, 0.3 + 0.1 * (block % 7))
    monkeypatch.setattr(discs, "EDGE_MARGIN", 1e6)
    n = 300
    ra, dec = rng.uniform(0.0, 60.0, n), rng.uniform(-40.0, 40.0, n)
    rad = np.exp(rng.uniform(np.log(0.5), np.log(5.0), n))
    for vals in (fractional, (fractional > 0).astype(float)):
        fp = Footprint.from_map(vals, nest=nest)
        got = discs.disc_fraction(fp, ra, dec, rad)
        levels = discs._query_level(nside, np.radians(rad), 10.0)
        nested = fp.reordered(True).values
        ref = np.array([nested[hp.query_disc(nside << int(k), hp.ang2vec(a, d, lonlat=True),
                                             np.radians(r), nest=True) >> (2 * int(k))].mean()
                        for a, d, r, k in zip(ra, dec, rad, levels, strict=True)])
        if vals is fractional:
            np.testing.assert_allclose(got, ref, rtol=1e-13, atol=1e-15)
        else:
            assert 0.1 < np.mean((ref > 0) & (ref < 1)) < 0.9  # many discs cut by an edge
            np.testing.assert_array_equal(got, ref)


@pytest.mark.parametrize("nest", [False, True])
def test_disc_fraction_shortcut_never_changes_an_answer(monkeypatch, nest):
    """Discs judged uniform from the nearest boundary pixel get exactly what the sub-pixel
    query gives them. A patchy completeness map (blocks of 7-9° with seven values and
    holes), discs from 0.2° to 4° scattered over it, many within a few pixels of an edge
    where the shortcut's bound bites; the reference sends every disc through the query
    (an edge margin of 10⁶ ρ_max)."""
    nside = 64
    rng = np.random.default_rng(11)
    theta, phi = hp.pix2ang(nside, np.arange(hp.nside2npix(nside)), nest=nest)
    block = (np.floor(np.degrees(phi) / 9.0) * 7 + np.floor(np.degrees(theta) / 7.0)) % 13
    vals = np.where(block < 3, 0.0, 0.3 + 0.1 * (block % 7))
    vals[np.degrees(theta) > 60.0] = 0.0
    fp = Footprint.from_map(vals, nest=nest)
    n = 4000
    ra = rng.uniform(0.0, 40.0, n)
    dec = rng.uniform(32.0, 60.0, n)
    rad = np.exp(rng.uniform(np.log(0.2), np.log(4.0), n))
    fast = discs.disc_fraction(fp, ra, dec, rad)
    monkeypatch.setattr(discs, "EDGE_MARGIN", 1e6)
    exact = discs.disc_fraction(Footprint.from_map(vals, nest=nest), ra, dec, rad)
    # equal but for the rounding of the query's mean of equal values
    np.testing.assert_allclose(fast, exact, rtol=1e-12, atol=0.0)
    # and the shortcut did take part: many discs were away from every edge
    tree = discs._boundary_tree(fp)
    dist, _ = tree.query(hp.ang2vec(ra, dec, lonlat=True))
    away = 2.0 * np.arcsin(dist / 2.0) > np.radians(rad) + 1.5 * hp.max_pixrad(nside)
    assert 100 < away.sum() < 0.9 * n


@pytest.mark.parametrize("nest", [False, True])
@pytest.mark.parametrize("dtype", ["float32", "float64"])
@pytest.mark.parametrize("partial", [False, True])
def test_fits_round_trip(tmp_path, nest, dtype, partial):
    rng = np.random.default_rng(0)
    vals = cap_map(32, 120, 30, 25, nest=nest) * rng.uniform(0.1, 1.0, hp.nside2npix(32))
    vals = vals.astype(dtype)
    fp = Footprint.from_map(vals, nest=nest)
    path = tmp_path / "m.fits"
    fp.write_fits(path, partial=partial)
    back = Footprint.from_fits(path)
    assert back.nest == nest and back.nside == 32
    np.testing.assert_array_equal(back.values, vals.astype(np.float64))
    # healpy.read_map reads our file (reference library), in the file's ordering.
    m = hp.read_map(path, nest=None, partial=partial)
    m = np.where(m == hp.UNSEEN, 0.0, m)
    np.testing.assert_array_equal(m, vals.astype(np.float64))
    assert fits.getheader(path, 1)["ORDERING"] == ("NESTED" if nest else "RING")


@pytest.mark.parametrize("nest", [False, True])
def test_reads_healpy_written_maps(tmp_path, nest):
    vals = cap_map(16, 10, -40, 30, nest=nest) * 0.5
    path = tmp_path / "hp.fits"
    hp.write_map(path, vals, nest=nest, dtype=np.float64)  # healpy writer (reference)
    fp = Footprint.from_fits(path)
    assert fp.nest == nest
    np.testing.assert_array_equal(fp.values, vals)


@pytest.mark.parametrize("nside", [16, 64, 256])
@pytest.mark.parametrize("true_nest", [False, True])
def test_mislabelled_ordering_is_refused_and_speckle_is_not(tmp_path, nside, true_nest):
    """A cap written under the other ORDERING keyword is refused; a speckled map is read.

    healpy's neighbour tables (reference library) define scatter: a 15° cap has few
    uncovered neighbours in its own ordering at every N_side and about half in the other.
    """
    from conecheck.footprint.fitsio import write_healpix

    cap = cap_map(nside, 60, 20, 15, nest=true_nest)
    write_healpix(tmp_path / "right.fits", cap, nest=true_nest)
    assert Footprint.from_fits(tmp_path / "right.fits").nest == true_nest
    write_healpix(tmp_path / "wrong.fits", cap, nest=not true_nest)
    right_name = "NESTED" if true_nest else "RING"
    with pytest.raises(InputError, match=f"wrong.fits.*looks {right_name}-ordered"):
        Footprint.from_fits(tmp_path / "wrong.fits")
    speckle = (np.random.default_rng(nside).random(hp.nside2npix(nside)) < 0.3).astype(float)
    write_healpix(tmp_path / "speckle.fits", speckle, nest=not true_nest)
    assert Footprint.from_fits(tmp_path / "speckle.fits").npix == speckle.size


def test_write_is_atomic_and_overwrites(tmp_path):
    fp = Footprint.from_map(cap_map(16, 0, 0, 20))
    path = tmp_path / "m.fits"
    fp.write_fits(path)
    fp.write_fits(path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.fits"]


# ------------------------------------------------------------------ bad inputs
def test_not_healpix_is_input_error(tmp_path):
    table = tmp_path / "table.fits"
    fits.BinTableHDU.from_columns([fits.Column(name="X", format="D", array=np.ones(5))]
                                  ).writeto(table)
    with pytest.raises(InputError, match="not a HEALPix map"):
        Footprint.from_fits(table)
    text = tmp_path / "notes.fits"
    text.write_text("hello")
    with pytest.raises(InputError, match="cannot read as FITS"):
        Footprint.from_fits(text)
    with pytest.raises(InputError, match="not found"):
        Footprint.from_fits(tmp_path / "missing.fits")
    with pytest.raises(InputError, match="12·N_side²"):
        Footprint.from_map(np.ones(100))


def test_values_above_one_are_error():
    vals = np.zeros(hp.nside2npix(8))
    vals[:10] = 1.5
    with pytest.raises(InputError, match=r"outside \[0, 1\]"):
        Footprint.from_map(vals)
    vals[:10] = -0.2
    with pytest.raises(InputError, match=r"outside \[0, 1\]"):
        Footprint.from_map(vals)


def test_nan_and_unseen_become_zero_with_note(caplog):
    vals = np.ones(hp.nside2npix(8))
    vals[:3] = np.nan
    vals[3:5] = hp.UNSEEN
    with caplog.at_level(logging.INFO, logger="conecheck"):
        fp = Footprint.from_map(vals)
    assert "5 pixels are NaN or UNSEEN" in caplog.text
    assert np.all(fp.values[:5] == 0) and fp.occupied.size == vals.size - 5


def test_empty_footprint_is_error():
    with pytest.raises(InputError, match="empty footprint"):
        Footprint.from_map(np.zeros(hp.nside2npix(8)))


def test_veto_with_other_nside_is_resampled_with_note(tmp_path, caplog):
    mask = Footprint.from_map(cap_map(32, 0, 0, 30))
    veto_vals = np.ones(hp.nside2npix(16))
    veto_vals[hp.query_disc(16, hp.ang2vec(0, 0, lonlat=True), np.radians(10))] = 0.0
    veto = Footprint.from_map(veto_vals, source="veto")
    mask.write_fits(tmp_path / "mask.fits")
    veto.reordered(True).write_fits(tmp_path / "veto.fits")
    with caplog.at_level(logging.INFO, logger="conecheck"):
        fp = Footprint.from_fits(tmp_path / "mask.fits", vetoes=[tmp_path / "veto.fits"])
    assert "N_side 16 differs from 32" in caplog.text
    assert fp.nside == 32
    # veto ordering converted and upgraded with healpy.ud_grade (reference library)
    expect = mask.values * hp.ud_grade(veto_vals, 32)
    np.testing.assert_array_equal(fp.values, expect)
    assert fp.area_sr < mask.area_sr


def test_bad_positions_are_input_error():
    fp = Footprint.from_map(np.ones(hp.nside2npix(8)))
    with pytest.raises(InputError, match="Dec values outside"):
        fp.completeness([0.0], [95.0])
    with pytest.raises(InputError, match="non-finite"):
        fp.completeness([np.nan], [0.0])
    with pytest.raises(InputError, match="radii"):
        fp.disc_fraction(0.0, 0.0, -1.0)
