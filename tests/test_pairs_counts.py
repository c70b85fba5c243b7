"""Pair counts in (r_p, π) bins: box against scipy's cKDTree brute force, cone against TreeCorr.

References (outside the project):
* scipy.spatial.cKDTree with ``boxsize`` (periodic minimum-image pair finding), scipy library;
* TreeCorr ``NNCorrelation(metric="Rperp", bin_slop=0)``: r_p about the pair-midpoint line
  of sight, TreeCorr library (Jarvis et al. 2004, MNRAS 352, 338).  TreeCorr keeps weights
  in single precision (``float _w`` in its include/Cell.h), so weighted counts are compared
  with it to 1e-6 and to a float64 cKDTree brute force (midpoint formula of design.md §6)
  to 1e-10.
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from conecheck.errors import InputError
from conecheck.pairs import (
    count_rppi_box,
    count_rppi_box_shared,
    count_rppi_cone,
    join_disjoint_auto,
    join_separations,
)
from conecheck.pairs.binning import rp2_lookup
from conecheck.pairs.counts import to_box_frame

treecorr = pytest.importorskip("treecorr")


def brute_box(p1, w1, p2, w2, L, los, edges, pi_max, dpi, auto):
    """(r_p, |π|) weighted counts from cKDTree pair finding (scipy reference)."""
    rmax = np.hypot(edges[-1], pi_max)
    t1 = cKDTree(p1, boxsize=L)
    if auto:
        pairs = t1.query_pairs(rmax, output_type="ndarray")
        i, j = pairs[:, 0], pairs[:, 1]
        d = p1[j] - p1[i]
        ww = w1[i] * w1[j]
    else:
        sm = t1.sparse_distance_matrix(cKDTree(p2, boxsize=L), rmax, output_type="coo_matrix")
        i, j = sm.row, sm.col
        d = p2[j] - p1[i]
        ww = w1[i] * w2[j]
    d -= L * np.round(d / L)
    pi = np.abs(d[:, los])
    rp = np.sqrt(np.sum(np.delete(d, los, axis=1) ** 2, axis=1))
    h, _, _ = np.histogram2d(rp, pi, bins=[edges, np.arange(0, pi_max + dpi / 2, dpi)],
                             weights=ww)
    return h


@pytest.fixture(scope="module")
def box_points():
    rng = np.random.default_rng(11)
    L = 60.0
    p1 = rng.uniform(0, L, (1500, 3))
    p2 = rng.uniform(0, L, (1200, 3))
    return L, p1, rng.uniform(0.5, 2.0, 1500), p2, rng.uniform(0.2, 3.0, 1200)


@pytest.mark.parametrize("los", [0, 1, 2])
def test_box_auto_matches_ckdtree(box_points, los):
    L, p1, w1, _, _ = box_points
    edges = np.geomspace(0.3, 12.0, 7)
    pc = count_rppi_box(p1, box_size=L, los_axis=los, rp_edges=edges, pi_max=15.0, dpi=3.0)
    ref = brute_box(p1, np.ones(len(p1)), None, None, L, los, edges, 15.0, 3.0, True)
    assert ref.sum() > 1000
    np.testing.assert_array_equal(pc.total, ref)
    assert pc.is_auto and pc.norm == len(p1) * (len(p1) - 1) / 2
    pw = count_rppi_box(p1, w1, box_size=L, los_axis=los, rp_edges=edges, pi_max=15.0, dpi=3.0)
    refw = brute_box(p1, w1, None, None, L, los, edges, 15.0, 3.0, True)
    np.testing.assert_allclose(pw.total, refw, rtol=1e-10)


def test_box_cross_matches_ckdtree(box_points):
    L, p1, w1, p2, w2 = box_points
    edges = np.linspace(0.0, 20.0, 6)
    pc = count_rppi_box(p1, w1, None, p2, w2, box_size=L, los_axis=1, rp_edges=edges,
                        pi_max=20.0, dpi=2.0)
    ref = brute_box(p1, w1, p2, w2, L, 1, edges, 20.0, 2.0, False)
    np.testing.assert_allclose(pc.total, ref, rtol=1e-10)
    assert not pc.is_auto and pc.norm == pytest.approx(w1.sum() * w2.sum())


def test_box_cross_of_a_few_points_with_a_dense_set_matches_ckdtree():
    """A handful of points against a dense set (the HOD derivatives' changed galaxies
    against the galaxies two boxes share): each cell of set 1 holds one point or none, so
    every window of the dense cells is found afresh. Reference: scipy's cKDTree pair
    finding."""
    rng = np.random.default_rng(17)
    L = 80.0
    dense = rng.uniform(0, L, (20_000, 3))
    few = rng.uniform(0, L, (40, 3))
    edges = np.geomspace(0.5, 10.0, 6)
    for los in (0, 2):
        pc = count_rppi_box(few, None, None, dense, box_size=L, los_axis=los, rp_edges=edges,
                            pi_max=16.0, dpi=4.0)
        ref = brute_box(few, np.ones(40), dense, np.ones(len(dense)), L, los, edges, 16.0,
                        4.0, False)
        assert ref.sum() > 1000
        np.testing.assert_array_equal(pc.total, ref)


def test_join_disjoint_auto_is_the_count_of_the_union():
    """The auto count of two disjoint sets joined from their auto counts and cross count
    equals the count of their union bit for bit (unit weights), jackknife pieces and
    normalisations included."""
    rng = np.random.default_rng(6)
    L = 60.0
    p = rng.uniform(0, L, (3000, 3))
    reg = rng.integers(0, 5, len(p))
    first = rng.random(len(p)) < 0.9
    kw = {"box_size": L, "los_axis": 1, "rp_edges": np.geomspace(0.3, 12.0, 7),
          "pi_max": 15.0, "dpi": 3.0, "n_regions": 5}
    a, b = p[first], p[~first]
    ra, rb = reg[first], reg[~first]
    whole = count_rppi_box(np.concatenate([a, b]), None, np.concatenate([ra, rb]), **kw)
    joined = join_disjoint_auto(count_rppi_box(a, None, ra, **kw),
                                count_rppi_box(b, None, rb, a, None, ra, **kw),
                                count_rppi_box(b, None, rb, **kw))
    for name in ("total", "touch", "norm", "norm_delete_one", "sum_w1", "sum_w1_sq",
                 "region_sum_w1", "region_sum_w1_sq"):
        np.testing.assert_array_equal(getattr(joined, name), getattr(whole, name), name)
    assert joined.is_auto
    with pytest.raises(ValueError, match="two auto counts and a cross count"):
        join_disjoint_auto(joined, joined, joined)


def test_shared_box_counts_equal_each_box_counted_whole():
    """Two boxes sharing most of their points: each joined count equals the box counted on
    its own bit for bit, and the first equals scipy's periodic cKDTree pair count (the
    reference of this file); an empty own set gives the shared set's auto count."""
    rng = np.random.default_rng(8)
    L = 50.0
    shared = rng.uniform(-L, 2 * L, (2500, 3))  # outside [0, L): wrapped like the box counts
    own1, own2 = rng.uniform(0, L, (150, 3)), rng.uniform(0, L, (0, 3))
    kw = {"box_size": L, "los_axis": 0, "rp_edges": np.geomspace(0.5, 10.0, 6),
          "pi_max": 12.0, "dpi": 2.0}
    first, second = count_rppi_box_shared(shared, own1, own2, **kw)
    for joined, own in ((first, own1), (second, own2)):
        whole = count_rppi_box(np.concatenate([shared, own]), **kw)
        for name in ("total", "norm", "sum_w1", "sum_w1_sq"):
            np.testing.assert_array_equal(getattr(joined, name), getattr(whole, name), name)
    union = np.mod(np.concatenate([shared, own1]), L)
    ref = brute_box(union, np.ones(len(union)), None, None, L, 0, kw["rp_edges"], 12.0, 2.0,
                    True)
    assert ref.sum() > 1000
    np.testing.assert_array_equal(first.total, ref)


def test_box_counts_equal_brute_force_at_every_cell_width():
    """The box grid's cell width is a speed choice: r_p,max / refine, widened for sparse
    sets to hold ``cell_points`` partner points (from 1 cell per side up to several per
    r_p,max). Every width gives scipy's cKDTree counts exactly (unit weights) and the same
    jackknife pieces."""
    rng = np.random.default_rng(23)
    L = 90.0
    p1 = rng.uniform(0, L, (3000, 3))
    p2 = rng.uniform(0, L, (800, 3))
    r1 = rng.integers(0, 5, 3000)
    r2 = rng.integers(0, 5, 800)
    edges = np.geomspace(0.4, 14.0, 6)
    kw = dict(box_size=L, los_axis=2, rp_edges=edges, pi_max=18.0, dpi=2.0, n_regions=5)
    ref_auto = brute_box(p1, np.ones(3000), None, None, L, 2, edges, 18.0, 2.0, True)
    ref_cross = brute_box(p1, np.ones(3000), p2, np.ones(800), L, 2, edges, 18.0, 2.0, False)
    assert ref_auto.sum() > 5000 and ref_cross.sum() > 1000
    first = None
    for refine, cell_points in [(1, 0.0), (3, 0.0), (1, 20.0), (1, 80.0), (1, 1e9)]:
        auto = count_rppi_box(p1, None, r1, **kw, refine=refine, cell_points=cell_points)
        cross = count_rppi_box(p1, None, r1, p2, None, r2, **kw, refine=refine,
                               cell_points=cell_points)
        label = f"refine {refine}, cell_points {cell_points}"
        np.testing.assert_array_equal(auto.total, ref_auto, err_msg=label)
        np.testing.assert_array_equal(cross.total, ref_cross, err_msg=label)
        if first is None:
            first = (auto, cross)
        for got, want in zip((auto, cross), first, strict=True):
            np.testing.assert_array_equal(got.touch, want.touch, err_msg=label)
    with pytest.raises(InputError, match="cell_points"):
        count_rppi_box(p1, **kw | {"n_regions": 0}, cell_points=-1.0)


def test_box_few_cells_wraps_correctly():
    # r_p,max and π_max close to L/2: one or two cells per side, where every neighbour
    # offset wraps onto the same cells through different periodic images.
    rng = np.random.default_rng(5)
    L = 20.0
    p = rng.uniform(0, L, (600, 3))
    edges = np.array([0.5, 3.0, 6.0, 9.5])
    pc = count_rppi_box(p, box_size=L, rp_edges=edges, pi_max=9.0, dpi=1.0, refine=1)
    ref = brute_box(p, np.ones(600), None, None, L, 2, edges, 9.0, 1.0, True)
    np.testing.assert_array_equal(pc.total, ref)


def _shell(rng, n, chi_lo=150.0, chi_hi=230.0, ra_span=35.0):
    chi = rng.uniform(chi_lo, chi_hi, n)
    ra = np.radians(rng.uniform(0, ra_span, n))
    dec = np.arcsin(rng.uniform(-0.3, 0.3, n))
    return np.column_stack([chi * np.cos(dec) * np.cos(ra), chi * np.cos(dec) * np.sin(ra),
                            chi * np.sin(dec)])


def treecorr_rppi(p1, w1, p2, w2, edges, pi_max, dpi):
    """Slab counts from TreeCorr: one run per cumulative |π| < kΔπ, then differences.

    Cumulative symmetric windows avoid depending on the sign TreeCorr gives r_par for an
    unordered pair.  TreeCorr counts each unordered pair once in an auto correlation,
    our convention too (checked by exact equality below).
    """
    c1 = treecorr.Catalog(x=p1[:, 0], y=p1[:, 1], z=p1[:, 2], w=w1)
    c2 = None if p2 is None else treecorr.Catalog(x=p2[:, 0], y=p2[:, 1], z=p2[:, 2], w=w2)
    n_pi = int(round(pi_max / dpi))
    cum = [np.zeros(edges.size - 1)]
    for k in range(1, n_pi + 1):
        nn = treecorr.NNCorrelation(min_sep=edges[0], max_sep=edges[-1], nbins=edges.size - 1,
                                    bin_type="Log", metric="Rperp", bin_slop=0,
                                    min_rpar=-k * dpi, max_rpar=k * dpi)
        np.testing.assert_allclose(nn.left_edges, edges[:-1], rtol=1e-12)
        if c2 is None:
            nn.process(c1, num_threads=2)
        else:
            nn.process(c1, c2, num_threads=2)
        cum.append(nn.weight.copy())
    return np.diff(np.array(cum), axis=0).T


def brute_cone(p1, w1, p2, w2, edges, pi_max, dpi, los="midpoint"):
    """Midpoint-LOS (or first point's LOS) (r_p, |π|) counts from cKDTree pairs, in float64
    (scipy reference)."""
    rmax = np.hypot(edges[-1], pi_max)
    w1 = np.ones(len(p1)) if w1 is None else w1
    if p2 is None:
        pairs = cKDTree(p1).query_pairs(rmax, output_type="ndarray")
        a, b, ww = p1[pairs[:, 0]], p1[pairs[:, 1]], w1[pairs[:, 0]] * w1[pairs[:, 1]]
    else:
        w2 = np.ones(len(p2)) if w2 is None else w2
        sm = cKDTree(p1).sparse_distance_matrix(cKDTree(p2), rmax, output_type="coo_matrix")
        a, b, ww = p1[sm.row], p2[sm.col], w1[sm.row] * w2[sm.col]
    s = a - b
    ell = 0.5 * (a + b) if los == "midpoint" else a
    pi = np.abs(np.sum(s * ell, axis=1)) / np.linalg.norm(ell, axis=1)
    rp = np.sqrt(np.maximum(np.sum(s * s, axis=1) - pi**2, 0.0))
    h, _, _ = np.histogram2d(rp, pi, bins=[edges, np.arange(0, pi_max + dpi / 2, dpi)],
                             weights=ww)
    return h


@pytest.fixture(scope="module")
def cone_points():
    rng = np.random.default_rng(21)
    p1 = _shell(rng, 1800)
    p2 = _shell(rng, 1500)
    return p1, rng.uniform(0.5, 2.0, len(p1)), p2, rng.uniform(0.5, 2.0, len(p2))


def test_cone_auto_matches_treecorr(cone_points):
    p1, w1, _, _ = cone_points
    edges = np.geomspace(0.5, 15.0, 6)
    pc = count_rppi_cone(p1, rp_edges=edges, pi_max=12.0, dpi=3.0)
    ref = treecorr_rppi(p1, None, None, None, edges, 12.0, 3.0)
    assert ref.sum() > 1000
    np.testing.assert_array_equal(pc.total, ref)
    pw = count_rppi_cone(p1, w1, rp_edges=edges, pi_max=12.0, dpi=3.0)
    np.testing.assert_allclose(pw.total, treecorr_rppi(p1, w1, None, None, edges, 12.0, 3.0),
                               rtol=1e-6)
    np.testing.assert_allclose(pw.total, brute_cone(p1, w1, None, None, edges, 12.0, 3.0),
                               rtol=1e-10)


def test_cone_cross_matches_treecorr(cone_points):
    p1, w1, p2, w2 = cone_points
    edges = np.geomspace(1.0, 12.0, 5)
    pc = count_rppi_cone(p1, None, None, p2, None, rp_edges=edges, pi_max=10.0, dpi=2.0)
    np.testing.assert_array_equal(pc.total, treecorr_rppi(p1, None, p2, None, edges, 10.0, 2.0))
    pw = count_rppi_cone(p1, w1, None, p2, w2, rp_edges=edges, pi_max=10.0, dpi=2.0)
    np.testing.assert_allclose(pw.total, treecorr_rppi(p1, w1, p2, w2, edges, 10.0, 2.0),
                               rtol=1e-6)
    np.testing.assert_allclose(pw.total, brute_cone(p1, w1, p2, w2, edges, 10.0, 2.0),
                               rtol=1e-10)


def test_cone_cross_along_the_first_points_line_of_sight(cone_points):
    """Around lenses the LOS is each lens's direction: π = s·r̂₁, r_p = |s − π r̂₁|."""
    p1, w1, p2, w2 = cone_points
    edges = np.array([0.0, 1.0, 3.0, 8.0])
    pw = count_rppi_cone(p1, w1, None, p2, w2, rp_edges=edges, pi_max=20.0, dpi=20.0,
                         los="first")
    ref = brute_cone(p1, w1, p2, w2, edges, 20.0, 20.0, los="first")
    assert ref[:, 0].min() > 0
    np.testing.assert_allclose(pw.total, ref, rtol=1e-10)
    mid = count_rppi_cone(p1, w1, None, p2, w2, rp_edges=edges, pi_max=20.0, dpi=20.0)
    assert not np.allclose(mid.total, pw.total)  # the two conventions do differ here
    with pytest.raises(InputError, match="cross counts"):
        count_rppi_cone(p1, rp_edges=edges, pi_max=20.0, los="first")


def test_cell_pruning_is_exact_where_the_line_of_sight_turns_most():
    """Fine cells with the cell-pair and point-cell tests on a nearby, nearly hemispherical
    shell (10 < χ < 60 Mpc/h, π_max = 15, r_p < 10): the line of sight turns by up to 90°
    across a cell's neighbourhood, the case where a wrong bound would drop pairs. Every
    cell size gives exactly the float64 brute force (pairs found by scipy's cKDTree) and
    TreeCorr (reference library) to within one pair per bin: TreeCorr puts one pair with
    |π| within rounding of 5 Mpc/h in the other π bin."""
    rng = np.random.default_rng(5)
    n = 2500
    chi = np.cbrt(rng.uniform(10.0**3, 60.0**3, n))
    ra = rng.uniform(0, 2 * np.pi, n)
    dec = np.arcsin(rng.uniform(0.0, 1.0, n))
    p = np.column_stack([chi * np.cos(dec) * np.cos(ra), chi * np.cos(dec) * np.sin(ra),
                         chi * np.sin(dec)])
    q = p[: n // 2] * rng.uniform(0.97, 1.03, (n // 2, 1))
    edges = np.geomspace(0.5, 10.0, 5)
    ref_auto = brute_cone(p, None, None, None, edges, 15.0, 5.0)
    ref_cross = brute_cone(p, None, q, None, edges, 15.0, 5.0)
    ref_first = brute_cone(p, None, q, None, edges, 15.0, 5.0, los="first")
    assert ref_auto.sum() > 5000 and ref_cross.sum() > 5000
    assert np.abs(treecorr_rppi(p, None, None, None, edges, 15.0, 5.0) - ref_auto).max() <= 1
    assert np.abs(treecorr_rppi(p, None, q, None, edges, 15.0, 5.0) - ref_cross).max() <= 1
    for refine in (1, 2, 3, 5, None):
        auto = count_rppi_cone(p, rp_edges=edges, pi_max=15.0, dpi=5.0, refine=refine)
        np.testing.assert_array_equal(auto.total, ref_auto, err_msg=f"refine {refine}")
        cross = count_rppi_cone(p, None, None, q, rp_edges=edges, pi_max=15.0, dpi=5.0,
                                refine=refine)
        np.testing.assert_array_equal(cross.total, ref_cross, err_msg=f"refine {refine}")
        first = count_rppi_cone(p, None, None, q, rp_edges=edges, pi_max=15.0, dpi=5.0,
                                refine=refine, los="first")
        np.testing.assert_array_equal(first.total, ref_first, err_msg=f"refine {refine}")


def _cap(rng, n, chi_lo, chi_hi, radius_deg, centre=(0.0, 0.0, 1.0)):
    """Uniform in volume inside a cap of ``radius_deg`` around the unit vector ``centre``."""
    chi = np.cbrt(rng.uniform(chi_lo**3, chi_hi**3, n))
    ct = 1.0 - rng.uniform(0.0, 1.0 - np.cos(np.radians(radius_deg)), n)
    ph = rng.uniform(0.0, 2.0 * np.pi, n)
    st = np.sqrt(1.0 - ct**2)
    local = np.column_stack([st * np.cos(ph), st * np.sin(ph), ct])
    c = np.asarray(centre, dtype=np.float64) / np.linalg.norm(centre)
    helper = np.eye(3)[int(np.argmin(np.abs(c)))]
    e1 = np.cross(c, helper)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(c, e1)
    return chi[:, None] * (local @ np.vstack([e1, e2, c]))


#: Geometries for the sky columns: the whole sky near the observer (longitude wraps, the
#: frame's poles hold points, the angular reach exceeds 90°), a hemisphere, a cap around a
#: world pole and a narrow distant cap (many shells, reach of a fraction of a degree).
SKY_GEOMETRIES = {
    "whole sky near the observer": (2.0, 45.0, 180.0, (1.0, 0.0, 0.0)),
    "hemisphere": (20.0, 120.0, 90.0, (0.3, -0.4, 0.5)),
    "cap around a pole": (100.0, 220.0, 25.0, (0.0, 0.0, -1.0)),
    "narrow distant cap": (600.0, 1400.0, 2.5, (-1.0, 2.0, 0.5)),
}


@pytest.mark.parametrize("geometry", list(SKY_GEOMETRIES))
def test_sky_columns_equal_brute_force(geometry):
    """Sky columns (cells in angle and distance) against the float64 brute force (pairs
    found by scipy's cKDTree, midpoint formula) and the cubic cells, for auto and cross
    counts with weights and jackknife regions, at cell sizes from a third of the angular
    reach to 2.5 cells per reach: any bound that is too tight drops pairs here."""
    chi_lo, chi_hi, radius, centre = SKY_GEOMETRIES[geometry]
    rng = np.random.default_rng(17)
    n = 2500 if radius < 10 else 1800
    p = _cap(rng, n, chi_lo, chi_hi, radius, centre)
    q = _cap(rng, n, chi_lo, chi_hi, radius, centre)
    if radius < 10:  # close pairs in a sparse distant cap: jitter copies of the points
        q[: n // 2] = p[: n // 2] + rng.normal(0.0, 1.5, (n // 2, 3))
    w, v = rng.uniform(0.5, 2.0, n), rng.uniform(0.5, 2.0, n)
    rp_, rq = rng.integers(0, 4, n), rng.integers(0, 4, n)
    edges = np.geomspace(0.4, 4.0, 5)
    ref_auto = brute_cone(p, None, None, None, edges, 16.0, 4.0)
    ref_cross = brute_cone(p, None, q, None, edges, 16.0, 4.0)
    assert ref_auto.sum() > 300 and ref_cross.sum() > 300
    for refine in (0.3, 0.7, 1.0, 2.5):
        auto = count_rppi_cone(p, rp_edges=edges, pi_max=16.0, dpi=4.0, cells="sky",
                               refine=refine)
        np.testing.assert_array_equal(auto.total, ref_auto, err_msg=f"refine {refine}")
        cross = count_rppi_cone(p, None, None, q, rp_edges=edges, pi_max=16.0, dpi=4.0,
                                cells="sky", refine=refine)
        np.testing.assert_array_equal(cross.total, ref_cross, err_msg=f"refine {refine}")
    # weights and regions: the same sums as cubic cells, up to the order of the additions
    for second in (None, q):
        kw = {} if second is None else {"pos2": second, "w2": v, "reg2": rq}
        sky = count_rppi_cone(p, w, rp_, rp_edges=edges, pi_max=16.0, dpi=4.0, n_regions=4,
                              cells="sky", **kw)
        cub = count_rppi_cone(p, w, rp_, rp_edges=edges, pi_max=16.0, dpi=4.0, n_regions=4,
                              cells="cubic", **kw)
        np.testing.assert_allclose(sky.total, cub.total, rtol=1e-12)
        np.testing.assert_allclose(sky.touch, cub.touch, rtol=1e-12, atol=1e-9)
        assert sky.norm == cub.norm


@pytest.mark.parametrize("chi_floor, radius", [(40.0, 60.0), (900.0, 4.0)])
def test_sky_columns_keep_pairs_at_the_edge_of_their_angular_reach(chi_floor, radius):
    """Pairs at the largest angle the columns allow: both points just above the innermost
    shell's floor χ₀, at equal χ, with r_p = 2χ sin(θ/2) within 10⁻⁶ of r_p,max, in every
    direction across the line of sight. The reach sin θ ≤ r_p,max (1/χ₁ + 1/χ₂)/2 is tight
    there to (r_p/χ)², so a reach a few per cent short drops some of them. Also checks the
    zero-separation convention: an auto count with r_p edges from 0 counts no point with
    itself (brute force from scipy's cKDTree)."""
    rng = np.random.default_rng(3)
    n, rp_max = 3000, 3.0
    p = _cap(rng, n, chi_floor, chi_floor * (1.0 + 1e-7), radius)
    chi = np.linalg.norm(p, axis=1)
    u = p / chi[:, None]
    helper = np.where(np.abs(u[:, :1]) < 0.9, [[1.0, 0.0, 0.0]], [[0.0, 1.0, 0.0]])
    e1 = np.cross(u, helper)
    e1 /= np.linalg.norm(e1, axis=1)[:, None]
    e2 = np.cross(u, e1)
    ang = rng.uniform(0.0, 2.0 * np.pi, n)[:, None]
    theta = 2.0 * np.arcsin(rp_max * (1.0 - 1e-6 * rng.uniform(0.1, 1.0, n)) / (2.0 * chi))
    turn = np.cos(ang) * e1 + np.sin(ang) * e2
    q = chi[:, None] * (np.cos(theta)[:, None] * u + np.sin(theta)[:, None] * turn)
    edges = np.array([0.0, 1.0, rp_max])
    for refine in (0.7, 1.0, 2.5, 4.0):
        cross = count_rppi_cone(p, None, None, q, rp_edges=edges, pi_max=8.0, dpi=8.0,
                                cells="sky", refine=refine)
        assert cross.total[1, 0] >= n  # every (point, its partner) pair
        np.testing.assert_array_equal(cross.total, brute_cone(p, None, q, None, edges, 8.0,
                                                              8.0), err_msg=f"{refine}")
        both = np.vstack([p, q])
        auto = count_rppi_cone(both, rp_edges=edges, pi_max=8.0, dpi=8.0, cells="sky",
                               refine=refine)
        np.testing.assert_array_equal(auto.total, brute_cone(both, None, None, None, edges,
                                                             8.0, 8.0), err_msg=f"{refine}")


def test_sky_columns_match_treecorr_and_are_chosen_for_thin_cylinders(cone_points,
                                                                       monkeypatch):
    """A thin cylinder (r_p < 3, π_max = 12 Mpc/h) is counted in sky columns by default,
    and the counts equal TreeCorr's (reference library) and do not depend on the number
    of threads."""
    from conecheck.pairs import counts as counts_module

    p1, w1, p2, _ = cone_points
    edges = np.geomspace(0.3, 3.0, 4)
    calls = []
    real = counts_module._count_rppi_sky
    monkeypatch.setattr(counts_module, "_count_rppi_sky",
                        lambda *a, **k: calls.append(1) or real(*a, **k))
    auto = count_rppi_cone(p1, rp_edges=edges, pi_max=12.0, dpi=4.0)
    cross = count_rppi_cone(p1, None, None, p2, rp_edges=edges, pi_max=12.0, dpi=4.0)
    assert len(calls) == 2
    ref = treecorr_rppi(p1, None, None, None, edges, 12.0, 4.0)
    assert ref.sum() > 200
    np.testing.assert_array_equal(auto.total, ref)
    np.testing.assert_array_equal(cross.total, treecorr_rppi(p1, None, p2, None, edges, 12.0,
                                                             4.0))
    count_rppi_cone(p1, rp_edges=np.geomspace(0.3, 6.0, 4), pi_max=12.0, dpi=4.0)
    assert len(calls) == 2  # r_p,max > π_max / 4: cubic cells
    reg = np.arange(len(p1)) % 3
    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = count_rppi_cone(p1, w1, reg, rp_edges=edges, pi_max=12.0, n_regions=3)
    finally:
        numba.set_num_threads(threads)
    many = count_rppi_cone(p1, w1, reg, rp_edges=edges, pi_max=12.0, n_regions=3)
    np.testing.assert_array_equal(one.total, many.total)
    np.testing.assert_array_equal(one.touch, many.touch)


def test_sky_columns_of_a_few_points():
    """One point, duplicates and points all at one χ: the same counts in sky columns as in
    cubic cells (pairs at zero separation included when the first r_p edge is 0)."""
    sets = [np.array([[100.0, 0.0, 0.0]]), np.array([[100.0, 0.0, 0.0]] * 5),
            np.array([[100.0, 0.0, 0.0], [0.0, 100.0, 0.0], [99.9, 1.0, 0.0]]),
            np.array([[0.0, 0.0, 50.0], [0.0, 0.3, 50.0], [0.2, 0.0, 51.0]])]
    for p in sets:
        for q in (None, p[::-1] + 0.25):
            kw = {} if q is None else {"pos2": q}
            sky = count_rppi_cone(p, rp_edges=[0.0, 1.0, 2.0], pi_max=10.0, cells="sky", **kw)
            cub = count_rppi_cone(p, rp_edges=[0.0, 1.0, 2.0], pi_max=10.0, cells="cubic", **kw)
            np.testing.assert_array_equal(sky.total, cub.total)
    assert count_rppi_cone(sets[1], rp_edges=[0.0, 1.0], pi_max=10.0).total.sum() == 10


def test_sky_columns_bad_requests():
    p = _cap(np.random.default_rng(0), 50, 10.0, 50.0, 30.0)
    with pytest.raises(InputError, match="cells: expected"):
        count_rppi_cone(p, rp_edges=[1.0, 2.0], pi_max=10.0, cells="hexagons")
    with pytest.raises(InputError, match="midpoint line of sight"):
        count_rppi_cone(p, None, None, p, rp_edges=[1.0, 2.0], pi_max=10.0, cells="sky",
                        los="first")
    with pytest.raises(InputError, match="refine"):
        count_rppi_cone(p, rp_edges=[1.0, 2.0], pi_max=10.0, cells="sky", refine=0.0)
    at_origin = np.vstack([p, np.zeros((1, 3))])
    with pytest.raises(InputError, match="away from the observer"):
        count_rppi_cone(at_origin, rp_edges=[1.0, 2.0], pi_max=10.0, cells="sky")
    # the automatic choice falls back to cubic cells there, and counts the same pairs
    np.testing.assert_array_equal(
        count_rppi_cone(at_origin, rp_edges=[0.5, 2.0], pi_max=10.0).total,
        brute_cone(at_origin, None, None, None, np.array([0.5, 2.0]), 10.0, 1.0))


def test_grid_sort_orders_like_lexsort():
    """The counting sort by cell then χ gives numpy's lexsort order, ties included."""
    from conecheck.pairs.grid import cone_grid, sort_into_grid

    rng = np.random.default_rng(8)
    p = rng.uniform(100.0, 160.0, (20000, 3))
    p[5000:5100] = p[4000]  # exact ties in χ and cell
    grid = cone_grid([p], 10.0, refine=1)
    g = sort_into_grid(grid, p, np.ones(len(p)), np.zeros(len(p), np.int64), chi_key=True)
    order = np.lexsort((np.sqrt(np.sum(p * p, axis=1)), grid.cell_of(p)))
    np.testing.assert_array_equal(g.idx, order)
    np.testing.assert_array_equal(g.start[-1], len(p))
    assert np.all(np.diff(g.los)[np.diff(grid.cell_of(p)[g.idx]) == 0] >= 0)


@pytest.mark.parametrize("geometry", ["box", "cone"])
@pytest.mark.parametrize("labels", ["patches", "scattered"])
@pytest.mark.parametrize("binning", ["table", "scan"])
def test_delete_one_equals_recount_without_region(geometry, labels, binning):
    # One-pass bookkeeping (total − touch[k]) against a recount on the points outside k,
    # brute-forced with cKDTree (scipy reference). Regions in patches leave most cells
    # inside one region (the kernels' fast path, both for pairs within a region and across
    # two); scattered labels make every cell straddle regions. Edges 1e-9 apart defeat the
    # look-up table, so the kernels scan the edges.
    rng = np.random.default_rng(8)
    k = 4
    edges = np.geomspace(0.5, 10.0, 4)
    if binning == "scan":
        edges = np.array([0.5, 2.0, 2.0 + 1e-9, 10.0])
        assert rp2_lookup(edges**2).scan
    if geometry == "box":
        L = 40.0
        p = rng.uniform(0, L, (1200, 3))
        reg = (p[:, 0] // (L / 2)).astype(int) * 2 + (p[:, 1] // (L / 2)).astype(int)
    else:
        p = _shell(rng, 1500)
        reg = np.minimum((np.degrees(np.arctan2(p[:, 1], p[:, 0])) // 9).astype(int), 3)
    if labels == "scattered":
        reg = rng.integers(0, k, len(p))
    w = rng.uniform(0.5, 1.5, len(p))
    if geometry == "box":
        # cells r_p,max wide (4 per side), so that the patches hold whole cells
        pc = count_rppi_box(p, w, reg, box_size=L, rp_edges=edges, pi_max=8.0, dpi=2.0,
                            n_regions=k, cell_points=0.0)
    else:
        pc = count_rppi_cone(p, w, reg, rp_edges=edges, pi_max=8.0, dpi=2.0, n_regions=k)
    for r in range(k):
        keep = reg != r
        if geometry == "box":
            ref = brute_box(p[keep], w[keep], None, None, L, 2, edges, 8.0, 2.0, True)
        else:
            ref = brute_cone(p[keep], w[keep], None, None, edges, 8.0, 2.0)
        np.testing.assert_allclose(pc.delete_one(r), ref, rtol=1e-10, atol=1e-9)
        wk = w[keep]
        assert pc.norm_delete_one[r] == pytest.approx(0.5 * (wk.sum() ** 2 - (wk**2).sum()))


def test_counts_do_not_depend_on_thread_count(cone_points):
    p1, w1, p2, w2 = cone_points
    edges = np.geomspace(0.5, 15.0, 6)
    reg = (np.arange(len(p1)) % 3)
    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        a = count_rppi_cone(p1, w1, reg, rp_edges=edges, pi_max=12.0, dpi=3.0, n_regions=3)
    finally:
        numba.set_num_threads(threads)
    b = count_rppi_cone(p1, w1, reg, rp_edges=edges, pi_max=12.0, dpi=3.0, n_regions=3)
    np.testing.assert_array_equal(a.total, b.total)
    np.testing.assert_array_equal(a.touch, b.touch)


def test_split_sum_of_counts():
    rng = np.random.default_rng(2)
    p = _shell(rng, 800)
    edges = np.geomspace(1.0, 10.0, 4)
    a = count_rppi_cone(p[::2], rp_edges=edges, pi_max=6.0, dpi=2.0)
    b = count_rppi_cone(p[1::2], rp_edges=edges, pi_max=6.0, dpi=2.0)
    s = a + b
    assert s.n_subsets == 2 and s.norm == a.norm + b.norm == 2 * 400 * 399 / 2
    np.testing.assert_array_equal(s.total, a.total + b.total)


@pytest.mark.parametrize("kwargs, match", [
    ({"pi_max": 10.0, "dpi": 3.0}, "whole multiple"),
    ({"rp_edges": [1.0, 5.0, 3.0]}, "strictly increasing"),
    ({"rp_edges": [1.0, 30.0]}, "half the box"),
    ({"pi_max": 30.0, "dpi": 1.0}, "half the box"),
    ({"los_axis": 3}, "los_axis"),
])
def test_box_bad_binning(kwargs, match):
    p = np.random.default_rng(0).uniform(0, 50, (50, 3))
    base = {"box_size": 50.0, "rp_edges": [1.0, 5.0], "pi_max": 10.0, "dpi": 1.0}
    base.update(kwargs)
    with pytest.raises(InputError, match=match):
        count_rppi_box(p, **base)


def test_bad_points():
    p = np.random.default_rng(0).uniform(0, 50, (50, 3))
    w = np.ones(50)
    w[7] = np.nan
    with pytest.raises(InputError, match="weight of point 7"):
        count_rppi_cone(p, w, rp_edges=[1.0, 5.0], pi_max=4.0, dpi=1.0)
    with pytest.raises(InputError, match="region labels must lie"):
        count_rppi_cone(p, None, np.full(50, 5), rp_edges=[1.0, 5.0], pi_max=4.0, n_regions=4)
    with pytest.raises(InputError, match="shape"):
        count_rppi_cone(p[:, :2], rp_edges=[1.0, 5.0], pi_max=4.0)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.floats(0.0, 200.0, allow_nan=False), min_size=2, max_size=25, unique=True),
       st.integers(0, 2**32 - 1))
def test_bit_lookup_binning_equals_searchsorted(edges, seed):
    # the kernels' table binning against numpy.searchsorted (reference) on random edges,
    # including values exactly on the edges and just below them
    e2 = np.sort(np.asarray(edges)) ** 2
    if np.any(np.diff(e2) <= 0):
        return
    lk = rp2_lookup(e2)
    x = np.concatenate([np.random.default_rng(seed).uniform(e2[0], e2[-1], 2000), e2[:-1],
                        np.nextafter(e2[1:], 0)])
    ref = np.searchsorted(e2, x, side="right") - 1
    if lk.scan:
        return
    c = np.clip((x.view(np.int64) >> lk.shift) - lk.base, 0, lk.lut.size - 2)
    np.testing.assert_array_equal(lk.lut[c] + (x >= lk.nxt[c]), ref)


def test_empty_and_tiny_inputs():
    edges = [1.0, 2.0]
    z = count_rppi_box(np.zeros((0, 3)), box_size=10.0, rp_edges=edges, pi_max=2.0)
    assert z.total.sum() == 0 and z.norm == 0
    one = count_rppi_cone(np.array([[100.0, 0, 0]]), rp_edges=edges, pi_max=2.0)
    assert one.total.sum() == 0


def test_edges_too_close_for_the_table_still_exact(box_points):
    # edges 1e-9 apart defeat the look-up table; the kernels fall back to scanning edges
    L, p1, _, _, _ = box_points
    edges = np.array([1.0, 3.0, 3.0 + 1e-9, 8.0])
    assert rp2_lookup(edges**2).scan
    pc = count_rppi_box(p1, box_size=L, rp_edges=edges, pi_max=6.0, dpi=2.0)
    ref = brute_box(p1, np.ones(len(p1)), None, None, L, 2, edges, 6.0, 2.0, True)
    np.testing.assert_array_equal(pc.total, ref)
    pcc = count_rppi_cone(p1 + 300.0, rp_edges=edges, pi_max=6.0, dpi=2.0)
    np.testing.assert_array_equal(pcc.total, brute_cone(p1 + 300.0, None, None, None, edges,
                                                        6.0, 2.0))
    # the same with jackknife tags (the kernels' third binning mode scans too)
    reg = np.arange(len(p1)) % 3
    pj = count_rppi_box(p1, None, reg, box_size=L, rp_edges=edges, pi_max=6.0, dpi=2.0,
                        n_regions=3)
    np.testing.assert_array_equal(pj.total, ref)
    pjc = count_rppi_cone(p1 + 300.0, None, reg, rp_edges=edges, pi_max=6.0, dpi=2.0,
                          n_regions=3)
    np.testing.assert_array_equal(pjc.total, pcc.total)


# --------------------------------------------------------------------------- (s, μ) counts
def test_smu_counts_equal_brute_force_in_a_box_and_on_a_cone():
    """(s, |μ|) counts of the engine against a direct O(N²) histogram (outside reference:
    the definitions μ = |Δ_LOS|/s in a box and μ = |s·l|/(|s||l|), l = r₁ + r₂, on a cone,
    as in Corrfunc's DDsmu / DDsmu_mocks)."""
    from conecheck.pairs import count_smu_box, count_smu_cone, make_smu_bins

    rng = np.random.default_rng(1)
    bins = make_smu_bins(np.linspace(1.0, 20.0, 6), 5)
    L = 100.0
    p = rng.random((2000, 3)) * L
    d = p[:, None, :] - p[None, :, :]
    d -= L * np.round(d / L)
    s = np.sqrt((d**2).sum(-1))
    mu = np.abs(d[..., 2]) / np.where(s > 0, s, 1.0)
    iu = np.triu_indices(len(p), 1)
    want, _, _ = np.histogram2d(s[iu], np.minimum(mu[iu], 1 - 1e-15),
                                bins=[bins.s_edges, bins.mu_edges])
    assert np.array_equal(count_smu_box(p, box_size=L, bins=bins).total, want)
    q = rng.random((1500, 3)) * 80.0 + np.array([100.0, -40.0, -40.0])
    d = q[None, :, :] - q[:, None, :]
    los = q[None] + q[:, None]
    s = np.sqrt((d**2).sum(-1))
    mu = np.abs((d * los).sum(-1)) / np.where(s > 0, s, 1.0) / np.linalg.norm(los, axis=-1)
    iu = np.triu_indices(len(q), 1)
    want, _, _ = np.histogram2d(s[iu], np.minimum(mu[iu], 1 - 1e-15),
                                bins=[bins.s_edges, bins.mu_edges])
    assert np.array_equal(count_smu_cone(q, bins=bins).total, want)


def test_join_separations_of_one_set_is_the_whole_count():
    """Counts below and above an inner edge, joined, equal one count over all the edges
    (same points: the rescaling is exactly 1), delete-one counts included."""
    rng = np.random.default_rng(4)
    p = _shell(rng, 1500)
    reg = rng.integers(0, 4, len(p))
    edges = np.geomspace(0.5, 12.0, 7)
    kw = {"pi_max": 9.0, "dpi": 3.0, "n_regions": 4}
    whole = count_rppi_cone(p, None, reg, rp_edges=edges, **kw)
    joined = join_separations(count_rppi_cone(p, None, reg, rp_edges=edges[:4], **kw),
                              count_rppi_cone(p, None, reg, rp_edges=edges[3:], **kw))
    np.testing.assert_array_equal(joined.rp_edges, edges)
    np.testing.assert_array_equal(joined.total, whole.total)
    np.testing.assert_allclose(joined.touch, whole.touch, rtol=1e-12, atol=0)
    with pytest.raises(ValueError, match="meet at one edge"):
        join_separations(count_rppi_cone(p, rp_edges=edges[:3], pi_max=9.0, dpi=3.0),
                         count_rppi_cone(p, rp_edges=edges[3:], pi_max=9.0, dpi=3.0))


def test_join_separations_keeps_each_part_normalisation():
    """Above the joint the counts come from a subset: the joined counts over the whole set's
    normalisations equal the subset's own normalised counts, and their delete-one ones."""
    rng = np.random.default_rng(5)
    p = _shell(rng, 1600)
    reg = rng.integers(0, 4, len(p))
    w = rng.uniform(0.5, 1.5, len(p))
    edges = np.geomspace(0.5, 12.0, 7)
    kw = {"pi_max": 9.0, "dpi": 3.0, "n_regions": 4}
    small = count_rppi_cone(p, w, reg, rp_edges=edges[:3], **kw)
    sub = slice(0, None, 3)
    large = count_rppi_cone(p[sub], w[sub], reg[sub], rp_edges=edges[2:], **kw)
    joined = join_separations(small, large)
    np.testing.assert_allclose(joined.normalised()[:2], small.normalised(), rtol=1e-14)
    np.testing.assert_allclose(joined.normalised()[2:], large.normalised(), rtol=1e-12)
    np.testing.assert_allclose(joined.normalised_delete_one()[:, 2:],
                               large.normalised_delete_one(), rtol=1e-12)
    np.testing.assert_allclose(joined.normalised_delete_one()[:, :2],
                               small.normalised_delete_one(), rtol=1e-14)


@pytest.mark.parametrize("los_axis", [0, 1, 2])
def test_box_frame_equals_numpy_mod_to_the_bit(los_axis):
    """The box counters' wrap into [0, L) (one numba pass) against numpy.mod with L → 0 (a
    tiny negative number rounds up to L), bit for bit: every periodic image, exact
    multiples of L, −0.0, the smallest subnormal, and the neighbours of 0 and ±L."""
    L = 585.0
    rng = np.random.default_rng(11)
    edge = np.array([0.0, -0.0, 5e-324, -5e-324, -1e-17, L, -L, 2 * L, -3 * L,
                     np.nextafter(L, 0.0), np.nextafter(L, 2 * L), np.nextafter(-L, 0.0),
                     np.nextafter(0.0, -1.0), L - 1e-13])
    pos = np.concatenate([rng.uniform(-3 * L, 4 * L, (20_000, 3)),
                          np.stack(np.meshgrid(edge, edge, edge), -1).reshape(-1, 3)])
    axes = [a for a in range(3) if a != los_axis] + [los_axis]
    expected = np.mod(pos[:, axes], L)
    expected[expected >= L] = 0.0
    for p in (pos, pos[::3]):  # contiguous and strided input
        got = to_box_frame(p, L, los_axis)
        want = expected if p is pos else expected[::3]
        assert got.flags.c_contiguous and got.shape == want.shape
        assert np.array_equal(got.view(np.int64), want.view(np.int64))
