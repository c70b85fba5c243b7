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
    # Poisson cap bias ≈ 0.4/√λ = 2 % of the area (module docstring); allow 4 %
    assert est.area_sr == pytest.approx(truth.area_sr, rel=0.04)


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
