"""NFW satellite profiles, halo radii and virial velocities."""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM
from scipy import stats
from scipy.optimize import brentq

from conecheck.box import HaloCatalog, default_hod_model, populate
from conecheck.box.nfw import (
    concentration_power_law,
    nfw_inverse_mass,
    nfw_mass_profile,
    sample_nfw_radii,
    virial_dispersion,
    virial_radius,
)

BOX, Z = 1000.0, 0.3


def nfw_m(x):
    # Navarro, Frenk & White 1997 (ApJ 490, 493): enclosed mass m(x) = ln(1+x) - x/(1+x)
    return np.log(1 + x) - x / (1 + x)


@pytest.fixture(scope="module")
def satellites():
    rng = np.random.default_rng(4)
    n = 1500
    mass = np.full(n, 2e14)
    halos = HaloCatalog(rng.uniform(0, BOX, (n, 3)), rng.normal(0, 400, (n, 3)), mass, BOX, Z,
                        concentration=np.full(n, 5.0), rvir=np.full(n, 1.3))
    box = populate(halos, default_hod_model(), rng)
    sat = ~box.is_central
    d = box.position[sat] - halos.position[box.halo_id[sat]]
    d -= BOX * np.round(d / BOX)          # minimum image
    dv = box.velocity[sat] - halos.velocity[box.halo_id[sat]]
    return np.sqrt((d**2).sum(1)), dv


def test_satellite_radii_follow_nfw_enclosed_mass(satellites):
    # KS test against the analytic NFW CDF m(c q)/m(c), q = r / r_vir (NFW 1997)
    r, _ = satellites
    assert r.size > 5000
    c, rvir = 5.0, 1.3
    res = stats.kstest(r / rvir, lambda q: nfw_m(c * np.clip(q, 0, 1)) / nfw_m(c))
    assert res.pvalue > 1e-3
    assert r.max() <= rvir * (1 + 1e-12)


def test_satellite_velocity_dispersion_is_virial(satellites):
    # sigma_1D = sqrt(G M / (2 R_phys)) with G from astropy.constants (reference library)
    _, dv = satellites
    g = const.G.to(u.Mpc * u.km**2 / u.s**2 / u.Msun).value
    sigma = np.sqrt(g * 2e14 / (2 * 1.3 / (1 + Z)))
    assert np.allclose(dv.std(axis=0), sigma, rtol=0.03)
    assert np.allclose(dv.mean(axis=0), 0, atol=0.05 * sigma)
    assert virial_dispersion(2e14, 1.3, Z) == pytest.approx(sigma, rel=1e-12)


def test_inverse_mass_profile_against_root_finding():
    # scipy brentq on the NFW 1997 enclosed-mass function as the reference
    ys = np.array([1e-10, 1e-6, 1e-3, 0.1, 0.5, 1.0, 2.0, 4.0])
    ref = np.array([brentq(lambda x, y=y: nfw_m(x) - y, 1e-12, 1e6, xtol=1e-15, rtol=1e-13)
                    for y in ys])
    assert np.allclose(nfw_inverse_mass(ys), ref, rtol=1e-6)
    assert np.allclose(nfw_mass_profile(ref), ys, rtol=1e-6)


def test_sampled_radii_ks_for_mixed_concentrations():
    rng = np.random.default_rng(8)
    c = rng.uniform(3, 15, 20_000)
    q = sample_nfw_radii(c, rng)
    # probability integral transform: F_c(q) is uniform if q ~ truncated NFW with its own c
    pit = nfw_m(c * q) / nfw_m(c)
    assert stats.kstest(pit, "uniform").pvalue > 1e-3


def test_virial_radius_against_astropy_mean_density():
    # 200 x mean matter density, from astropy.cosmology's critical density (reference library)
    h, om = 0.68, 0.31
    cosmo = FlatLambdaCDM(H0=100 * h, Om0=om)
    rho_m = (cosmo.critical_density0 * om).to(u.Msun / u.Mpc**3).value / h**2  # (Msun/h)/(Mpc/h)^3
    m = np.array([1e11, 1e13, 1e15])
    r_ref = (3 * m / (4 * np.pi * 200 * rho_m)) ** (1 / 3)
    assert np.allclose(virial_radius(m, om), r_ref, rtol=1e-3)


def test_power_law_concentration_values():
    # Duffy et al. 2008, MNRAS 390, L64, Table 1 (NFW, full sample, Delta = 200 mean):
    # A = 10.14, B = -0.081, C = -1.01, pivot 2e12 Msun/h -> c(2e12, z=0) = 10.14
    assert concentration_power_law(2e12, 0.0) == pytest.approx(10.14)
    assert concentration_power_law(2e14, 1.0) == pytest.approx(10.14 * 100**-0.081 * 2**-1.01)
