"""Masks built from TOML region descriptions."""

from __future__ import annotations

import numpy as np
import pytest

from conecheck.errors import InputError
from conecheck.footprint import build_mask

DEG = np.pi / 180


def triangle_solid_angle(a, b, c):
    """Solid angle of a spherical triangle (Van Oosterom & Strackee 1983,
    IEEE Trans. Biomed. Eng. 30, 125): tan(Ω/2) = |a·(b×c)| / (1 + a·b + b·c + c·a)."""
    num = abs(np.dot(a, np.cross(b, c)))
    den = 1 + a @ b + b @ c + c @ a
    return 2 * np.arctan2(num, den)


def vec(ra, dec):
    ra, dec = np.radians(ra), np.radians(dec)
    return np.array([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])


def test_octant_triangle_area():
    fp = build_mask({"region": [{"shape": "polygon",
                                 "vertices": [[0, 0], [90, 0], [0, 90]]}]}, 64)
    # Girard's theorem: three right angles, excess π/2 (one eighth of the sphere)
    assert fp.area_sr == pytest.approx(np.pi / 2, rel=2e-3)


def test_nonconvex_polygon_area_and_inside():
    verts = [[0, 0], [40, 0], [40, 30], [20, 10], [0, 30]]
    fp = build_mask({"region": [{"shape": "polygon", "vertices": verts}]}, 64)
    v = [vec(*p) for p in verts]
    exact = (triangle_solid_angle(v[0], v[1], v[3]) + triangle_solid_angle(v[1], v[2], v[3])
             + triangle_solid_angle(v[0], v[3], v[4]))
    assert fp.area_sr == pytest.approx(exact, rel=3e-3)
    # inside the arms, outside in the notch
    assert fp.contains([5, 35, 20], [20, 20, 25]).tolist() == [True, True, False]


def test_polygon_orientation_and_closing_vertex_do_not_matter():
    cw = [[10, 10], [10, 20], [30, 20], [30, 10]]
    a = build_mask({"region": [{"shape": "polygon", "vertices": cw}]}, 32)
    b = build_mask({"region": [{"shape": "polygon", "vertices": cw[::-1] + [cw[-1]]}]}, 32)
    np.testing.assert_allclose(a.values, b.values)


def test_box_with_ra_wrap():
    fp = build_mask({"region": [{"shape": "box", "ra_min": 350, "ra_max": 10,
                                 "dec_min": -10, "dec_max": 20}]}, 64)
    # zone area ΔRA·(sin δ_max − sin δ_min) (textbook geometry)
    exact = 20 * DEG * (np.sin(20 * DEG) + np.sin(10 * DEG))
    assert fp.area_sr == pytest.approx(exact, rel=5e-3)
    assert fp.contains([355, 5, 180, 20], [0, 0, 0, 0]).tolist() == [True, True, False, False]


def test_full_ring_box():
    fp = build_mask({"region": [{"shape": "box", "ra_min": 0, "ra_max": 360,
                                 "dec_min": 30, "dec_max": 90}]}, 32)
    assert fp.area_sr == pytest.approx(2 * np.pi * (1 - np.sin(30 * DEG)), rel=5e-3)


def test_stripes():
    full = build_mask({"region": [{"shape": "stripe", "pole": [30, 60], "width": 6}]}, 64)
    # band of half-width w/2 around a great circle: 4π sin(w/2)
    assert full.area_sr == pytest.approx(4 * np.pi * np.sin(3 * DEG), rel=5e-3)
    seg = build_mask({"region": [{"shape": "stripe", "start": [0, 0], "end": [0, 80],
                                  "width": 4}]}, 64)
    # segment of length L: L · 2 sin(w/2)
    assert seg.area_sr == pytest.approx(80 * DEG * 2 * np.sin(2 * DEG), rel=5e-3)
    assert seg.contains([0, 0, 0, 5], [40, -3, 83, 40]).tolist() == [True, False, False, False]


def test_exclusions_and_order():
    spec = {"region": [
        {"shape": "cap", "ra": 0, "dec": 0, "radius": 20},
        {"shape": "cap", "ra": 0, "dec": 0, "radius": 5, "mode": "exclude"},
        {"shape": "cap", "ra": 10, "dec": 0, "radius": 3, "completeness": 0.5},
    ]}
    fp = build_mask(spec, 64)
    cap = lambda r: 2 * np.pi * (1 - np.cos(r * DEG))  # noqa: E731 - cap area formula
    assert fp.area_sr == pytest.approx(cap(20) - cap(5) - 0.5 * cap(3), rel=3e-3)
    assert fp.completeness([0, 10, 15], [0, 0, 0]).tolist() == [0.0, 0.5, 1.0]


def test_fractional_edges_and_small_veto():
    # A veto much smaller than a pixel still removes its area (sub-pixel sampling).
    spec = {"region": [{"shape": "box", "ra_min": 0, "ra_max": 40, "dec_min": -20,
                        "dec_max": 20},
                       {"shape": "cap", "ra": 20.3, "dec": 0.2, "radius": 0.3,
                        "mode": "exclude"}]}
    with_veto = build_mask(spec, 16, oversample=5)
    without = build_mask({"region": spec["region"][:1]}, 16, oversample=5)
    lost = without.area_sr - with_veto.area_sr
    # sub-pixel values depend only on the pixel, so the difference is the veto alone
    # (≈ 20 sub-pixels of 0.013 deg² inside the veto: a few per cent of noise)
    assert lost == pytest.approx(2 * np.pi * (1 - np.cos(0.3 * DEG)), rel=0.15)
    frac = with_veto.values[(with_veto.values > 0) & (with_veto.values < 1)]
    assert frac.size > 0


def test_build_from_toml_file(tmp_path):
    path = tmp_path / "r.toml"
    path.write_text('[mask]\nname = "t"\nnside = 32\n\n[[region]]\nshape = "cap"\n'
                    'ra = 10\ndec = 10\nradius = 10\n')
    fp = build_mask(path)
    assert fp.nside == 32 and fp.meta["name"] == "t"
    assert build_mask(path, 16, nest=True).nest


@pytest.mark.parametrize("region,match", [
    ({"shape": "hexagon"}, r"region 1: shape = 'hexagon'"),
    ({"shape": "cap", "ra": 0, "dec": 95, "radius": 1}, r"region 1: dec = 95 outside"),
    ({"shape": "cap", "ra": 0, "dec": 0, "radius": -1}, r"radius = -1 outside"),
    ({"shape": "cap", "ra": 0, "dec": 0}, r"missing key 'radius'"),
    ({"shape": "cap", "ra": 0, "dec": 0, "radius": 1, "radus": 2}, r"unknown keys \['radus'\]"),
    ({"shape": "cap", "ra": 0, "dec": 0, "radius": 1, "mode": "veto"}, r"mode = 'veto'"),
    ({"shape": "cap", "ra": 0, "dec": 0, "radius": 1, "completeness": 1.5},
     r"completeness = 1.5 outside"),
    ({"shape": "cap", "ra": 0, "dec": 0, "radius": 1, "mode": "exclude",
      "completeness": 0.5}, "include regions only"),
    ({"shape": "box", "ra_min": 0, "ra_max": 10, "dec_min": 10, "dec_max": 5},
     "must be below"),
    ({"shape": "stripe", "start": [0, 0], "end": [180, 0], "width": 2}, "antipodal"),
    ({"shape": "stripe", "pole": [0, 90], "start": [0, 0], "width": 2}, "either pole"),
    ({"shape": "polygon", "vertices": [[0, 0], [120, 0], [240, 0]]}, "hemisphere"),
    ({"shape": "polygon", "vertices": [[0, 0], [10, 0]]}, "at least 3"),
    ({"shape": "polygon", "vertices": [[0, 0], [10, 0], [10, 100]]}, "dec outside"),
])
def test_bad_regions_name_the_region(region, match):
    spec = {"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 1}, region]}
    spec["region"] = [region]
    with pytest.raises(InputError, match=match):
        build_mask(spec, 16)


def test_error_names_region_number_and_label():
    spec = {"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 5},
                       {"shape": "cap", "label": "star 7", "ra": 0, "dec": -91, "radius": 1}]}
    with pytest.raises(InputError, match=r"region 2 \('star 7'\): dec = -91"):
        build_mask(spec, 16)


def test_bad_files_and_nside(tmp_path):
    with pytest.raises(InputError, match="not found"):
        build_mask(tmp_path / "none.toml", 16)
    bad = tmp_path / "bad.toml"
    bad.write_text("[[region]\nshape=")
    with pytest.raises(InputError, match="not valid TOML"):
        build_mask(bad, 16)
    with pytest.raises(InputError, match="no regions"):
        build_mask({"mask": {"name": "x"}}, 16)
    with pytest.raises(InputError, match="power of 2"):
        build_mask({"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 5}]}, 48)
    with pytest.raises(InputError, match="no N_side"):
        build_mask({"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 5}]})
    with pytest.raises(InputError, match="empty footprint"):
        build_mask({"region": [{"shape": "cap", "ra": 0, "dec": 0, "radius": 5,
                                "mode": "exclude"}]}, 16)
