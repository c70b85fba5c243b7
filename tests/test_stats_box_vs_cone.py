"""Box and cone estimators agree on a geometry-only set-up.

The same clustered points are measured as a periodic box and as a full-sky shell cut from
it around an observer at the box centre (no redshift-space effects, so the two differ only
by geometry, line of sight and edges).  Every statistic must agree within the combined
jackknife error (|z| < 4): this is the null test the whole tool is built on (design.md §1).
"""

from __future__ import annotations

import numpy as np
import pytest
import stats_helpers as sh

from conecheck.stats import (
    STATISTICS,
    AnnuliSettings,
    BoxSample,
    CicSettings,
    MatterSample,
    NumberDensitySettings,
    VpfSettings,
    WpSettings,
)
from conecheck.stats.delta_sigma import DeltaSigmaSettings
from conecheck.stats.multipoles import MultipolesSettings

L = 240.0
CHI = (30.0, 110.0)
SETTINGS = {
    "number_density": NumberDensitySettings(),
    "wp": WpSettings(rp_edges=tuple(np.geomspace(0.5, 20.0, 7)), pi_max=20.0, dpi=2.0),
    "cic": CicSettings(r_cyl=2.0, half_length=10.0, max_count=12, edge_treatment="drop",
                       min_inside_fraction=0.99),
    "vpf": VpfSettings(radii=(2.0, 4.0, 6.0, 8.0), n_spheres=8000),
    "annuli": AnnuliSettings(r_inner=2.0, r_outer=4.0, half_length=10.0, max_count=12,
                             edge_treatment="drop", min_inside_fraction=0.99),
    "multipoles": MultipolesSettings(s_edges=(2.0, 5.0, 10.0, 20.0), n_mu=10, ells=(0, 2)),
    # reach √(4² + 8²) beyond χ = 110 stays inside the box seen from its centre
    "delta_sigma": DeltaSigmaSettings(rp_edges=(0.5, 1.0, 2.0, 4.0), pi_max=8.0),
}


@pytest.fixture(scope="module")
def setup():
    rng = np.random.default_rng(7)
    pos = sh.clustered(rng, 12000, 2.5, 1.5, L)
    box = BoxSample.with_regions(pos, L, 2, n_side=3)
    geo = sh.geometry(sh.full_sky(8), *CHI, 8)
    cone = sh.shell_from_box(pos, L, *CHI, geo)
    rand = sh.randoms(geo, 6 * len(cone), rng)
    # matter: the galaxies jittered by 0.7 Mpc/h, 10¹² M_⊙/h each, in both frames
    part = np.mod(pos + rng.normal(0.0, 0.7, pos.shape), L)
    matter = (MatterSample(part, 1e12, L), MatterSample(part - 0.5 * L, 1e12))
    return box, geo, cone, rand, matter


@pytest.mark.parametrize("name", list(SETTINGS))
def test_box_and_cone_agree(setup, name):
    box, geo, cone, rand, matter = setup
    stat, st = STATISTICS[name], SETTINGS[name]
    kw = [{"matter": m} if stat.needs_matter else {} for m in matter]
    mb = stat.measure_box(box, st, np.random.default_rng(1), **kw[0])
    shared = stat.prepare_cone(rand, geo, st, n_data=len(cone))
    mc = stat.measure_cone(cone, rand, geo, st, np.random.default_rng(2), shared, **kw[1])
    err = np.sqrt(np.diag(mb.covariance) + np.diag(mc.covariance))
    use = err > 0
    z = (mc.value - mb.value)[use] / err[use]
    assert use.sum() >= 1
    assert np.all(np.abs(z) < 4.0), (name, z)
    if name in ("wp", "delta_sigma"):
        assert mb.value[0] > 5 * err[0]  # a real clustering signal is being compared
