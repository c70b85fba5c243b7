"""NFW satellite profiles: radii, concentrations, radial sampling and virial velocities.

* Profile: Navarro, Frenk & White 1997 (ApJ 490, 493), ρ ∝ 1/[x (1+x)²] with x = r/r_s,
  truncated at the virial radius r_vir = c r_s.  Enclosed mass m(x) = ln(1+x) − x/(1+x).
* Halo definition: 200 × the mean matter density (Δ = 200m, :data:`~.units.DELTA_HALO`),
  so r_vir (comoving) = [3M / (4π · 200 · ρ̄_m)]^{1/3} with ρ̄_m the comoving mean
  matter density; the physical radius is r_vir / (1+z).
* Concentration when none is given: Duffy et al. 2008 (MNRAS 390, L64), Table 1,
  NFW "full" sample (0 < z < 2), Δ = 200m: c = 10.14 (M / 2×10¹² Msun/h)^{−0.081} (1+z)^{−1.01}.
* Radial sampling inverts the enclosed-mass CDF exactly with the Lambert W function:
  m(x) = y  ⇔  x = −1 / W₀(−e^{−1−y}) − 1 (fully vectorised, no grid).
* Satellite velocities: host velocity + isotropic Gaussian with 1-D dispersion
  σ = √(G M / (2 R_vir,phys)), the singular-isothermal-sphere value V_vir/√2.

Units: masses Msun/h, radii comoving Mpc/h, velocities km/s.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import lambertw

from .units import DELTA_HALO, G_NEWTON, mean_matter_density

#: Duffy et al. 2008 Table 1, NFW full sample, Δ = 200 × mean: (A, B, C) and pivot mass.
DUFFY2008_200M = (10.14, -0.081, -1.01)
DUFFY2008_PIVOT = 2.0e12


def nfw_mass_profile(x: ArrayLike) -> NDArray[np.float64]:
    """Dimensionless NFW enclosed mass m(x) = ln(1+x) − x/(1+x), x = r/r_s."""
    x = np.asarray(x, dtype=float)
    return np.log1p(x) - x / (1.0 + x)


def nfw_inverse_mass(y: ArrayLike) -> NDArray[np.float64]:
    """Inverse of :func:`nfw_mass_profile`: the x with m(x) = y (y ≥ 0)."""
    y = np.asarray(y, dtype=float)
    w = lambertw(-np.exp(-1.0 - y), 0).real
    # Near the centre W₀ sits on its branch point and loses digits; there invert the series
    # m(x) = x²/2 − 2x³/3 + …, i.e. x = s + 2s²/3 with s = √(2y).
    small = y < 1e-8
    s = np.sqrt(2.0 * np.where(small, y, 0.0))
    return np.where(small, s + 2.0 * s**2 / 3.0, -1.0 / np.where(small, -0.5, w) - 1.0)


def concentration_power_law(mass: ArrayLike, redshift: float) -> NDArray[np.float64]:
    """c(M, z) = A (M/M_pivot)^B (1+z)^C for Δ = 200m; M in Msun/h.

    Parameters from Duffy et al. 2008, MNRAS 390, L64 (their full-sample Δ = 200m fit).
    """
    a, b, c = DUFFY2008_200M
    return a * (np.asarray(mass, dtype=float) / DUFFY2008_PIVOT) ** b * (1.0 + redshift) ** c


def virial_radius(mass: ArrayLike, omega_m: float) -> NDArray[np.float64]:
    """Comoving radius [Mpc/h] enclosing 200 × the mean matter density for mass M [Msun/h]."""
    rho = DELTA_HALO * mean_matter_density(omega_m)
    return np.cbrt(3.0 * np.asarray(mass, dtype=float) / (4.0 * np.pi * rho))


def virial_dispersion(mass: ArrayLike, rvir_comoving: ArrayLike,
                      redshift: float) -> NDArray[np.float64]:
    """1-D velocity dispersion σ = √(G M / (2 R_phys)) in km/s.

    Parameters
    ----------
    mass : array
        Halo mass, Msun/h.
    rvir_comoving : array
        Comoving virial radius, Mpc/h (R_phys = R / (1+z)).
    redshift : float
        Snapshot redshift.
    """
    r_phys = np.asarray(rvir_comoving, dtype=float) / (1.0 + redshift)
    return np.sqrt(G_NEWTON * np.asarray(mass, dtype=float) / (2.0 * r_phys))


def sample_nfw_radii(concentration: NDArray[np.float64],
                     rng: np.random.Generator) -> NDArray[np.float64]:
    """Draw r / r_vir for one satellite per entry of ``concentration`` (truncated NFW)."""
    c = np.asarray(concentration, dtype=float)
    return nfw_radii(c, rng.random(c.shape))


def nfw_radii(concentration: NDArray[np.float64],
              u: NDArray[np.float64]) -> NDArray[np.float64]:
    """r / r_vir of a truncated NFW profile at the enclosed-mass quantiles ``u`` ∈ [0, 1)
    (inverse-CDF sampling: uniform ``u`` give NFW-distributed radii)."""
    c = np.asarray(concentration, dtype=float)
    y = np.asarray(u, dtype=float) * nfw_mass_profile(c)
    return np.minimum(nfw_inverse_mass(y) / c, 1.0)


def isotropic_directions(n: int, rng: np.random.Generator) -> NDArray[np.float64]:
    """n unit vectors uniform on the sphere, shape (n, 3)."""
    return directions_from_uniforms(rng.random(n), rng.random(n))


def directions_from_uniforms(u_mu: NDArray[np.float64],
                             u_phi: NDArray[np.float64]) -> NDArray[np.float64]:
    """Unit vectors, shape (n, 3), from two uniforms in [0, 1) each: cos θ = 2 u_mu − 1 and
    φ = 2π u_phi (uniform on the sphere for uniform inputs)."""
    # −1 + 2u and 2πu are exactly what Generator.uniform(−1, 1) and (0, 2π) compute
    mu = -1.0 + 2.0 * np.asarray(u_mu, dtype=float)
    phi = 2.0 * np.pi * np.asarray(u_phi, dtype=float)
    s = np.sqrt(1.0 - mu**2)
    return np.column_stack([s * np.cos(phi), s * np.sin(phi), mu])
