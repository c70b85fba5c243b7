"""Linear matter power spectrum: Eisenstein & Hu no-wiggle transfer function, σ₈ normalised.

P(k, z) = A k^{n_s} T²(k) D²(z), with T the "no-wiggle" fit of Eisenstein & Hu 1998
(ApJ 496, 605, eqs. 26 and 28–31): the zero-baryon shape with the baryon suppression of
the effective shape parameter Γ_eff(k), but without acoustic oscillations.  The amplitude
A is fixed so that the r.m.s. of the linear density in top-hat spheres of radius
8 Mpc/h at z = 0 equals σ₈; D(z) is :meth:`conecheck.cosmology.Cosmology.growth_factor`
(D(0) = 1).

Units: k in h/Mpc, P in (Mpc/h)³, radii in Mpc/h, masses in Msun/h.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..cosmology import Cosmology
from ..errors import InputError
from .units import mean_matter_density

#: CMB temperature today in K (Fixsen 2009, ApJ 707, 916).
T_CMB = 2.7255
#: log-k grid used for every σ(R) integral: wide enough that the top-hat window
#: converges for 0.05 < R < 100 Mpc/h to better than 1e-5.
_LNK = np.linspace(np.log(1e-5), np.log(2e3), 4000)


def tophat_window(x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Fourier transform of a spherical top-hat, W(x) = 3 (sin x − x cos x) / x³."""
    x = np.asarray(x, dtype=float)
    small = x < 1e-3
    xs = np.where(small, 1.0, x)
    w = 3.0 * (np.sin(xs) - xs * np.cos(xs)) / xs**3
    return np.where(small, 1.0 - x**2 / 10.0, w)


@dataclass(frozen=True)
class LinearPower:
    """σ₈-normalised linear power spectrum with the EH98 no-wiggle transfer function.

    Parameters
    ----------
    cosmology : Cosmology
        Background (Ω_m, h; the growth factor comes from it).
    sigma8 : float
        r.m.s. linear density in 8 Mpc/h top-hat spheres at z = 0.
    n_s : float
        Primordial spectral index.
    omega_b : float
        Baryon density today Ω_b (must satisfy 0 ≤ Ω_b < Ω_m).
    t_cmb : float
        CMB temperature in K.
    """

    cosmology: Cosmology
    sigma8: float = 0.81
    n_s: float = 0.965
    omega_b: float = 0.049
    t_cmb: float = T_CMB
    _amplitude: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        problems = []
        if not (np.isfinite(self.sigma8) and 0.1 <= self.sigma8 <= 3.0):
            problems.append(f"sigma8 = {self.sigma8!r}: expected a value in [0.1, 3]")
        if not (np.isfinite(self.n_s) and 0.5 <= self.n_s <= 1.5):
            problems.append(f"n_s = {self.n_s!r}: expected a value in [0.5, 1.5]")
        if not (np.isfinite(self.omega_b) and 0.0 <= self.omega_b < self.cosmology.omega_m):
            problems.append(f"omega_b = {self.omega_b!r}: expected 0 <= omega_b < omega_m "
                            f"= {self.cosmology.omega_m}")
        if problems:
            raise InputError("; ".join(problems), problems)
        object.__setattr__(self, "_amplitude", 1.0)
        s8_unit = float(self.sigma_r(8.0))
        object.__setattr__(self, "_amplitude", (self.sigma8 / s8_unit) ** 2)

    # --------------------------------------------------------------- transfer
    def transfer(self, k: ArrayLike) -> NDArray[np.float64]:
        """EH98 no-wiggle transfer function T(k), k in h/Mpc (T → 1 as k → 0)."""
        k = np.asarray(k, dtype=float)
        h = self.cosmology.h
        om_h2 = self.cosmology.omega_m * h**2
        ob_h2 = self.omega_b * h**2
        f_b = self.omega_b / self.cosmology.omega_m
        theta = self.t_cmb / 2.7
        # eq. 26: approximate sound horizon in Mpc (not Mpc/h)
        s = 44.5 * np.log(9.83 / om_h2) / np.sqrt(1.0 + 10.0 * ob_h2**0.75)
        # eq. 31
        alpha_g = (1.0 - 0.328 * np.log(431.0 * om_h2) * f_b
                   + 0.38 * np.log(22.3 * om_h2) * f_b**2)
        k_mpc = k * h
        gamma_eff = self.cosmology.omega_m * h * (
            alpha_g + (1.0 - alpha_g) / (1.0 + (0.43 * k_mpc * s) ** 4))   # eq. 30
        q = k * theta**2 / gamma_eff                                         # eq. 28
        l0 = np.log(2.0 * np.e + 1.8 * q)                                    # eq. 29
        c0 = 14.2 + 731.0 / (1.0 + 62.5 * q)
        return l0 / (l0 + c0 * q**2)

    # ------------------------------------------------------------------ power
    def power(self, k: ArrayLike, z: float = 0.0) -> NDArray[np.float64]:
        """Linear P(k, z) in (Mpc/h)³ for k in h/Mpc; P = 0 at k = 0."""
        k = np.asarray(k, dtype=float)
        growth = float(self.cosmology.growth_factor(z)) if z else 1.0
        kk = np.where(k > 0, k, 1.0)
        p = self._amplitude * kk**self.n_s * self.transfer(kk) ** 2 * growth**2
        return np.where(k > 0, p, 0.0)

    def sigma_r(self, radius: ArrayLike, z: float = 0.0) -> NDArray[np.float64]:
        """r.m.s. linear density in top-hat spheres of radius R [Mpc/h] at redshift z.

        σ²(R) = ∫ dln k  k³ P(k) W²(kR) / (2π²), by the trapezoid rule on a dense log-k grid.
        """
        r = np.atleast_1d(np.asarray(radius, dtype=float))
        k = np.exp(_LNK)
        integrand = k**3 * self.power(k, z)[None, :] * tophat_window(k[None, :] * r[:, None]) ** 2
        var = np.trapezoid(integrand, _LNK, axis=1) / (2.0 * np.pi**2)
        out = np.sqrt(var)
        return out.reshape(np.shape(radius)) if np.ndim(radius) else out[0]

    def lagrangian_radius(self, mass: ArrayLike) -> NDArray[np.float64]:
        """Radius [Mpc/h] of the sphere holding mass M [Msun/h] at the mean density."""
        rho = mean_matter_density(self.cosmology.omega_m)
        return np.cbrt(3.0 * np.asarray(mass, dtype=float) / (4.0 * np.pi * rho))

    def sigma_m(self, mass: ArrayLike, z: float = 0.0) -> NDArray[np.float64]:
        """σ(M, z): r.m.s. linear density in spheres of mass M [Msun/h]."""
        return self.sigma_r(self.lagrangian_radius(mass), z)
