"""Synthetic lognormal halo and galaxy boxes."""

from __future__ import annotations

import numpy as np
import pytest

from conecheck.box import (
    default_hod_model,
    hod_number_density,
    make_synthetic_box,
    make_synthetic_halos,
)
from conecheck.box.lognormal import default_grid, measure_power
from conecheck.box.massfunction import HaloMassFunction
from conecheck.box.power import LinearPower
from conecheck.cosmology import Cosmology
from conecheck.errors import InputError

COSMO = Cosmology(omega_m=0.31, h=0.68)
S8, NS, OB = 0.81, 0.965, 0.049


@pytest.fixture(scope="module")
def box():
    return make_synthetic_box(220.0, 0.2, COSMO, S8, NS, OB, default_hod_model(),
                              np.random.default_rng(42), grid=64)


def test_number_density_matches_hod_integral(box):
    # n = int dn/dlnM (<N_cen> + <N_sat>) dlnM over the mass range used, with the Tinker et
    # al. 2008 mass function and the Zheng et al. 2007 occupations; the error allows for the
    # compound-Poisson scatter of the count: Var N = V int dn (<N> + <N_sat>^2 + 2 <N_c><N_s>).
    model = default_hod_model()
    hmf = HaloMassFunction(LinearPower(COSMO, S8, NS, OB), 0.2)
    m_min, m_max = box.meta["MMIN"], box.meta["MMAX"]
    volume = box.box_size**3
    n_pred = hod_number_density(model, hmf, m_min, m_max)
    lnm = np.linspace(np.log(m_min), np.log(m_max), 3000)
    cen, sat = model.mean_occupations(np.exp(lnm))
    second = cen + sat + sat**2 + 2 * cen * sat
    var = volume * np.trapezoid(hmf.dn_dlnm(np.exp(lnm)) * second, lnm, axis=1)
    for j, mag in enumerate(model.mag_limits):
        n_obs = np.sum(box.abs_mag < mag)
        assert abs(n_obs - n_pred[j] * volume) < 4 * np.sqrt(var[j])
        assert n_obs / volume == pytest.approx(n_pred[j], rel=0.05)


def test_box_contents(box):
    assert box.position.min() >= 0 and box.position.max() < box.box_size
    assert np.all(np.isfinite(box.velocity))
    # linear-theory velocities at z = 0.2 are a few hundred km/s per component (common practice)
    assert 150 < box.velocity.std() < 600
    assert box.meta["GRID"] == 64 and box.redshift == 0.2
    assert 0.5 < box.is_central.mean() < 0.95


def test_halo_large_scale_bias_matches_tinker10():
    # Tinker et al. 2010 bias: on large scales the halo field has P_hh = b_eff^2 P_lin(k) + 1/n
    # (b_eff the number-weighted mean bias).  The band k < 0.07 h/Mpc holds ~380 modes: ~7 %
    # on P, ~4 % on b; the cell windows of the lognormal grid and of the count grid lower
    # the power by a few per cent more.  We allow 10 % on b.
    rng = np.random.default_rng(7)
    L, grid, z = 300.0, 64, 0.2
    halos = make_synthetic_halos(L, z, COSMO, S8, NS, OB, rng, grid=grid, m_min=2e12)
    power = LinearPower(COSMO, S8, NS, OB)
    hmf = HaloMassFunction(power, z)
    b_eff = hmf.bias(halos.mass).mean()
    counts, _ = np.histogramdd(halos.position, bins=grid, range=[(0, L)] * 3)
    delta = counts / counts.mean() - 1
    kf = 2 * np.pi / L
    edges = np.array([1.0, 4.5]) * kf
    k, p, _ = measure_power(delta, L, edges)
    b_meas = np.sqrt((p[0] - L**3 / len(halos)) / power.power(k[0], z))
    assert b_meas == pytest.approx(b_eff, rel=0.10)
    # and high-mass halos are more clustered than low-mass ones (Tinker et al. 2010)
    heavy = halos.mass > np.median(halos.mass)
    for sel in (heavy, ~heavy):
        c, _ = np.histogramdd(halos.position[sel], bins=grid, range=[(0, L)] * 3)
        _, ps, _ = measure_power(c / c.mean() - 1, L, edges)
        if sel is heavy:
            p_heavy = ps[0] - L**3 / sel.sum()
        else:
            p_light = ps[0] - L**3 / sel.sum()
    assert p_heavy > p_light


def test_secondary_property_tracks_environment():
    rng = np.random.default_rng(3)
    halos = make_synthetic_halos(200.0, 0.3, COSMO, S8, NS, OB, rng, grid=48, m_min=3e11,
                                 secondary_corr=0.8)
    assert np.array_equal(halos.properties["secondary"], halos.concentration)
    assert halos.rvir is not None and np.all(halos.rvir > 0)


def test_reproducible_from_seed():
    a = make_synthetic_box(120.0, 0.1, COSMO, S8, NS, OB, default_hod_model(),
                           np.random.default_rng(5), grid=32)
    b = make_synthetic_box(120.0, 0.1, COSMO, S8, NS, OB, default_hod_model(),
                           np.random.default_rng(5), grid=32)
    assert len(a) == len(b) and np.array_equal(a.position, b.position)


@pytest.mark.parametrize("size,grid,match", [
    (50.0, 128, "too small"),     # cells of 0.39 Mpc/h
    (200.0, 63, "even"),
    (200.0, 4, "even"),
])
def test_bad_grid_is_input_error(size, grid, match):
    with pytest.raises(InputError, match=match):
        make_synthetic_halos(size, 0.2, COSMO, S8, NS, OB, np.random.default_rng(0), grid=grid)


def test_default_grid_even_and_about_two_mpc():
    for size in (100.0, 150.0, 500.0, 2000.0):
        g = default_grid(size)
        assert g % 2 == 0 and g <= 256
    assert 1.5 < 500.0 / default_grid(500.0) < 2.5
