"""Halo mass function (Tinker et al. 2008) and linear halo bias (Tinker et al. 2010).

Masses are defined at 200 × the mean matter density (Δ = 200m, :data:`DELTA_HALO`).

* Mass function (Tinker et al. 2008, ApJ 688, 709, eqs. 2–3, 5–8, Table 2 row Δ = 200):
  dn/dln M = f(σ) (ρ̄_m / M) |dln σ / dln M|,
  f(σ) = A [(σ/b)^{−a} + 1] exp(−c/σ²), with A = 0.186 (1+z)^{−0.14},
  a = 1.47 (1+z)^{−0.06}, b = 2.57 (1+z)^{−α}, log10 α = −[0.75 / log10(Δ/75)]^{1.2},
  c = 1.19.
* Bias (Tinker et al. 2010, ApJ 724, 878, eq. 6 and Table 2):
  b(ν) = 1 − A ν^a / (ν^a + δ_c^a) + B ν^b + C ν^c with ν = δ_c / σ(M, z), δ_c = 1.686,
  y = log10 Δ, A = 1 + 0.24 y e^{−(4/y)^4}, a = 0.44 y − 0.88, B = 0.183, b = 1.5,
  C = 0.019 + 0.107 y + 0.19 e^{−(4/y)^4}, c = 2.4.

σ(M, z) comes from :class:`conecheck.box.power.LinearPower`.  Number densities are
comoving, in (h/Mpc)³.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from .power import LinearPower
from .units import DELTA_HALO, mean_matter_density

#: Linear critical overdensity for spherical collapse.
DELTA_C = 1.686
#: Mass range tabulated for σ(M) [log10 Msun/h].
LOG_M_RANGE = (8.0, 16.5)


def tinker08_multiplicity(sigma: ArrayLike, z: float,
                          delta: float = DELTA_HALO) -> NDArray[np.float64]:
    """Tinker et al. 2008 multiplicity function f(σ) for Δ = 200 (mean), at redshift z."""
    if delta != 200.0:
        raise InputError(f"Tinker 2008 fit implemented for Delta = 200 (mean) only, got {delta}")
    sigma = np.asarray(sigma, dtype=float)
    zp1 = 1.0 + z
    alpha = 10.0 ** (-((0.75 / np.log10(delta / 75.0)) ** 1.2))
    a_amp = 0.186 * zp1**-0.14
    a_slope = 1.47 * zp1**-0.06
    b = 2.57 * zp1**-alpha
    c = 1.19
    return a_amp * ((sigma / b) ** -a_slope + 1.0) * np.exp(-c / sigma**2)


def tinker10_bias(nu: ArrayLike, delta: float = DELTA_HALO) -> NDArray[np.float64]:
    """Tinker et al. 2010 large-scale halo bias b(ν), ν = δ_c/σ, for overdensity Δ (mean)."""
    nu = np.asarray(nu, dtype=float)
    y = np.log10(delta)
    e = np.exp(-((4.0 / y) ** 4))
    big_a = 1.0 + 0.24 * y * e
    a = 0.44 * y - 0.88
    big_b, b = 0.183, 1.5
    big_c, c = 0.019 + 0.107 * y + 0.19 * e, 2.4
    return (1.0 - big_a * nu**a / (nu**a + DELTA_C**a) + big_b * nu**b + big_c * nu**c)


@dataclass(frozen=True)
class HaloMassFunction:
    """Tinker 2008 mass function and Tinker 2010 bias at one redshift.

    Parameters
    ----------
    power : LinearPower
        Linear power spectrum (sets σ(M)).
    redshift : float
        Snapshot redshift.
    """

    power: LinearPower
    redshift: float
    _lnm: NDArray[np.float64] = field(init=False, repr=False, compare=False)
    _lnsig: NDArray[np.float64] = field(init=False, repr=False, compare=False)
    _dlnsig: NDArray[np.float64] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if not (np.isfinite(self.redshift) and 0.0 <= self.redshift <= 5.0):
            raise InputError(f"redshift = {self.redshift!r}: expected 0 <= z <= 5")
        lnm = np.linspace(*(np.log(10.0) * np.array(LOG_M_RANGE)), 600)
        lnsig = np.log(self.power.sigma_m(np.exp(lnm), self.redshift))
        object.__setattr__(self, "_lnm", lnm)
        object.__setattr__(self, "_lnsig", lnsig)
        object.__setattr__(self, "_dlnsig", np.gradient(lnsig, lnm))

    def _check_mass(self, mass: NDArray[np.float64]) -> None:
        lo, hi = 10.0 ** np.array(LOG_M_RANGE)
        if mass.size and (mass.min() < lo or mass.max() > hi):
            raise InputError(f"halo mass outside the tabulated range [{lo:.3g}, {hi:.3g}] Msun/h "
                             f"(got {mass.min():.3g} .. {mass.max():.3g})")

    def sigma(self, mass: ArrayLike) -> NDArray[np.float64]:
        """σ(M, z) for mass M [Msun/h]."""
        mass = np.asarray(mass, dtype=float)
        self._check_mass(mass)
        return np.exp(np.interp(np.log(mass), self._lnm, self._lnsig))

    def nu(self, mass: ArrayLike) -> NDArray[np.float64]:
        """Peak height ν = δ_c / σ(M, z)."""
        return DELTA_C / self.sigma(mass)

    def dn_dlnm(self, mass: ArrayLike) -> NDArray[np.float64]:
        """dn/dln M in (h/Mpc)³ at mass M [Msun/h]."""
        mass = np.asarray(mass, dtype=float)
        self._check_mass(mass)
        lnm = np.log(mass)
        sig = np.exp(np.interp(lnm, self._lnm, self._lnsig))
        dlnsig = np.interp(lnm, self._lnm, self._dlnsig)
        rho = mean_matter_density(self.power.cosmology.omega_m)
        return tinker08_multiplicity(sig, self.redshift) * rho / mass * np.abs(dlnsig)

    def bias(self, mass: ArrayLike) -> NDArray[np.float64]:
        """Tinker 2010 linear bias at mass M [Msun/h]."""
        return tinker10_bias(self.nu(mass))

    def cumulative_table(self, m_min: float, m_max: float,
                         n: int = 4000) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """ln M grid on [m_min, m_max] and n(<M) − n(<m_min) on it, (h/Mpc)³ (trapezoid rule)."""
        lnm = np.linspace(np.log(m_min), np.log(m_max), n)
        dens = self.dn_dlnm(np.exp(lnm))
        cum = np.concatenate([[0.0], np.cumsum(0.5 * (dens[1:] + dens[:-1]) * np.diff(lnm))])
        return lnm, cum

    def number_density(self, m_min: float, m_max: float = 10.0 ** LOG_M_RANGE[1]) -> float:
        """Comoving number density of halos with m_min < M < m_max, (h/Mpc)³."""
        return float(self.cumulative_table(m_min, m_max)[1][-1])
