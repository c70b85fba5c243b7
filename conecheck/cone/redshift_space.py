"""Observed redshifts: radial peculiar velocities and redshift-measurement errors.

The observed redshift composes the cosmological and Doppler redshifts,

    1 + z_obs = (1 + z_cos)(1 + v_los / c),

with v_los = v · r̂ along the full radial line of sight (the first-order Doppler factor
common practice in mock catalogues); a redshift error adds (1 + z_cos) σ_v / c · N(0, 1)
or σ_z0 (1 + z_cos) · N(0, 1).  The analyst's distance is χ_obs = χ(z_obs) in the
fiducial cosmology.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..cosmology import C_KMS, HUBBLE_DISTANCE, Cosmology
from .settings import RedshiftErrorSettings


def line_of_sight_velocity(velocity: NDArray[np.float64],
                           r: NDArray[np.float64]) -> NDArray[np.float64]:
    """v · r̂ [km/s] for velocities (N, 3) [km/s] and position vectors r (N, 3) [Mpc/h].

    Both must be in the same frame (the dot product is rotation invariant, so box-frame
    velocities go with box-frame separations x + nL − o).
    """
    chi = np.sqrt(np.einsum("ij,ij->i", r, r))
    return np.einsum("ij,ij->i", velocity, r) / np.maximum(chi, 1e-300)


def doppler_redshift(z_cos: ArrayLike, v_los: ArrayLike) -> NDArray[np.float64]:
    """z_obs = (1 + z_cos)(1 + v_los / c) − 1 with v_los in km/s."""
    z_cos = np.asarray(z_cos, dtype=np.float64)
    return (1.0 + z_cos) * (1.0 + np.asarray(v_los, dtype=np.float64) / C_KMS) - 1.0


def add_redshift_errors(z_obs: NDArray[np.float64], z_cos: NDArray[np.float64],
                        settings: RedshiftErrorSettings,
                        rng: np.random.Generator) -> NDArray[np.float64]:
    """Return z_obs plus a Gaussian error of width ``settings.sigma_z(z_cos)``."""
    sigma = settings.sigma_z(np.asarray(z_cos, dtype=np.float64))
    if np.all(sigma == 0):
        return np.asarray(z_obs, dtype=np.float64).copy()
    return z_obs + sigma * rng.standard_normal(len(z_obs))


def redshift_margin(max_speed_kms: float, z_max: float, settings: RedshiftErrorSettings | None,
                    cosmology: Cosmology, n_sigma: float = 5.0) -> float:
    """Comoving distance [Mpc/h] by which RSD and errors can move a galaxy at z_max.

    Δz = (1 + z_max)(v_max + n_sigma σ_v) / c (σ_v from the error model at z_max), turned
    into distance with the largest dχ/dz = c / H(z) over any z ≥ 0, namely c / H0, so the
    same margin also covers the shell's inner edge.
    """
    dz = (1.0 + z_max) * max_speed_kms / C_KMS
    if settings is not None:
        dz += n_sigma * float(settings.sigma_z(z_max))
    return float(dz * HUBBLE_DISTANCE / float(np.min(cosmology.efunc([0.0, z_max]))))
