"""Per-centre neighbour counts (cylinders, annuli, spheres) against scipy cKDTree brute force.

Reference: scipy.spatial.cKDTree (``boxsize`` for periodic minimum image) to find candidate
pairs, then r_p, π from the definitions of design.md §6 evaluated with numpy.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree

from conecheck.errors import InputError
from conecheck.pairs import nearest_distance, neighbours_box, neighbours_cone


def brute(centres, points, w, edges, h, box=None, los=2, self_pairs=False):
    """Weighted counts per centre and shell; cone (box=None) uses the midpoint LOS."""
    rmax = edges[-1] if h is None else np.hypot(edges[-1], h)
    tc = cKDTree(centres, boxsize=box)
    tp = cKDTree(points, boxsize=box)
    sm = tc.sparse_distance_matrix(tp, rmax, output_type="coo_matrix")
    i, j = sm.row, sm.col
    if self_pairs:
        keep = i != j
        i, j = i[keep], j[keep]
    s = points[j] - centres[i]
    if box is not None:
        s -= box * np.round(s / box)
        pi = np.abs(s[:, los])
    else:
        ell = 0.5 * (points[j] + centres[i])
        pi = np.abs(np.sum(s * ell, axis=1)) / np.linalg.norm(ell, axis=1)
    s2 = np.sum(s * s, axis=1)
    if h is None:
        r, ok = np.sqrt(s2), np.ones(len(s2), bool)
    else:
        r, ok = np.sqrt(np.maximum(s2 - pi**2, 0)), pi < h
    b = np.searchsorted(edges, r, side="right") - 1
    ok &= (b >= 0) & (b < len(edges) - 1)
    out = np.zeros((len(centres), len(edges) - 1))
    np.add.at(out, (i[ok], b[ok]), w[j[ok]])
    return out


def test_box_cylinders_and_annuli_self_excluded():
    rng = np.random.default_rng(3)
    L = 50.0
    p = rng.uniform(0, L, (2000, 3))
    w = rng.uniform(0.5, 2.0, len(p))
    edges = np.array([0.0, 2.0, 5.0])
    got = neighbours_box(p, weights=w, box_size=L, los_axis=0, edges=edges, half_length=8.0)
    ref = brute(p, p, w, edges, 8.0, box=L, los=0, self_pairs=True)
    assert ref.sum() > 500
    np.testing.assert_allclose(got, ref, rtol=1e-12)


@pytest.mark.parametrize("edges,h", [([0.0, 3.0], 6.0), ([1.5, 4.0], None), ([2.0, 5.0], 6.0)])
def test_box_one_shell_weighted_self_excluded_and_around_other_centres(edges, h):
    """One shell (counts in cylinders, the VPF's spheres: the kernel's branch-free loop),
    with an inner edge, weights and the centres' own points skipped, and around centres
    that are not points; unit weights must match the brute-force count exactly."""
    rng = np.random.default_rng(12)
    L = 50.0
    p = rng.uniform(0, L, (2000, 3))
    w = rng.uniform(0.5, 2.0, len(p))
    e = np.array(edges)
    got = neighbours_box(p, weights=w, box_size=L, los_axis=1, edges=e, half_length=h)
    ref = brute(p, p, w, e, h, box=L, los=1, self_pairs=True)
    assert got.shape == (len(p), 1) and ref.sum() > 1000
    np.testing.assert_allclose(got, ref, rtol=1e-12)
    c = rng.uniform(0, L, (600, 3))
    got = neighbours_box(c, p, box_size=L, los_axis=1, edges=e, half_length=h)
    np.testing.assert_array_equal(got, brute(c, p, np.ones(len(p)), e, h, box=L, los=1))


@pytest.mark.parametrize("n_points,max_cells", [(300, None), (10000, None), (3000, 40)])
def test_box_cell_layouts_sparse_dense_and_capped(n_points, max_cells, monkeypatch):
    """The counts do not depend on the cells the density picks: sparse points (cells at
    least r_max across, widened), dense ones (r_max / refine) and a grid held under a
    small cell cap (longer LOS cells, then wider ones), each against the brute force."""
    import conecheck.pairs.grid as grid_module
    from conecheck.pairs.neighbours import NEIGHBOUR_DENSE_POINTS

    if max_cells is not None:
        monkeypatch.setattr(grid_module, "MAX_CELLS", max_cells)
    rng = np.random.default_rng(n_points)
    L, h = 20.0, 4.0
    p = rng.uniform(0, L, (n_points, 3))
    edges = np.array([0.0, 1.0, 2.0])
    # which branch the cell choice takes (the test's set-ups span both)
    dense = n_points / L**3 * edges[-1] ** 2 * h > NEIGHBOUR_DENSE_POINTS
    assert dense == (n_points == 10000)
    got = neighbours_box(p, box_size=L, los_axis=2, edges=edges, half_length=h)
    ref = brute(p, p, np.ones(n_points), edges, h, box=L, los=2, self_pairs=True)
    assert ref.sum() > n_points
    np.testing.assert_array_equal(got, ref)


def test_box_grid_under_the_cell_cap_lengthens_los_cells_first(monkeypatch):
    """Above the cap the grid keeps its cells across the LOS and lengthens them along it
    (the sorted LOS window prunes inside a cell); only a cap below the cells across halves
    those."""
    import conecheck.pairs.grid as grid_module

    monkeypatch.setattr(grid_module, "MAX_CELLS", 10_000)
    assert grid_module.box_grid(100.0, 1.0, 2.0, refine=1).dims.tolist() == [100, 100, 1]
    assert grid_module.box_grid(100.0, 1.0, 20.0, refine=1).dims.tolist() == [100, 100, 1]
    assert grid_module.box_grid(100.0, 10.0, 20.0, refine=1).dims.tolist() == [10, 10, 5]
    monkeypatch.setattr(grid_module, "MAX_CELLS", 5_000)
    assert grid_module.box_grid(100.0, 1.0, 2.0, refine=1).dims.tolist() == [50, 50, 1]


def test_box_spheres_random_centres():
    rng = np.random.default_rng(4)
    L = 40.0
    p = rng.uniform(0, L, (1500, 3))
    c = rng.uniform(0, L, (700, 3))
    edges = np.array([0.0, 2.0, 4.0, 7.0])
    got = neighbours_box(c, p, box_size=L, edges=edges)
    np.testing.assert_array_equal(got, brute(c, p, np.ones(len(p)), edges, None, box=L))


@pytest.mark.parametrize("refine", [1, 2, 3])
def test_cone_cylinders_midpoint_los(refine):
    rng = np.random.default_rng(5)
    chi = rng.uniform(100, 160, 2500)
    ra = np.radians(rng.uniform(0, 40, 2500))
    dec = np.arcsin(rng.uniform(-0.3, 0.3, 2500))
    p = np.column_stack([chi * np.cos(dec) * np.cos(ra), chi * np.cos(dec) * np.sin(ra),
                         chi * np.sin(dec)])
    w = rng.uniform(0.5, 2.0, len(p))
    edges = np.array([0.0, 3.0, 6.0])
    got = neighbours_cone(p, weights=w, edges=edges, half_length=10.0, refine=refine)
    np.testing.assert_allclose(got, brute(p, p, w, edges, 10.0, self_pairs=True), rtol=1e-12)
    # spheres around centres that are not points, some outside the points' bounding box
    c = p[:300] * rng.uniform(0.9, 1.1, (300, 1))
    got = neighbours_cone(c, p, edges=[0.0, 4.0, 8.0], refine=refine)
    np.testing.assert_array_equal(got, brute(c, p, np.ones(len(p)), np.array([0, 4.0, 8.0]),
                                             None))


def test_exclude_self_index_and_bad_input():
    rng = np.random.default_rng(6)
    p = rng.uniform(0, 30, (300, 3))
    c = p[:50]
    a = neighbours_box(c, p, box_size=30.0, edges=[0.0, 5.0], half_length=5.0,
                       exclude_self=np.arange(50))
    b = neighbours_box(c, p, box_size=30.0, edges=[0.0, 5.0], half_length=5.0)
    np.testing.assert_array_equal(b - a, 1.0)
    with pytest.raises(InputError, match="half the box"):
        neighbours_box(c, p, box_size=30.0, edges=[0.0, 16.0])
    with pytest.raises(InputError, match="half_length"):
        neighbours_cone(c, p, edges=[0.0, 5.0], half_length=-1.0)


@pytest.mark.parametrize("box", [None, 50.0])
def test_nearest_distance_gives_the_empty_spheres_of_the_shell_counts(box):
    """A sphere of radius R is empty exactly when the nearest point is at ≥ R: the nearest
    distances agree with the engine's own sphere counts (and, for the box, wrap across the
    edges like minimum-image counts), with a brute-force minimum as the reference."""
    rng = np.random.default_rng(3)
    lo = 0.0 if box else 100.0
    pts = rng.uniform(lo, lo + 50.0, (3000, 3))
    cen = rng.uniform(lo, lo + 50.0, (400, 3))
    radii = np.array([0.5, 1.0, 2.0, 3.0])
    d = nearest_distance(cen, pts, r_max=radii[-1], box_size=box)
    diff = pts[None, :, :] - cen[:, None, :]
    if box:
        diff -= box * np.round(diff / box)
    brute_min = np.sqrt((diff**2).sum(axis=2)).min(axis=1)
    near = brute_min < radii[-1]
    np.testing.assert_allclose(d[near], brute_min[near], rtol=1e-12)
    assert np.all(np.isinf(d[~near])) and near.sum() > 100 and (~near).sum() > 0
    edges = np.concatenate([[0.0], radii])
    counts = (neighbours_box(cen, pts, None, box_size=box, edges=edges) if box else
              neighbours_cone(cen, pts, None, edges=edges))
    np.testing.assert_array_equal(np.cumsum(counts, axis=1) == 0, d[:, None] >= radii)


@pytest.mark.parametrize("box, r_max", [(20.0, 6.0), (100.0, 9.0), (100.0, 2.5)])
def test_nearest_distance_in_a_box_equals_scipy_periodic_kdtree(box, r_max):
    """The box's grid search against scipy's periodic cKDTree (a reference library), with
    points given outside [0, L) (they wrap), a coarse grid whose neighbour offsets wrap
    onto the same cell more than once (L = 20, r_max = 6), and sparse and dense points."""
    rng = np.random.default_rng(11)
    for n_pts in (200, 20000):
        pts = rng.uniform(-box, 2 * box, (n_pts, 3))
        cen = rng.uniform(0.0, box, (3000, 3))
        d = nearest_distance(cen, pts, r_max=r_max, box_size=box)
        ref, _ = cKDTree(np.mod(pts, box), boxsize=box).query(
            cen, k=1, distance_upper_bound=r_max)
        assert np.array_equal(np.isinf(d), np.isinf(ref))
        found = np.isfinite(ref)
        assert found.sum() > 20  # the fewest expected: 3000 centres, 200 points, r = 2.5: 39
        np.testing.assert_allclose(d[found], ref[found], rtol=1e-12, atol=1e-12)
