"""HEALPix pixel indices against healpy (reference library). RING → NESTED: every pixel
of the small N_sides, and random pixels with the ring and cap boundaries at the large
ones. Positions → pixels: random positions over the sphere plus the places where the
library's arithmetic changes branch (poles, the polar-cap thresholds θ = 0.01 rad and
|z| = 0.99, the belt edge |z| = 2/3, multiples of 90° in RA and RA outside [0, 360))."""

from __future__ import annotations

import healpy as hp
import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.healpix_pixels import ang2pix_lonlat, ring2nest, vec2pix


def test_every_pixel_of_small_nsides():
    for order in range(8):
        nside = 1 << order
        pix = np.arange(hp.nside2npix(nside), dtype=np.int64)
        np.testing.assert_array_equal(ring2nest(nside, pix), hp.ring2nest(nside, pix))


@pytest.mark.parametrize("order", [10, 17, 24, 29])
def test_random_pixels_and_boundaries_of_large_nsides(order):
    nside = 1 << order
    npix = hp.nside2npix(nside)
    ncap = 2 * nside * (nside - 1)
    rng = np.random.default_rng(order)
    edges = np.array([0, 1, ncap - 1, ncap, ncap + 4 * nside - 1, npix - ncap - 1,
                      npix - ncap, npix - 2, npix - 1], dtype=np.int64)
    pix = np.concatenate([rng.integers(0, npix, 200_000), edges])
    np.testing.assert_array_equal(ring2nest(nside, pix), hp.ring2nest(nside, pix))
    assert ring2nest(nside, pix.reshape(-1, 1)).shape == (pix.size, 1)


def test_refuses_an_nside_that_is_not_a_power_of_two():
    for bad in (0, 3, 2**30):
        with pytest.raises(InputError, match="nside"):
            ring2nest(bad, [0])


def _positions_and_branch_edges(rng, n):
    ra = rng.uniform(-400.0, 800.0, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1.0, 1.0, n)))
    edge_dec = [90.0, -90.0, 89.99, 0.0, 90.0 - np.degrees(0.01), -(90.0 - np.degrees(0.01)),
                np.degrees(np.arcsin(2.0 / 3.0)), -np.degrees(np.arcsin(2.0 / 3.0)),
                np.degrees(np.arcsin(0.99)), -np.degrees(np.arcsin(0.99))]
    edge_ra = [0.0, 90.0, 180.0, 270.0, 360.0, 720.0, -90.0, -1e-14, 1e-14,
               np.nextafter(360.0, 0.0)]
    er, ed = np.meshgrid(edge_ra, edge_dec)
    return np.concatenate([ra, er.ravel()]), np.concatenate([dec, ed.ravel()])


@pytest.mark.parametrize("nside", [1, 3, 16, 48, 1000, 1024, 2**17, 2**29])
def test_positions_to_pixels_equal_healpys(nside):
    rng = np.random.default_rng(nside % 1009)
    ra, dec = _positions_and_branch_edges(rng, 200_000)
    vec = hp.ang2vec(ra, dec, lonlat=True) * rng.uniform(0.5, 2.0, (ra.size, 1))
    for nest in ((False, True) if nside & (nside - 1) == 0 else (False,)):
        np.testing.assert_array_equal(ang2pix_lonlat(nside, ra, dec, nest=nest),
                                      hp.ang2pix(nside, ra, dec, nest=nest, lonlat=True))
        np.testing.assert_array_equal(
            vec2pix(nside, vec[:, 0], vec[:, 1], vec[:, 2], nest=nest),
            hp.vec2pix(nside, vec[:, 0], vec[:, 1], vec[:, 2], nest=nest))
    assert ang2pix_lonlat(nside, ra.reshape(-1, 2), dec.reshape(-1, 2)).shape \
        == (ra.size // 2, 2)


def test_positions_to_pixels_refuse_a_nested_nside_that_is_not_a_power_of_two():
    with pytest.raises(InputError, match="nside"):
        ang2pix_lonlat(48, [0.0], [0.0], nest=True)
    with pytest.raises(InputError, match="nside"):
        vec2pix(0, [1.0], [0.0], [0.0])
