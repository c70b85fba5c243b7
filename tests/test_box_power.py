"""Linear power spectrum, mass function, bias, and the Gaussian/lognormal grid fields."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
from scipy import integrate, ndimage, stats
from scipy.optimize import brentq

from conecheck.box.lognormal import (
    cic_interpolate,
    expected_variance,
    gaussian_field_k,
    k_magnitude,
    linear_velocity,
    lognormal_filter,
    measure_power,
    mode_weights,
    power_amplitude,
    to_real,
    white_noise_k,
)
from conecheck.box.massfunction import DELTA_C, HaloMassFunction, tinker10_bias
from conecheck.box.power import LinearPower
from conecheck.cosmology import Cosmology


@pytest.fixture(scope="module")
def power():
    return LinearPower(Cosmology(omega_m=0.31, h=0.68), sigma8=0.81, n_s=0.965, omega_b=0.049)


def test_sigma8_matches_configured_value(power):
    # independent numerical integral (scipy.integrate.quad) of
    # sigma^2(R) = 1/(2 pi^2) int k^2 P(k) W^2(kR) dk, W = 3 (sin x - x cos x)/x^3 (top hat)
    def integrand(lnk):
        k = np.exp(lnk)
        x = 8.0 * k
        w = 3 * (np.sin(x) - x * np.cos(x)) / x**3
        return k**3 * power.power(k) * w**2 / (2 * np.pi**2)

    var, _ = integrate.quad(integrand, np.log(1e-6), np.log(1e3), limit=1000)
    assert np.sqrt(var) == pytest.approx(0.81, rel=1e-4)


def test_power_grows_with_growth_factor(power):
    d = float(Cosmology(omega_m=0.31, h=0.68).growth_factor(0.5))
    assert power.power(0.1, 0.5) / power.power(0.1) == pytest.approx(d**2, rel=1e-10)


def test_eh98_nowiggle_limits_and_gamma_scaling():
    # Eisenstein & Hu 1998 (ApJ 496, 605) eq. 29: T -> 1 as k -> 0.  Without baryons the
    # no-wiggle form depends on k only through q = k Theta^2 / Gamma, Gamma = Omega_m h
    # (the classic shape-parameter scaling, also of BBKS 1986).
    a = LinearPower(Cosmology(omega_m=0.30, h=0.70), omega_b=0.0)
    b = LinearPower(Cosmology(omega_m=0.25, h=0.84), omega_b=0.0)   # same Gamma = 0.21
    k = np.logspace(-3, 1, 30)
    assert a.transfer(1e-6) == pytest.approx(1.0, abs=1e-4)
    assert np.all(np.diff(a.transfer(k)) < 0)
    assert np.allclose(a.transfer(k), b.transfer(k), rtol=1e-12)
    # baryons suppress small-scale power (EH98 eq. 31, alpha_Gamma < 1)
    c = LinearPower(Cosmology(omega_m=0.30, h=0.70), omega_b=0.05)
    assert np.all(c.transfer(k[k > 0.1]) < a.transfer(k[k > 0.1]))


def test_zero_baryon_shape_close_to_bbks():
    # Bardeen, Bond, Kaiser & Szalay 1986 (ApJ 304, 15) eq. G3 fit (formula from memory),
    # q = k / Gamma: an independent fit that agrees with EH98 to a few per cent for
    # 0.01 < k < 1 h/Mpc (EH98 include the CMB-temperature factor Theta^2 ~ 1.04).
    p = LinearPower(Cosmology(omega_m=0.3, h=0.7), omega_b=0.0)
    k = np.logspace(-2, 0, 20)
    q = k / (0.3 * 0.7)
    bbks = (np.log(1 + 2.34 * q) / (2.34 * q)
            * (1 + 3.89 * q + (16.1 * q) ** 2 + (5.46 * q) ** 3 + (6.71 * q) ** 4) ** -0.25)
    assert np.allclose(p.transfer(k), bbks, rtol=0.08)


def test_tinker08_abundance_plausible():
    # Tinker et al. 2008 (ApJ 688, 709), Delta = 200m, for Omega_m = 0.3, sigma8 = 0.8:
    # n(> 1e14 Msun/h, z = 0) is a few 1e-5 (h/Mpc)^3 -- an order-of-magnitude value from
    # memory of cluster-abundance plots, hence the wide bracket.
    p = LinearPower(Cosmology(omega_m=0.3, h=0.7), sigma8=0.8, n_s=1.0, omega_b=0.045)
    hmf = HaloMassFunction(p, 0.0)
    n14 = hmf.number_density(1e14)
    assert 1.5e-5 < n14 < 5e-5
    # abundances fall with redshift at fixed mass
    assert HaloMassFunction(p, 1.0).number_density(1e14) < 0.2 * n14


def test_tinker10_bias_near_one_at_mstar(power):
    # Tinker et al. 2010 (ApJ 724, 878): b(nu = 1) ~ 1 (halos of the nonlinear mass M* trace
    # the matter); b rises steeply above M* and is below 1 well below it.
    assert tinker10_bias(1.0) == pytest.approx(1.0, abs=0.06)
    hmf = HaloMassFunction(power, 0.0)
    mstar = np.exp(brentq(lambda lm: hmf.sigma(np.exp(lm)) - DELTA_C, np.log(1e10),
                          np.log(1e15)))
    assert hmf.bias(mstar) == pytest.approx(1.0, abs=0.06)
    assert hmf.bias(1e11) < 0.9 and hmf.bias(1e15) > 3.0


# --------------------------------------------------------------- grid fields
L, N = 256.0, 64


@pytest.fixture(scope="module")
def gaussian(power):
    rng = np.random.default_rng(17)
    fk = gaussian_field_k(N, L, power.power, rng)
    return fk, to_real(fk, N)


def test_gaussian_field_power_matches_input(power, gaussian):
    # measured P(k) within cosmic variance: sigma_P / P = 1 / sqrt(n_independent),
    # n_independent = n_modes / 2 (Gaussian field, e.g. Feldman, Kaiser & Peacock 1994)
    _, field = gaussian
    kf = 2 * np.pi / L
    edges = np.arange(1.5, N / 2 * 0.9, 2.0) * kf
    k, p, n = measure_power(field, L, edges)
    # the input averaged over the same modes, for an exact expectation per shell
    _, p_in, _ = _mode_average(power, edges)
    chi2 = np.sum((p / p_in - 1) ** 2 * n / 2)
    assert stats.chi2.sf(chi2, len(edges) - 1) > 1e-3, chi2


def _mode_average(power, edges):
    k = k_magnitude(N, L).astype(float)
    w = np.broadcast_to(mode_weights(N), k.shape)
    which = np.digitize(k.ravel(), edges) - 1
    ok = (which >= 0) & (which < len(edges) - 1)
    nm = np.bincount(which[ok], w.ravel()[ok], len(edges) - 1)
    pin = np.bincount(which[ok], (w * power.power(np.maximum(k, 1e-9))).ravel()[ok],
                      len(edges) - 1)
    return None, pin / nm, nm


def test_gaussian_field_variance_on_grid(power, gaussian):
    # sigma^2 = sum over grid modes of P(k) / V (Parseval); the sample variance of 64^3 cells
    # scatters by well under 2 % since most of it comes from many small-scale modes
    _, field = gaussian
    assert field.mean() == pytest.approx(0.0, abs=1e-5)
    assert field.var() == pytest.approx(expected_variance(N, L, power.power), rel=0.02)


def test_lognormal_tracer_has_b_squared_power(power):
    # Coles & Jones 1991 (MNRAS 248, 1): for a Gaussian g, exp(g)/<exp(g)> - 1 has the
    # correlation exp(C_g) - 1; choosing C_g = ln(1 + b^2 C) gives the tracer b^2 P(k).
    # (1) in expectation, exactly on the grid (only the clipped negative modes differ);
    b, radius = 2.0, 4.0
    k = k_magnitude(N, L)
    amp2 = power_amplitude(N, L, power.power) ** 2 * np.exp(-(k * radius) ** 2)
    filt, var_g = lognormal_filter(amp2, b, N)
    cov_g = scipy.fft.irfftn(filt.astype(float) ** 2, s=(N, N, N))
    assert cov_g[0, 0, 0] == pytest.approx(var_g, rel=0.01)
    p_rho = scipy.fft.rfftn(np.expm1(cov_g)).real
    band = (k > 0.02) & (k < 0.3)
    assert np.allclose(p_rho[band] / (b**2 * amp2[band]), 1.0, rtol=0.01)
    # (2) one realization of a mild tracer (lognormal power estimates are skewed, so a
    # strongly non-Gaussian case would need many realizations): mean ratio within 10 %.
    b = 1.2
    filt, _ = lognormal_filter(amp2, b, N)
    g = to_real(white_noise_k(N, np.random.default_rng(23)) * filt, N)
    rho = np.exp(g.astype(float))
    edges = np.arange(1.5, 11, 1.5) * 2 * np.pi / L
    kk, p, n = measure_power(rho / rho.mean() - 1, L, edges)
    _, p_in, _ = _mode_average(power, edges)
    ratio = np.sum(n * p / (p_in * np.exp(-(kk * radius) ** 2))) / np.sum(n) / b**2
    assert ratio == pytest.approx(1.0, abs=0.10)


def test_linear_velocity_of_a_plane_wave():
    # continuity equation in linear theory (Peebles 1980, LSS of the Universe, eq. 14.2):
    # delta = A cos(k x) -> v_x = -(a H f A / k) sin(k x)
    x = (np.arange(N) + 0.5) * L / N
    kk = 2 * np.pi * 3 / L
    delta = np.broadcast_to(0.1 * np.cos(kk * x)[:, None, None], (N, N, N)).astype(np.float32)

    v = linear_velocity(scipy.fft.rfftn(delta), L, 50.0)
    assert np.allclose(v[0, :, 0, 0], -(50.0 * 0.1 / kk) * np.sin(kk * x), atol=1e-3)
    assert np.allclose(v[1], 0, atol=1e-4) and np.allclose(v[2], 0, atol=1e-4)


def test_cic_interpolation_of_linear_and_constant_fields():
    x = (np.arange(N) + 0.5) * L / N
    f = np.empty((2, N, N, N))
    f[0] = 3.0
    f[1] = x[None, None, :]
    rng = np.random.default_rng(0)
    pos = rng.uniform(L / N, L - L / N, (1000, 3))   # away from the periodic seam
    out = cic_interpolate(f, pos, L)
    assert np.allclose(out[:, 0], 3.0)
    assert np.allclose(out[:, 1], pos[:, 2])


def test_cic_interpolation_equals_periodic_trilinear_interpolation():
    # Reference: scipy.ndimage.map_coordinates with order 1 and mode "grid-wrap" is periodic
    # trilinear interpolation of values at integer coordinates; cell centres sit at
    # coordinate x / cell − 1/2. Positions include the periodic seam and the box's edges.
    rng = np.random.default_rng(3)
    f = rng.standard_normal((2, N, N, N)).astype(np.float32)
    pos = rng.uniform(0.0, L, (2000, 3))
    pos[:50] = rng.uniform(0.0, 0.5 * L / N, (50, 3))          # below the first centre
    pos[50:100] = rng.uniform(L - 0.5 * L / N, L, (50, 3))     # beyond the last centre
    pos[100] = 0.0
    out = cic_interpolate(f, pos, L)
    coords = (pos / (L / N) - 0.5).T
    for c in range(2):
        ref = ndimage.map_coordinates(f[c].astype(np.float64), coords, order=1,
                                      mode="grid-wrap")
        np.testing.assert_allclose(out[:, c], ref, rtol=1e-12, atol=1e-12)
