"""Void probability function against the Poisson law P₀(R) = exp(−n 4πR³/3).

Source: Peebles 1980, The Large-Scale Structure of the Universe (Princeton), the void
probability of a Poisson process (design.md §11).
"""

from __future__ import annotations

import numpy as np
import pytest
import stats_helpers as sh

from conecheck.errors import InputError
from conecheck.stats import BoxSample, VpfSettings, vpf_box, vpf_cone

RADII = (2.0, 4.0, 6.0, 8.0)


def poisson_p0(n, radii):
    return np.exp(-n * 4.0 / 3.0 * np.pi * np.asarray(radii) ** 3)


def test_vpf_box_poisson():
    rng = np.random.default_rng(0)
    L = 200.0
    pos = sh.poisson(rng, 1e-3, L)
    s = BoxSample.with_regions(pos, L, 2, n_side=4)
    m = vpf_box(s, VpfSettings(radii=RADII, n_spheres=20000), rng)
    ref = poisson_p0(len(pos) / L**3, RADII)
    err = np.sqrt(np.diag(m.covariance))
    assert np.all(np.abs(m.value - ref) < 4 * err + 1e-12), (m.value, ref, err)
    assert m.extra["n_spheres_used"] == [20000] * 4
    # same seed, same numbers
    again = vpf_box(s, VpfSettings(radii=RADII, n_spheres=20000), np.random.default_rng(0))
    first = vpf_box(s, VpfSettings(radii=RADII, n_spheres=20000), np.random.default_rng(0))
    np.testing.assert_array_equal(again.value, first.value)


def test_vpf_cone_spheres_inside_survey():
    # Only spheres wholly inside the footprint and shell are used; a sphere poking out
    # would look emptier than it is and bias P₀ high at large R.
    rng = np.random.default_rng(1)
    L = 240.0
    n = 3e-3
    geo = sh.geometry(sh.patch(32, ra=(0, 60), dec=(-20, 20)), 40.0, 110.0, 6)
    data = sh.shell_from_box(sh.poisson(rng, n, L), L, 40.0, 110.0, geo)
    m = vpf_cone(data, geo, VpfSettings(radii=RADII, n_spheres=12000), rng)
    ref = poisson_p0(n, RADII)
    err = np.sqrt(np.diag(m.covariance))
    assert np.all(np.abs(m.value - ref) < 4 * err + 1e-12), (m.value, ref, err)
    used = np.array(m.extra["n_spheres_used"])
    assert np.all(np.diff(used) < 0) and used[-1] > 800
    # without the inside test (a threshold of ~0) edge spheres inflate P₀
    loose = vpf_cone(data, geo, VpfSettings(radii=RADII, n_spheres=12000,
                                            min_inside_fraction=1e-6), rng, jackknife=False)
    assert loose.value[-1] > ref[-1] + 4 * err[-1]


def test_vpf_needs_rng_and_layout():
    rng = np.random.default_rng(2)
    pos = sh.poisson(rng, 1e-3, 100.0)
    with pytest.raises(InputError, match="Generator"):
        vpf_box(BoxSample(pos, 100.0), VpfSettings(radii=RADII))
    labels = (np.arange(len(pos)) % 4)
    with pytest.raises(InputError, match="layout"):
        vpf_box(BoxSample(pos, 100.0, region=labels, n_regions=4), VpfSettings(radii=RADII),
                rng)
    with pytest.raises(InputError, match="radii"):
        VpfSettings(radii=(4.0, 2.0))


def test_shared_sphere_centres_give_the_same_vpf_as_drawing_them_per_cone():
    """Centres drawn once per cut (pipeline) and per call are the same computation."""
    from conecheck.stats.vpf import vpf_cone_centres

    rng = np.random.default_rng(4)
    L, n = 200.0, 3e-3
    geo = sh.geometry(sh.patch(32, ra=(0, 60), dec=(-20, 20)), 40.0, 100.0, 6)
    data = sh.shell_from_box(sh.poisson(rng, n, L), L, 40.0, 100.0, geo)
    s = VpfSettings(radii=RADII, n_spheres=5000)
    per_call = vpf_cone(data, geo, s, np.random.default_rng(9))
    shared = vpf_cone_centres(geo, s, np.random.default_rng(9))
    reused = vpf_cone(data, geo, s, None, centres=shared)
    np.testing.assert_array_equal(per_call.value, reused.value)
    np.testing.assert_array_equal(per_call.delete_one, reused.delete_one)
    with pytest.raises(InputError, match="radii"):
        vpf_cone(data, geo, VpfSettings(radii=RADII[:2], n_spheres=5000), None,
                 centres=shared)
