"""Synthetic Measurements for the comparison and report tests (no catalogues needed)."""

from __future__ import annotations

import numpy as np

from conecheck.stats.base import Measurement


def exact_measurement(value, cov, k: int, rng: np.random.Generator, name: str = "wp",
                      bins=None) -> Measurement:
    """A Measurement whose delete-one jackknife covariance equals ``cov`` exactly.

    Delete-one rows x_k = v + a·(q_k L^T) with Q (K × p) orthonormal, zero-mean columns, so
    (K − 1)/K Σ_k d_k d_kᵀ = L Lᵀ = cov when a = √(K/(K − 1)).
    """
    value = np.atleast_1d(np.asarray(value, dtype=float))
    cov = np.atleast_2d(np.asarray(cov, dtype=float))
    p = value.size
    a = rng.normal(size=(k, p))
    a -= a.mean(axis=0)
    q, _ = np.linalg.qr(a)
    d = np.sqrt(k / (k - 1)) * q @ np.linalg.cholesky(cov).T
    bins = np.arange(p, dtype=float) + 1.0 if bins is None else np.asarray(bins, float)
    return Measurement(name=name, bins=bins, value=value, delete_one=value + d,
                       bin_label="r_p [Mpc/h]", value_label="w_p [Mpc/h]")


def noisy_measurement(mean, cov, k: int, rng: np.random.Generator, name: str = "wp",
                      bins=None) -> Measurement:
    """A jackknife-like noisy measurement of ``mean`` with covariance ``cov``.

    The value is the mean of K region values drawn around ``mean`` with covariance K·cov, so
    the value scatters with covariance cov and the delete-one jackknife estimates cov with
    the usual Wishart noise of K − 1 degrees of freedom.
    """
    mean = np.atleast_1d(np.asarray(mean, dtype=float))
    cov = np.atleast_2d(np.asarray(cov, dtype=float))
    x = mean + rng.normal(size=(k, mean.size)) @ np.linalg.cholesky(k * cov).T
    value = x.mean(axis=0)
    delete_one = (x.sum(axis=0) - x) / (k - 1)
    bins = np.arange(mean.size, dtype=float) + 1.0 if bins is None else np.asarray(bins, float)
    return Measurement(name=name, bins=bins, value=value, delete_one=delete_one,
                       bin_label="r_p [Mpc/h]", value_label="w_p [Mpc/h]")


def correlated_cov(sigma, rho: float = 0.4):
    """Covariance with standard deviations ``sigma`` and correlation rho^|i−j|."""
    sigma = np.asarray(sigma, dtype=float)
    i = np.arange(sigma.size)
    return np.outer(sigma, sigma) * rho ** np.abs(i[:, None] - i[None, :])
