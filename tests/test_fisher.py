"""The parameter shift δθ = F⁻¹ Dᵀ C⁻¹ Δ against a weighted least-squares refit.

For a linear model the Fisher shift is exact: refitting data biased by Δ with generalised
least squares (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42) moves the estimate by exactly
δθ. The reference refit here is numpy.linalg.lstsq on the whitened system.
"""

from __future__ import annotations

import numpy as np
import pytest
from compare_helpers import correlated_cov

from conecheck.compare.fisher import parameter_shift
from conecheck.errors import InputError


def _toy(seed: int = 0, p: int = 9, k: int = 3):
    rng = np.random.default_rng(seed)
    x = np.linspace(0.1, 2.0, p)
    d = np.column_stack([x ** j for j in range(k)])  # a polynomial model m = Σ θ_j x^j
    cov = correlated_cov(0.05 + 0.1 * x, 0.5)
    return rng, d, cov


def _gls(d, cov, y):
    w = np.linalg.cholesky(np.linalg.inv(cov))  # whitening: wᵀ C wᵀ... = 1
    return np.linalg.lstsq(w.T @ d, w.T @ y, rcond=None)[0]


def test_shift_equals_the_weighted_least_squares_refit():
    rng, d, cov = _toy()
    theta = np.array([1.0, -0.5, 0.3])
    y = d @ theta + np.linalg.cholesky(cov) @ rng.normal(size=len(cov))
    delta = 0.2 * rng.normal(size=len(cov))
    res = parameter_shift(d, cov, delta)
    np.testing.assert_allclose(res.shift, _gls(d, cov, y + delta) - _gls(d, cov, y),
                               rtol=1e-9, atol=1e-12)
    # forecast errors: √diag (Dᵀ C⁻¹ D)⁻¹, the GLS covariance
    np.testing.assert_allclose(res.sigma, np.sqrt(np.diag(np.linalg.inv(
        d.T @ np.linalg.solve(cov, d)))), rtol=1e-9)
    # Cauchy–Schwarz: no parameter moves by more than √χ² of the offset
    assert np.all(np.abs(res.shift_in_sigma) <= res.chi2_bound * (1 + 1e-12))
    assert res.chi2_bound == pytest.approx(np.sqrt(delta @ np.linalg.solve(cov, delta)))


def test_an_offset_along_the_model_returns_its_parameters():
    _, d, cov = _toy(1)
    dtheta = np.array([0.02, -0.01, 0.005])
    res = parameter_shift(d, cov, d @ dtheta, n_regions=40)
    np.testing.assert_allclose(res.shift, dtheta, rtol=1e-9)
    # the Hartlap factor scales F, not δθ; σ grows by 1/√h
    plain = parameter_shift(d, cov, d @ dtheta)
    h = (40 - 9 - 2) / 39
    np.testing.assert_allclose(res.sigma, plain.sigma / np.sqrt(h), rtol=1e-10)


def test_degenerate_or_mismatched_input_is_refused():
    _, d, cov = _toy(2)
    res = parameter_shift(np.column_stack([d, d[:, 0]]), cov, d[:, 0] * 0.01)
    assert res.degenerate and np.all(np.isnan(res.shift))
    # one parameter at a time: (D_jᵀ C⁻¹ Δ)/√(D_jᵀ C⁻¹ D_j) = 0.01 √(D_0ᵀ C⁻¹ D_0) here
    f00 = d[:, 0] @ np.linalg.solve(cov, d[:, 0])
    assert res.conditional_shift_in_sigma[0] == pytest.approx(0.01 * np.sqrt(f00))
    assert res.conditional_shift_in_sigma[-1] == pytest.approx(0.01 * np.sqrt(f00))
    with pytest.raises(InputError, match="zero derivative"):
        parameter_shift(np.column_stack([d, np.zeros(len(cov))]), cov, np.zeros(len(cov)))
    with pytest.raises(InputError, match="do not match"):
        parameter_shift(d, cov, np.zeros(3))
