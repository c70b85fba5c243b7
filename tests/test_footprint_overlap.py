"""Fibre-tile overlap maps."""

from __future__ import annotations

import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.footprint import hex_tile_centres, tile_overlap_map

DEG = np.pi / 180


def test_two_tile_lens_area():
    r, d = 1.5, 2.0
    fp = tile_overlap_map([100.0, 100.0 + d], [0.0, 0.0], r, 128, oversample=3)
    # Circle–circle intersection (planar geometry; the flat-sky error is O(r²) ≈ 1e-3):
    # A = 2 r² acos(d / 2r) − (d/2) √(4r² − d²)
    rr, dd = r * DEG, d * DEG
    lens = 2 * rr**2 * np.arccos(dd / (2 * rr)) - dd / 2 * np.sqrt(4 * rr**2 - dd**2)
    assert fp.area_sr == pytest.approx(lens, rel=0.02)
    assert fp.values.max() <= 1.0


def test_hex_pattern_covers_without_gaps():
    ra, dec = hex_tile_centres(100, 140, 0, 30, 2.5)
    # spacing 2.5 < √3 · 1.5: a hexagonal pattern of 1.5° tiles leaves no gap
    from conecheck.footprint import Footprint

    probe = Footprint.from_map(np.ones(12 * 64**2)).sample(2000, np.random.default_rng(0))
    inside = (probe[0] > 105) & (probe[0] < 135) & (probe[1] > 5) & (probe[1] < 25)
    v = np.stack([np.cos(np.radians(dec)) * np.cos(np.radians(ra)),
                  np.cos(np.radians(dec)) * np.sin(np.radians(ra)), np.sin(np.radians(dec))], 1)
    pra, pdec = np.radians(probe[0][inside]), np.radians(probe[1][inside])
    p = np.stack([np.cos(pdec) * np.cos(pra), np.cos(pdec) * np.sin(pra), np.sin(pdec)], 1)
    assert np.all((p @ v.T).max(axis=1) >= np.cos(1.5 * DEG))
    with pytest.raises(InputError):
        hex_tile_centres(0, 10, 0, 10, -1.0)
    with pytest.raises(InputError):
        tile_overlap_map([0.0], [0.0], 120.0, 16)
