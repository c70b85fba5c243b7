"""Box jackknife sub-volumes, delete-one covariances, number density and the registry."""

from __future__ import annotations

import numpy as np
import pytest
import stats_helpers as sh

from conecheck.errors import InputError
from conecheck.jackknife import BoxRegions, box_regions, jackknife_covariance
from conecheck.stats import (
    STATISTICS,
    BoxSample,
    CicSettings,
    MatterSample,
    Measurement,
    VpfSettings,
    WpSettings,
    make_settings,
    number_density_box,
    number_density_cone,
)


@pytest.mark.parametrize("layout, k", [("columns", 16), ("cubes", 64)])
def test_box_regions_equal_volumes(layout, k):
    L = 100.0
    g = (np.arange(40) + 0.5) * L / 40
    grid = np.stack(np.meshgrid(g, g, g, indexing="ij"), axis=-1).reshape(-1, 3)
    lab = box_regions(grid, L, los_axis=1, n_side=4, layout=layout)
    assert BoxRegions(L, 1, 4, layout).k == k
    np.testing.assert_array_equal(np.bincount(lab, minlength=k), len(grid) // k)
    if layout == "columns":
        # a column runs the whole box along the line of sight
        moved = grid.copy()
        moved[:, 1] = (moved[:, 1] + 37.0) % L
        np.testing.assert_array_equal(box_regions(moved, L, 1, 4), lab)
    with pytest.raises(InputError, match="layout"):
        box_regions(grid, L, 1, 4, layout="slabs")


def test_delete_one_covariance_of_a_mean_is_textbook():
    # Number density = mean of per-region densities when regions have equal volume, so the
    # delete-one variance must equal s²/K (textbook jackknife of a mean, e.g. Efron 1982,
    # The Jackknife, the Bootstrap and Other Resampling Plans, SIAM).
    rng = np.random.default_rng(0)
    L = 100.0
    s = BoxSample.with_regions(sh.clustered(rng, 400, 6, 2.0, L), L, 2, n_side=3)
    m = number_density_box(s)
    per_region = np.bincount(s.region, minlength=9) / (L**3 / 9)
    assert m.value[0] == pytest.approx(per_region.mean())
    assert m.covariance[0, 0] == pytest.approx(per_region.var(ddof=1) / 9, rel=1e-12)
    with pytest.raises(InputError, match="at least 2"):
        jackknife_covariance(np.ones((1, 3)))


def test_number_density_cone_volume():
    # V_eff = (Ω_eff/3)(χ_max³ − χ_min³) with Ω_eff the footprint area (design.md §6);
    # HEALPix pixel areas 4π/(12 N_side²) (Górski et al. 2005, ApJ 622, 759)
    rng = np.random.default_rng(1)
    geo = sh.geometry(sh.patch(16, ra=(0, 90), dec=(-30, 30)), 40.0, 110.0, 6)
    data = sh.randoms(geo, 5000, rng)
    m = number_density_cone(data, geo)
    n_pix = int(np.sum(geo.footprint.values > 0))
    omega = n_pix * 4 * np.pi / (12 * 16**2)
    assert m.value[0] == pytest.approx(5000 / (omega / 3 * (110.0**3 - 40.0**3)), rel=1e-9)
    # uniform randoms: each delete-one density is the full density within Poisson noise
    assert np.allclose(m.delete_one[:, 0], m.value[0], rtol=0.1)


def test_registry_generic_loop():
    rng = np.random.default_rng(2)
    L = 150.0
    box = BoxSample.with_regions(sh.clustered(rng, 1500, 3, 1.5, L), L, 2, n_side=3)
    geo = sh.geometry(sh.patch(16, ra=(0, 90), dec=(-30, 30)), 30.0, 70.0, 5)
    cone = sh.shell_from_box(box.position, L, 30.0, 70.0, geo)
    rand = sh.randoms(geo, 5 * len(cone), rng)
    settings = {"wp": WpSettings(rp_edges=(1.0, 3.0, 10.0), pi_max=10.0, dpi=2.0),
                "cic": CicSettings(max_count=5), "vpf": VpfSettings(radii=(2.0, 4.0),
                                                                     n_spheres=3000),
                "multipoles": make_settings("multipoles", {"s_edges": [2.0, 6.0, 15.0],
                                                           "n_mu": 4})}
    assert set(STATISTICS) >= {"number_density", "wp", "cic", "vpf", "annuli", "count_ratio",
                               "multipoles", "delta_sigma"}
    # matter for lensing statistics: the galaxies themselves, jittered (mass 10¹² M_⊙/h)
    part = np.mod(box.position + rng.normal(0.0, 0.5, box.position.shape), L)
    matter_box = MatterSample(part, 1e12, L)
    matter_cone = MatterSample(part - 0.5 * L, 1e12)
    for name, stat in STATISTICS.items():
        st = settings.get(name, stat.settings_type())
        kw_box = {"matter": matter_box} if stat.needs_matter else {}
        kw_cone = {"matter": matter_cone} if stat.needs_matter else {}
        mb = stat.measure_box(box, st, np.random.default_rng(3), **kw_box)
        shared = stat.prepare_cone(rand, geo, st, n_data=len(cone))
        mc = stat.measure_cone(cone, rand, geo, st, np.random.default_rng(4), shared,
                               **kw_cone)
        for m, k in ((mb, 9), (mc, 5)):
            assert isinstance(m, Measurement) and m.name == name
            assert m.value.shape == m.bins.shape and m.delete_one.shape == (k, m.value.size)
            assert m.covariance.shape == (m.value.size, m.value.size)
    assert make_settings("wp", {"pi_max": 20.0, "rp_edges": [1.0, 2.0]}).rp_edges == (1.0, 2.0)
    with pytest.raises(InputError, match="unknown key"):
        make_settings("cic", {"radius": 3.0})
    with pytest.raises(InputError, match="unknown statistic"):
        make_settings("bispectrum", {})


@pytest.mark.parametrize("n_side,reach", [(5, 20.0), (4, 0.0), (3, 150.0), (2, 400.0)])
def test_columns_within_holds_every_position_near_each_column(n_side, reach):
    """The one-pass candidate lists against the direct test of every position for every
    column: the periodic image of (u, v) nearest to column (i, j)'s corner lies within
    ``reach`` of its square. Positions come in any image (negative, beyond L) and on the
    column edges; each list must hold every such position, ascending, and nothing more than
    1e-9 L beyond ``reach``."""
    L = 600.0
    layout = BoxRegions(L, 2, n_side, "columns")
    a = layout.side
    rng = np.random.default_rng(5)
    u = np.concatenate([rng.uniform(-L, 2 * L, 3000), np.arange(-n_side, 2 * n_side + 1) * a])
    v = np.concatenate([rng.uniform(-L, 2 * L, 3000), rng.uniform(0, L, 3 * n_side + 1)])
    start, index = layout.columns_within(u, v, reach)
    assert start.shape == (n_side**2 + 1,) and start[-1] == index.size

    def within(k, r):
        i, j = divmod(k, n_side)
        dx = np.mod(u - i * a + r, L) - r
        dy = np.mod(v - j * a + r, L) - r
        return set(np.flatnonzero((dx > -r) & (dx < a + r) & (dy > -r) & (dy < a + r)))

    for k in range(n_side**2):
        got = index[start[k]:start[k + 1]]
        assert np.all(np.diff(got) > 0)
        assert within(k, reach) <= set(got.tolist())
        assert set(got.tolist()) <= within(k, reach + 1e-6 * L)


def test_columns_within_needs_columns():
    with pytest.raises(ValueError, match="columns"):
        BoxRegions(100.0, 2, 2, "cubes").columns_within(np.zeros(1), np.zeros(1), 1.0)


@pytest.mark.parametrize("layout", ["columns", "cubes"])
@pytest.mark.parametrize("los_axis", [0, 1, 2])
def test_region_of_is_the_floor_of_the_wrapped_coordinate_over_the_side(layout, los_axis):
    """Labels (one numba pass) against the definition written with numpy:
    ⌊mod(x, L) / side⌋ on each axis across the LOS (and along it for cubes), clipped to
    [0, n_side − 1], first axis slowest; on every periodic image, the sub-volume edges and
    their neighbours, −0.0 and tiny negatives (numpy.mod rounds those up to L: the last
    sub-volume)."""
    L = 585.0
    rng = np.random.default_rng(3)
    edge = np.array([0.0, -0.0, -1e-17, 5e-324, -5e-324, L, -L, np.nextafter(L, 0.0),
                     L / 5, np.nextafter(L / 5, 0.0), 2 * L / 5, np.nextafter(-L, 0.0), 2 * L])
    pos = np.concatenate([rng.uniform(-L, 2 * L, (30_000, 3)),
                          np.stack(np.meshgrid(edge, edge, edge), -1).reshape(-1, 3)])
    for n_side in (1, 5, 7):
        regions = BoxRegions(L, los_axis, n_side, layout)
        axes = [a for a in range(3) if a != los_axis] + [los_axis]
        axes = axes[:2] if layout == "columns" else axes
        ijk = np.clip(np.floor(np.mod(pos[:, axes], L) / (L / n_side)).astype(np.int64),
                      0, n_side - 1)
        expected = ijk[:, 0] * n_side + ijk[:, 1]
        if layout == "cubes":
            expected = expected * n_side + ijk[:, 2]
        assert np.array_equal(regions.region_of(pos), expected)
