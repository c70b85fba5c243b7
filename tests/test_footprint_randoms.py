"""Masks estimated from random catalogues."""

from __future__ import annotations

import logging

import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.footprint import Footprint, build_mask, mask_from_randoms


def test_randoms_recover_area_and_completeness():
    truth = build_mask({"region": [{"shape": "cap", "ra": 150, "dec": 30, "radius": 15},
                                   {"shape": "box", "ra_min": 150, "ra_max": 170,
                                    "dec_min": 20, "dec_max": 40, "completeness": 0.5}]}, 32)
    rng = np.random.default_rng(11)
    # ~400 randoms per full pixel: per-pixel noise 5 %
    n = int(400 * truth.area_sr / truth.pixel_area_sr)
    ra, dec = truth.sample(n, rng)
    est = mask_from_randoms(ra, dec, 32)
    interior = truth.values == 1.0
    half = truth.values == 0.5
    assert np.median(est.values[interior]) == pytest.approx(1.0, abs=0.01)
    assert np.mean(est.values[half]) == pytest.approx(0.5, abs=0.02)
    # the cap's Poisson bias (≈ 0.4/√λ = 2 % at λ = 400) is removed for complete pixels,
    # leaving ≈ −0.2 % (complete_pixel_bias); pixels straddling the half-completeness box
    # inside the cap (completeness 0.5-1) that lie within 2σ of λ are set complete, which
    # adds ≈ +1.3 % on this small N_side 32 map (module docstring); the noise is < 0.2 %
    assert est.area_sr == pytest.approx(truth.area_sr * 1.013, rel=0.01)


@pytest.mark.parametrize("per_pixel", [40, 160])
def test_complete_pixels_are_not_biased_low(per_pixel):
    """A complete footprint's area from randoms, against its true area (HEALPix pixels).

    min(N/λ, 1) alone is low by E[min(N/λ,1)] − 1 = −6.3 % at λ = 40 and −3.2 % at 160
    (Poisson sums, capped_bias); after the correction the bias is complete_pixel_bias
    (−0.7 %, −0.4 %). The estimate's own scatter over ≈ 3000 pixels is below 0.1 %, so a
    1.5 % margin cannot be missed by chance and excludes the uncorrected estimator.
    """
    from conecheck.footprint.from_randoms import capped_bias, complete_pixel_bias

    assert capped_bias(40) == pytest.approx(-0.063, abs=0.001)
    assert -0.01 < complete_pixel_bias(per_pixel) < 0
    truth = build_mask({"region": [{"shape": "cap", "ra": 40, "dec": -30, "radius": 30}]}, 64)
    n = int(per_pixel * truth.area_sr / truth.pixel_area_sr)
    ra, dec = truth.sample(n, np.random.default_rng(per_pixel))
    est = mask_from_randoms(ra, dec, 64)
    assert est.area_sr == pytest.approx(truth.area_sr, rel=0.015)


def test_sparse_randoms_warn_with_suggested_nside(caplog):
    fp = Footprint.from_map(np.ones(12 * 64**2))
    ra, dec = fp.sample(5 * 12 * 64**2, np.random.default_rng(1))
    with caplog.at_level(logging.INFO, logger="conecheck"):
        mask_from_randoms(ra, dec, 64)
    # mean 5 per pixel: N_side 16 gives 80 ≥ 25
    assert "use N_side 16" in caplog.text


def test_explicit_level_and_errors():
    ra = np.array([10.0, 10.0, 10.0, 50.0])
    dec = np.array([0.0, 0.0, 0.0, 0.0])
    est = mask_from_randoms(ra, dec, 8, level=3.0)
    assert sorted(np.unique(est.values).tolist()) == [0.0, 1 / 3, 1.0]
    with pytest.raises(InputError, match="power of 2"):
        mask_from_randoms(ra, dec, 12)
    with pytest.raises(InputError, match="no random points"):
        mask_from_randoms([], [], 8)
    with pytest.raises(InputError, match="level"):
        mask_from_randoms(ra, dec, 8, level=-1.0)
