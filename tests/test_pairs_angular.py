"""Close pairs and nearest neighbours on the sphere against scipy's k-d tree
(``cKDTree.query_pairs`` and ``cKDTree.query``, the reference library), on the geometries
where a strip search can go wrong: the poles, the azimuth seam at φ = ±π, RA = 0,
duplicated points and a chord wider than most strips."""

from __future__ import annotations

import numba
import numpy as np
import pytest
from scipy.spatial import cKDTree

from conecheck.pairs import close_pairs_sphere, nearest_on_sphere
from conecheck.sphere import radec_to_vec


def _canonical(pairs: np.ndarray) -> np.ndarray:
    p = np.sort(np.asarray(pairs, dtype=np.int64).reshape(-1, 2), axis=1)
    return p[np.lexsort((p[:, 1], p[:, 0]))]


def _sky(rng: np.random.Generator, n: int, ra: tuple[float, float],
         dec: tuple[float, float]) -> np.ndarray:
    # uniform in area inside the RA-Dec box [deg]
    s = rng.uniform(np.sin(np.radians(dec[0])), np.sin(np.radians(dec[1])), n)
    return radec_to_vec(rng.uniform(*ra, n) % 360.0, np.degrees(np.arcsin(s)))


GEOMETRIES = {
    # name: (RA range, Dec range, chord)
    "whole sky": ((0.0, 360.0), (-90.0, 90.0), 0.02),
    "north cap": ((0.0, 360.0), (88.5, 90.0), 0.002),
    "south cap": ((0.0, 360.0), (-90.0, -89.5), 0.001),
    "azimuth seam": ((175.0, 185.0), (-3.0, 3.0), 0.003),
    "RA = 0": ((-5.0, 5.0), (40.0, 45.0), 0.003),
    "narrow patch": ((10.0, 10.5), (5.0, 5.5), 2e-4),
}


@pytest.mark.parametrize("name", sorted(GEOMETRIES))
def test_close_pairs_equal_the_k_d_tree(name):
    ra, dec, chord = GEOMETRIES[name]
    rng = np.random.default_rng(sorted(GEOMETRIES).index(name))
    xyz = _sky(rng, 6000, ra, dec)
    # duplicates (distance 0) and points exactly on a strip edge or the seam
    xyz = np.concatenate([xyz, xyz[:200], radec_to_vec([180.0, 180.0, 0.0], [0.0, 1e-9, 90.0])])
    ref = cKDTree(xyz).query_pairs(chord, output_type="ndarray")
    got = close_pairs_sphere(xyz, chord)
    assert len(ref) > 200  # the case has pairs to find beyond the duplicates
    assert got.dtype == np.int64 and got.shape[1] == 2
    assert np.all(got[:, 0] < got[:, 1])
    np.testing.assert_array_equal(_canonical(got), _canonical(ref))


def test_close_pairs_wide_chord_tiny_sets_and_fixed_order():
    rng = np.random.default_rng(5)
    xyz = rng.normal(size=(400, 3))
    xyz /= np.linalg.norm(xyz, axis=1)[:, None]
    for chord in (0.7, 1.9, 2.0):  # windows that cover whole strips
        ref = cKDTree(xyz).query_pairs(chord, output_type="ndarray")
        np.testing.assert_array_equal(_canonical(close_pairs_sphere(xyz, chord)),
                                      _canonical(ref))
    assert close_pairs_sphere(xyz[:1], 0.5).shape == (0, 2)
    assert close_pairs_sphere(xyz[:0], 0.5).shape == (0, 2)
    assert close_pairs_sphere(xyz[:2], 0.0).shape == (0, 2)
    # the order is fixed by the points, not by the threads
    a = close_pairs_sphere(xyz, 0.3)
    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        np.testing.assert_array_equal(a, close_pairs_sphere(xyz, 0.3))
    finally:
        numba.set_num_threads(threads)


@pytest.mark.parametrize("name", ["north cap", "azimuth seam", "narrow patch"])
def test_nearest_on_sphere_equals_the_k_d_tree(name):
    """Nearest data point of each query against ``cKDTree.query(k=1)``: queries next to
    data points, anywhere in the data's patch (nearest distances out to the strips' search
    radius and a few beyond it) and all over the sky (most far outside the data, answered
    by the k-d tree fallback); the same index and the same distance."""
    ra, dec, _ = GEOMETRIES[name]
    rng = np.random.default_rng(sorted(GEOMETRIES).index(name) + 100)
    data = _sky(rng, 8000, ra, dec)
    near = data[:3000] + 2e-5 * rng.normal(size=(3000, 3))
    near /= np.linalg.norm(near, axis=1)[:, None]
    query = np.concatenate([near, _sky(rng, 3000, ra, dec),
                            _sky(rng, 2000, (0.0, 360.0), (-90.0, 90.0))])
    dist, index = nearest_on_sphere(query, data)
    ref_dist, ref_index = cKDTree(data).query(query, k=1)
    np.testing.assert_array_equal(index, ref_index)
    np.testing.assert_allclose(dist, ref_dist, rtol=1e-12, atol=0)
    assert nearest_on_sphere(query[:0], data)[1].shape == (0,)
