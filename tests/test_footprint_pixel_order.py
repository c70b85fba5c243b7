"""RING → NESTED pixel indices against healpy (reference library): every pixel of the
small N_sides, and random pixels with the ring and cap boundaries at the large ones."""

from __future__ import annotations

import healpy as hp
import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.footprint.pixel_order import ring2nest


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
