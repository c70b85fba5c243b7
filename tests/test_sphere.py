"""Unit vectors and Cartesian positions on the sphere against astropy (reference library)."""

from __future__ import annotations

import numpy as np
from astropy import units as u
from astropy.coordinates import SkyCoord

from conecheck.sphere import radec_chi_to_xyz, radec_to_vec, vec_to_radec


def test_unit_vectors_equal_astropys_cartesian_and_round_trip():
    rng = np.random.default_rng(4)
    ra = np.concatenate([rng.uniform(0.0, 360.0, 100_000), [0.0, 90.0, 180.0, 359.999]])
    dec = np.concatenate([rng.uniform(-90.0, 90.0, 100_000), [90.0, -90.0, 0.0, 45.0]])
    xyz = radec_to_vec(ra, dec)
    ref = SkyCoord(ra * u.deg, dec * u.deg).cartesian.xyz.value.T
    # both are cos δ cos α, cos δ sin α, sin δ: a few rounding errors apart at most
    np.testing.assert_allclose(xyz, ref, rtol=0, atol=4e-16)
    np.testing.assert_allclose(np.linalg.norm(xyz, axis=1), 1.0, rtol=0, atol=4e-16)
    ra2, dec2 = vec_to_radec(xyz)
    inner = np.abs(dec) < 89.0  # RA is undefined at the poles
    np.testing.assert_allclose(dec2, dec, atol=1e-11)
    dra = (ra2[inner] - ra[inner] + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(dra, 0.0, atol=1e-9)


def test_unit_vectors_keep_the_inputs_shape_and_broadcast():
    assert radec_to_vec(10.0, 20.0).shape == (3,)
    grid = radec_to_vec(np.zeros((4, 5)), np.linspace(-80, 80, 5))
    assert grid.shape == (4, 5, 3)
    np.testing.assert_array_equal(grid[2, 3], radec_to_vec(0.0, 40.0))
    assert radec_to_vec([], []).shape == (0, 3)


def test_cartesian_positions_equal_astropys():
    rng = np.random.default_rng(6)
    ra = rng.uniform(0.0, 360.0, 50_000)
    dec = rng.uniform(-90.0, 90.0, 50_000)
    chi = rng.uniform(10.0, 3000.0, 50_000)  # Mpc/h
    xyz = radec_chi_to_xyz(ra, dec, chi)
    ref = SkyCoord(ra * u.deg, dec * u.deg, distance=chi * u.Mpc).cartesian.xyz.value.T
    # the same products up to their order: a few rounding errors of χ at most
    np.testing.assert_allclose(xyz, ref, rtol=0, atol=4e-16 * chi.max())
    assert radec_chi_to_xyz(10.0, 20.0, 5.0).shape == (3,)
    np.testing.assert_allclose(radec_chi_to_xyz(10.0, 20.0, 5.0), 5.0 * radec_to_vec(10.0, 20.0),
                               rtol=1e-15)
