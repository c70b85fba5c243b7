"""wp(r_p) on boxes and cones against Corrfunc, TreeCorr, Poisson expectations and geometry."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import stats_helpers as sh

from conecheck.errors import InputError
from conecheck.jackknife import BoxRegions
from conecheck.pairs import count_rppi_box, count_rppi_cone
from conecheck.stats import (
    STATISTICS,
    BoxSample,
    ConeSample,
    WpSettings,
    count_rr_cone,
    wp_box,
    wp_cone,
)
from conecheck.stats.wp import box_pair_fractions, disc_square_area

EDGES = tuple(np.geomspace(0.5, 20.0, 8))


def test_wp_box_matches_corrfunc():
    # Corrfunc.theory.wp: periodic box, analytic randoms, LOS = z (reference library)
    cf = pytest.importorskip("Corrfunc.theory", reason="Corrfunc is not installed")
    rng = np.random.default_rng(0)
    L = 100.0
    pos = sh.clustered(rng, 600, 5, 1.5, L)
    ref = cf.wp(L, 20.0, 1, np.array(EDGES), *(np.ascontiguousarray(pos[:, i])
                                              for i in range(3)))["wp"]
    got = wp_box(BoxSample(pos, L, 2), WpSettings(rp_edges=EDGES, pi_max=20.0, dpi=1.0))
    np.testing.assert_allclose(got.value, ref, rtol=1e-9, atol=1e-12)
    assert got.value[0] > 10  # clustered: a real signal, not 0 = 0


def test_wp_box_poisson_is_zero_within_jackknife_errors():
    # Poisson points have ξ = 0 (Peebles 1980), so wp = 0 within the (jackknife) error
    rng = np.random.default_rng(1)
    L = 200.0
    s = BoxSample.with_regions(sh.poisson(rng, 1e-3, L), L, los_axis=1, n_side=4)
    m = wp_box(s, WpSettings(rp_edges=EDGES, pi_max=20.0, dpi=2.0))
    z = m.value / np.sqrt(np.diag(m.covariance))
    assert m.n_regions == 16
    assert np.all(np.abs(z) < 4.0), z


@pytest.mark.parametrize("layout", ["columns", "cubes"])
def test_box_delete_one_random_pairs_exact(layout):
    # Expected delete-one pair counts of uniform points from the overlap integral
    # (module notes of conecheck.stats.wp) against counted pairs: summed over regions the
    # Poisson noise is ~0.2 %, while ignoring the cut edges (V_bin / V_R) is off by ~2 %.
    rng = np.random.default_rng(2)
    L = 100.0
    n_side = 4 if layout == "columns" else 3
    lay = BoxRegions(L, 2, n_side, layout)
    pos = rng.uniform(0, L, (20000, 3))
    s = WpSettings(rp_edges=(4.0, 8.0, 10.0), pi_max=10.0, dpi=10.0)
    pc = count_rppi_box(pos, None, lay.region_of(pos), box_size=L, rp_edges=s.edges,
                        pi_max=10.0, dpi=10.0, n_regions=lay.k)
    f_full, f_del = box_pair_fractions(s.bins, L, lay, lay.k)
    counted = pc.delete_one_all().sum(axis=0)
    expected = pc.norm_delete_one.sum() * f_del
    sigma = np.sqrt(counted)  # Poisson; conservative for a sum over regions
    assert np.all(np.abs(counted - expected) < 4 * sigma * np.sqrt(lay.k)), (counted, expected)
    naive = pc.norm_delete_one.sum() * s.bins.cylinder_volumes() / (L**3 * (1 - 1 / lay.k))
    assert np.all(np.abs(counted - naive) > np.abs(counted - expected))


def _cone_setup(seed, k=6, n_randoms=8):
    rng = np.random.default_rng(seed)
    L = 240.0
    pos = sh.clustered(rng, 3000, 4, 1.5, L)
    geo = sh.geometry(sh.patch(16, ra=(0, 90), dec=(-30, 30)), 40.0, 110.0, k)
    data = sh.shell_from_box(pos, L, 40.0, 110.0, geo)
    rand = sh.randoms(geo, n_randoms * len(data), rng)
    return rng, geo, data, rand


def _treecorr_catalog(treecorr, c, n=None):
    """The first ``n`` (default all) points of cone sample ``c`` as a TreeCorr catalogue."""
    x = c.xyz[:n]
    return treecorr.Catalog(x=x[:, 0], y=x[:, 1], z=x[:, 2])


def _treecorr_rppi(treecorr, c1, c2=None):
    """TreeCorr's pair counts (NNCorrelation, metric "Rperp", bin_slop=0) in r_p bins
    1-2-4-8 Mpc/h by |π| slabs of 2 Mpc/h to 10 Mpc/h, shape (3, 5): differences of
    counts with |π| < 2k."""
    cum = [np.zeros(3)]
    for k in range(1, 6):
        nn = treecorr.NNCorrelation(min_sep=1.0, max_sep=8.0, nbins=3, metric="Rperp",
                                    bin_slop=0, min_rpar=-2.0 * k, max_rpar=2.0 * k)
        nn.process(c1, num_threads=2) if c2 is None else nn.process(c1, c2, num_threads=2)
        cum.append(nn.npairs.copy())
    return np.diff(np.array(cum), axis=0).T


def test_wp_cone_landy_szalay_matches_treecorr_counts():
    # DD, DR, RR from TreeCorr NNCorrelation(metric="Rperp", bin_slop=0) (reference
    # library), combined with the Landy & Szalay (1993, ApJ 412, 64) estimator, normalising
    # auto counts by N(N − 1)/2 and the cross count by N_D N_R.
    treecorr = pytest.importorskip("treecorr")
    rng = np.random.default_rng(3)
    geo = sh.geometry(sh.patch(16, ra=(0, 40), dec=(-15, 15)), 60.0, 100.0, 4)
    data = sh.cone_sample(sh.clustered(rng, 20000, 4, 1.0, 200.0) - 100.0, geo)
    rand = sh.randoms(geo, 4 * len(data), rng)
    s = WpSettings(rp_edges=(1.0, 2.0, 4.0, 8.0), pi_max=10.0, dpi=2.0)
    got = wp_cone(data, rand, geo, s, jackknife=False)

    def cat(c):
        return _treecorr_catalog(treecorr, c)

    def slabs(c1, c2=None):
        return _treecorr_rppi(treecorr, c1, c2)

    nd, nr = len(data), len(rand)
    dd = slabs(cat(data)) / (nd * (nd - 1) / 2)
    dr = slabs(cat(data), cat(rand)) / (nd * nr)
    rr = slabs(cat(rand)) / (nr * (nr - 1) / 2)
    ref = 2 * 2.0 * ((dd - 2 * dr + rr) / rr).sum(axis=1)
    np.testing.assert_allclose(got.value, ref, rtol=1e-10)


def test_wp_cone_dr_from_a_prefix_matches_treecorr_counts():
    """``dr_method = "prefix"``: DD and RR over every point, DR over every random in the r_p
    bins that start below ``split_above`` and over the randoms' declared prefix above it,
    each DR part normalised by N_D times its own number of randoms; the reference counts
    are TreeCorr's NNCorrelation(metric="Rperp", bin_slop=0) (reference library) in the
    Landy & Szalay (1993, ApJ 412, 64) estimator, as in the test above."""
    treecorr = pytest.importorskip("treecorr")
    rng = np.random.default_rng(4)
    geo = sh.geometry(sh.patch(16, ra=(0, 40), dec=(-15, 15)), 60.0, 100.0, 4)
    data = sh.cone_sample(sh.clustered(rng, 20000, 4, 1.0, 200.0) - 100.0, geo)
    rand = sh.randoms(geo, 4 * len(data), rng)
    half = len(rand) // 2
    rand = dataclasses.replace(rand, prefixes=((half, 0.0),))
    s = WpSettings(rp_edges=(1.0, 2.0, 4.0, 8.0), pi_max=10.0, dpi=2.0, split_above=2.0,
                   dr_method="prefix")
    got = wp_cone(data, rand, geo, s, jackknife=False)
    assert got.extra["dr_randoms_above_split"] == half

    def cat(c, n=None):
        return _treecorr_catalog(treecorr, c, n)

    def slabs(c1, c2=None):
        return _treecorr_rppi(treecorr, c1, c2)

    nd, nr = len(data), len(rand)
    dd = slabs(cat(data)) / (nd * (nd - 1) / 2)
    dr = slabs(cat(data), cat(rand)) / (nd * nr)
    dr[1:] = (slabs(cat(data), cat(rand, half)) / (nd * half))[1:]
    rr = slabs(cat(rand)) / (nr * (nr - 1) / 2)
    ref = 2 * 2.0 * ((dd - 2 * dr + rr) / rr).sum(axis=1)
    np.testing.assert_allclose(got.value, ref, rtol=1e-10)
    # and the prefix changes what it should: the same wp with DR from every random differs
    every = wp_cone(data, rand, geo, dataclasses.replace(s, dr_method="full"), jackknife=False)
    np.testing.assert_array_equal(every.value[0], got.value[0])
    assert np.all(every.value[1:] != got.value[1:])


def test_wp_cone_dr_prefix_delete_one_equals_a_recount_without_the_region():
    """Each delete-one wp with DR from a prefix equals wp recounted on the galaxies and
    randoms outside the region, the prefix being the prefix's randoms outside it."""
    _, geo, data, rand = _cone_setup(8, k=4, n_randoms=12)
    half = len(rand) // 2
    rand = dataclasses.replace(rand, prefixes=((half, 0.0),))
    s = WpSettings(rp_edges=EDGES, pi_max=20.0, dpi=2.0, split_above=2.0, dr_method="prefix")
    got = wp_cone(data, rand, geo, s, jackknife=True)
    for k in range(4):
        keep_d, keep_r = data.region != k, rand.region != k
        d = ConeSample(data.ra[keep_d], data.dec[keep_d], data.chi[keep_d])
        r = ConeSample(rand.ra[keep_r], rand.dec[keep_r], rand.chi[keep_r],
                       prefixes=((int(keep_r[:half].sum()), 0.0),))
        ref = wp_cone(d, r, geo, s, jackknife=False)
        np.testing.assert_allclose(got.delete_one[k], ref.value, rtol=1e-9)


def test_wp_cone_dr_prefix_falls_back_to_every_random():
    """DR counts every random when the randoms offer no prefix, when the bins' cells are
    smaller than the prefix needs, or when the prefix would leave a jackknife region
    without randoms."""
    _, geo, data, rand = _cone_setup(9, k=4, n_randoms=8)
    s = WpSettings(rp_edges=EDGES, pi_max=20.0, dpi=2.0, split_above=2.0, dr_method="prefix")
    every = wp_cone(data, rand, geo, dataclasses.replace(s, dr_method="full"))
    smallest_above = float(np.min(s.cell_volumes[np.asarray(EDGES[:-1]) >= 2.0]))
    order = np.argsort(rand.region, kind="stable")  # the prefix then misses the last region
    by_region = ConeSample(rand.ra[order], rand.dec[order], rand.chi[order], None,
                           rand.region[order], rand.n_regions,
                           prefixes=((len(rand) // 2, 0.0),))
    for r in (rand, dataclasses.replace(rand, prefixes=((len(rand) // 2,
                                                           1.01 * smallest_above),)),
              by_region):
        m = wp_cone(data, r, geo, s)
        assert m.extra["dr_randoms_above_split"] == len(rand)
        np.testing.assert_allclose(m.value, every.value, rtol=1e-12)
        np.testing.assert_allclose(m.delete_one, every.delete_one, rtol=1e-12)
    used = wp_cone(data, dataclasses.replace(rand, prefixes=((len(rand) // 2,
                                                               smallest_above),)), geo, s)
    assert used.extra["dr_randoms_above_split"] == len(rand) // 2
    with pytest.raises(InputError, match="dr_method"):
        WpSettings(dr_method="half")


def test_wp_cone_poisson_zero_and_rr_reuse():
    rng = np.random.default_rng(4)
    L = 240.0
    geo = sh.geometry(sh.patch(16, ra=(0, 90), dec=(-30, 30)), 40.0, 110.0, 6)
    data = sh.shell_from_box(sh.poisson(rng, 3e-3, L), L, 40.0, 110.0, geo)
    rand = sh.randoms(geo, 8 * len(data), rng)
    s = WpSettings(rp_edges=EDGES, pi_max=20.0, dpi=2.0)
    m = wp_cone(data, rand, geo, s)
    # Poisson: ξ = 0 (Peebles 1980) → wp = 0 within the jackknife error
    assert np.all(np.abs(m.value / np.sqrt(np.diag(m.covariance))) < 4.0)
    # the registry path with a shared, precomputed RR gives the same numbers
    stat = STATISTICS["wp"]
    rr = stat.prepare_cone(rand, geo, s, n_data=len(data))
    m2 = stat.measure_cone(data, rand, geo, s, None, rr)
    np.testing.assert_array_equal(m.value, m2.value)
    np.testing.assert_array_equal(m.delete_one, m2.delete_one)


def test_split_random_rr_agrees_with_full(monkeypatch):
    # Split-random RR (Keihänen et al. 2019, A&A 631, A73): pairs only within M disjoint
    # random subsets the size of the data.  Basis of the tolerances: both normalised RRs are
    # unbiased and, for uniform randoms, Poisson-distributed to leading order, so they differ
    # by < 5σ with σ² = RR² (1/n_split + 1/n_full) per bin; the shift this causes in wp is
    # Δwp ≈ 2Δπ Σ_π (1 + ξ) δRR/RR, bounded the same way.  (From memory, the paper finds
    # the extra variance negligible at this subset size when the data are not much more
    # clustered than the randoms' noise; the strongly clustered case here is the hard one.)
    import conecheck.stats._common as common_module

    # subsets the size of these small test catalogues (the pipeline keeps them ≥ MIN_SPLIT_SUBSET)
    monkeypatch.setattr(common_module, "MIN_SPLIT_SUBSET", 1)
    rng, geo, data, rand = _cone_setup(5, n_randoms=20)
    kw = {"rp_edges": EDGES, "pi_max": 20.0, "dpi": 2.0}
    rr_full = count_rr_cone(rand, geo, WpSettings(**kw))
    # split_above = 0: every bin split, the method as published
    split_kw = {**kw, "rr_method": "split", "split_above": 0.0}
    rr_split = count_rr_cone(rand, geo, WpSettings(**split_kw), n_data=len(data))
    assert rr_split.n_subsets == 20
    a, b = rr_full.normalised(), rr_split.normalised()
    rel2 = 1 / np.maximum(rr_split.total, 1) + 1 / rr_full.total
    assert np.all(np.abs(a - b) < 5 * a * np.sqrt(rel2))
    full = wp_cone(data, rand, geo, WpSettings(**kw), rr=rr_full, jackknife=False)
    split = wp_cone(data, rand, geo, WpSettings(**split_kw), rr=rr_split, jackknife=False)
    dd = count_rppi_cone(data.xyz, rp_edges=EDGES, pi_max=20.0, dpi=2.0)
    one_plus_xi = dd.normalised() / a
    sigma = 2 * 2.0 * np.sqrt(np.sum(one_plus_xi**2 * rel2, axis=1))
    assert np.all(np.abs(split.value - full.value) < 5 * sigma)
    # Poisson data: the split RR has ≈ M times the data's pair count, so its noise is
    # ≈ 1/√M of the error of wp; check rms(Δwp/σ) < 2/√M and max < 4/√M (σ: jackknife).
    pois = sh.shell_from_box(sh.poisson(rng, 2e-3, 240.0), 240.0, 40.0, 110.0, geo)
    rand_p = sh.randoms(geo, 10 * len(pois), rng)
    wf = wp_cone(pois, rand_p, geo, WpSettings(**kw))
    ws = wp_cone(pois, rand_p, geo, WpSettings(**split_kw))
    z = (ws.value - wf.value) / np.sqrt(np.diag(wf.covariance))
    assert np.sqrt(np.mean(z**2)) < 2 / np.sqrt(10) and np.max(np.abs(z)) < 4 / np.sqrt(10)


def test_split_rr_counts_every_pair_below_split_above(monkeypatch):
    """With ``split_above`` the r_p bins that start below it hold the full RR exactly, the
    others the split RR exactly, each on its own normalisation (delete-one ones too)."""
    import conecheck.stats._common as common_module

    monkeypatch.setattr(common_module, "MIN_SPLIT_SUBSET", 1)
    _, geo, data, rand = _cone_setup(5, n_randoms=20)
    kw = {"rp_edges": EDGES, "pi_max": 20.0, "dpi": 2.0}
    full = count_rr_cone(rand, geo, WpSettings(**kw))
    split = count_rr_cone(rand, geo, WpSettings(**kw, rr_method="split", split_above=0.0),
                          n_data=len(data))
    e = np.asarray(EDGES)
    above = float(np.sqrt(e[2] * e[3]))  # between two edges: bins from e[3] on are split
    both = count_rr_cone(rand, geo, WpSettings(**kw, rr_method="split", split_above=above),
                         n_data=len(data))
    assert both.n_subsets == 20
    np.testing.assert_array_equal(both.rp_edges, e)
    np.testing.assert_allclose(both.normalised()[:3], full.normalised()[:3], rtol=1e-12)
    np.testing.assert_allclose(both.normalised()[3:], split.normalised()[3:], rtol=1e-12)
    np.testing.assert_allclose(both.normalised_delete_one()[:, :3],
                               full.normalised_delete_one()[:, :3], rtol=1e-12)
    np.testing.assert_allclose(both.normalised_delete_one()[:, 3:],
                               split.normalised_delete_one()[:, 3:], rtol=1e-12)
    # at or above the last bin's lower edge nothing is split; an edge itself splits its bin
    none = count_rr_cone(rand, geo, WpSettings(**kw, rr_method="split", split_above=e[-1]),
                         n_data=len(data))
    np.testing.assert_array_equal(none.total, full.total)
    at_edge = count_rr_cone(rand, geo, WpSettings(**kw, rr_method="split", split_above=e[3]),
                            n_data=len(data))
    np.testing.assert_array_equal(at_edge.total, both.total)
    with pytest.raises(InputError, match="split_above"):
        WpSettings(split_above=-1.0)


def test_wp_bad_input():
    rng = np.random.default_rng(6)
    L = 100.0
    pos = sh.poisson(rng, 1e-3, L)
    with pytest.raises(InputError, match="whole multiple"):
        WpSettings(pi_max=40.0, dpi=3.0)
    with pytest.raises(InputError, match="strictly increasing"):
        WpSettings(rp_edges=(1.0, 3.0, 2.0))
    with pytest.raises(InputError, match="half the box"):
        wp_box(BoxSample(pos, L, 2), WpSettings(rp_max=60.0, pi_max=20.0))
    # 8 × 8 columns of 12.5 Mpc/h are narrower than r_p,max = 20 Mpc/h
    with pytest.raises(InputError, match="fewer jackknife regions"):
        wp_box(BoxSample.with_regions(pos, L, 2, n_side=8),
               WpSettings(rp_edges=EDGES, pi_max=20.0))
    # more regions than a handful of galaxies can fill
    with pytest.raises(InputError, match="hold no galaxies"):
        wp_box(BoxSample.with_regions(pos[:5], L, 2, n_side=4),
               WpSettings(rp_edges=(0.5, 1.0), pi_max=2.0))
    with pytest.raises(InputError, match="not finite"):
        BoxSample(pos, L, 2, weight=np.where(np.arange(len(pos)) == 3, np.nan, 1.0))
    rng, geo, data, rand = _cone_setup(7)
    # randoms that leave region 2 empty
    keep = rand.region != 2
    holes = ConeSample(rand.ra[keep], rand.dec[keep], rand.chi[keep], None, rand.region[keep],
                       rand.n_regions)
    with pytest.raises(InputError, match="hold no randoms"):
        wp_cone(data, holes, geo, WpSettings(rp_edges=EDGES, pi_max=20.0, dpi=2.0))
    with pytest.raises(InputError, match="n_data"):
        count_rr_cone(rand, geo, WpSettings(rr_method="split"))


def test_split_rr_keeps_subsets_large_enough():
    """Small catalogues fall back to fewer (here: one) subsets rather than sparse RR bins."""
    from conecheck.stats._common import MIN_SPLIT_SUBSET

    _, geo, data, rand = _cone_setup(5, n_randoms=20)
    assert len(rand) < MIN_SPLIT_SUBSET
    kw = {"rp_edges": EDGES, "pi_max": 20.0, "dpi": 2.0}
    rr = count_rr_cone(rand, geo, WpSettings(**kw, rr_method="split"), n_data=len(data))
    assert rr.n_subsets == 1
    full = count_rr_cone(rand, geo, WpSettings(**kw))
    np.testing.assert_allclose(rr.normalised(), full.normalised(), rtol=1e-12)


def test_disc_square_area_against_exact_fractions():
    # A disc wholly inside the square has area πr²; centred on a corner, a quarter; on the
    # middle of an edge, a half; far outside, none (elementary geometry).
    r = np.array([0.5, 2.0, 5.0])
    area = disc_square_area(np.array([10.0, 0.0, 10.0, -30.0]),
                            np.array([10.0, 0.0, 0.0, 10.0]), r, 20.0)
    full = np.pi * r ** 2
    np.testing.assert_allclose(area[0], full, rtol=1e-12)
    np.testing.assert_allclose(area[1], full / 4, rtol=1e-12)
    np.testing.assert_allclose(area[2], full / 2, rtol=1e-12)
    assert np.all(area[3] == 0)
    # a radius of zero (an r_p edge at 0) holds no area anywhere
    assert np.all(disc_square_area(np.array([10.0, 0.0]), np.array([10.0, 0.0]),
                                   np.array([0.0]), 20.0) == 0)


def test_disc_square_area_against_circular_segments_and_sampling():
    """Discs cut by one edge or by a corner of the square.

    One edge at distance d < r from the centre leaves out the circular segment
    r² acos(d/r) − d √(r² − d²) (elementary geometry). A disc holding a corner of the square
    (its centre inside or outside the square) is checked against 4·10⁶ uniform points in the
    disc: a fraction p carries a binomial error √(p(1 − p)/n) ≤ 2.5·10⁻⁴, and the margin is 5
    of those.
    """
    side, r = 100.0, np.array([3.0, 8.0, 15.0])
    segment = r ** 2 * np.arccos(2.0 / r) - 2.0 * np.sqrt(r ** 2 - 4.0)
    for cx, cy in ((2.0, 50.0), (98.0, 50.0), (50.0, 2.0), (50.0, 98.0), (-2.0, 50.0)):
        area = disc_square_area(np.array([cx]), np.array([cy]), r, side)[0]
        expect = segment if min(cx, cy) < 0 else np.pi * r ** 2 - segment
        np.testing.assert_allclose(area, expect, rtol=1e-12)

    rng = np.random.default_rng(4)
    n = 4_000_000
    rho, phi = np.sqrt(rng.random(n)), rng.random(n) * 2.0 * np.pi
    ux, uy = rho * np.cos(phi), rho * np.sin(phi)
    for cx, cy, rr in ((3.0, 5.0, 12.0), (-4.0, 96.0, 9.0), (101.0, 103.0, 6.0)):
        x, y = cx + rr * ux, cy + rr * uy
        p = np.mean((x >= 0) & (x < side) & (y >= 0) & (y < side))
        area = disc_square_area(np.array([cx]), np.array([cy]), np.array([rr]), side)[0, 0]
        assert abs(area / (np.pi * rr ** 2) - p) < 5 * 2.5e-4


def test_disc_square_area_against_quadrature_around_the_square():
    """Discs all around the square, as the delete-one DR meets them (centres outside it,
    radii from 0 to beyond the distance to it), against scipy's quad of the chord length:
    area = ∫ |[y − h(x), y + h(x)] ∩ [0, side]| dx over the disc's x range within the
    square, h(x) = √(r² − (x − cx)²) (the disc's area as an integral of its chords,
    elementary geometry). Given the integrand's kinks (where the circle crosses y = 0 or
    y = side), quad's error is ~10⁻¹², far below the 10⁻⁸ r² margin. Covers the discs the
    area skips (bounding square apart from the square: 0) and those that reach a side or
    only a corner."""
    from scipy.integrate import quad

    side = 30.0
    rng = np.random.default_rng(11)
    cx = rng.uniform(-12.0, side + 12.0, 160)
    cy = rng.uniform(-12.0, side + 12.0, 160)
    outside = (cx < 0) | (cx >= side) | (cy < 0) | (cy >= side)
    cx, cy = cx[outside], cy[outside]
    radii = np.array([0.0, 0.5, 2.0, 5.0, 9.0, 14.0])
    got = disc_square_area(cx, cy, radii, side)

    def chord_inside(x, x0, y0, r):
        h = np.sqrt(max(r * r - (x - x0) ** 2, 0.0))
        return max(min(y0 + h, side) - max(y0 - h, 0.0), 0.0)

    n_zero = n_part = 0
    for i in range(cx.size):
        for k, r in enumerate(radii):
            a, b = max(cx[i] - r, 0.0), min(cx[i] + r, side)
            # the chord's kinks, where the circle crosses y = 0 or y = side
            kinks = [cx[i] + sign * np.sqrt(r * r - (edge - cy[i]) ** 2)
                     for edge in (0.0, side) for sign in (-1.0, 1.0) if abs(edge - cy[i]) < r]
            ref = quad(chord_inside, a, b, args=(cx[i], cy[i], r),
                       points=[x for x in kinks if a < x < b] or None, epsabs=1e-11,
                       epsrel=1e-12, limit=200)[0] if b > a else 0.0
            assert abs(got[i, k] - ref) <= 1e-8 * max(r * r, 1.0), (cx[i], cy[i], r)
            n_zero += ref == 0.0
            n_part += 0.0 < ref < np.pi * r * r * (1 - 1e-9)
    assert n_zero > 50 and n_part > 50  # both kinds of disc were met


def test_box_jackknife_matches_the_true_scatter_on_poisson_boxes():
    """Delete-one σ of wp against the scatter over independent Poisson boxes.

    The demo geometry: L = 250 Mpc/h, 5 × 5 columns, 0.3 < r_p < 20 Mpc/h, π_max = 40.
    The natural estimator's delete-one values follow the galaxies next to each removed
    column (5× the true σ at r_p ≈ 15 Mpc/h when this test was written); Landy–Szalay with
    analytic randoms in the remaining volume removes that. The sample standard deviation of
    30 boxes has a relative error of 1/√(2·29) ≈ 0.13, so each bin may reach 1.3 + 3 × 0.13;
    the mean over the 8 bins (correlated, error ≲ 0.1) must stay ≤ 1.3, the target.
    """
    L, n, reps = 250.0, 15000, 30
    s = WpSettings(rp_min=0.3, rp_max=20.0, n_rp=8, pi_max=40.0)
    vals, sig = [], []
    for seed in range(reps):
        rng = np.random.default_rng(700 + seed)
        bs = BoxSample.with_regions(rng.uniform(0, L, (n, 3)), L, 2, n_side=5,
                                    layout="columns")
        m = wp_box(bs, s, jackknife=True)
        assert m.extra["jackknife_estimator"].startswith("Landy")
        vals.append(m.value)
        sig.append(np.sqrt(np.diag(m.covariance)))
    ratio = np.mean(sig, axis=0) / np.std(vals, axis=0, ddof=1)
    print("jackknife σ / true σ per r_p bin:", np.round(ratio, 2))
    assert np.all(ratio < 1.3 + 3 * 0.13) and ratio.mean() <= 1.3
    assert np.all(ratio > 0.7 - 3 * 0.13)  # and does not under-estimate either
