"""Background cosmology in the units the whole pipeline shares.

Distances are comoving, in Mpc/h; H(z) is in km/s/(Mpc/h), i.e. H(z) = 100 E(z).
Radiation is neglected (docs/design.md §3).  Magnitudes use the M − 5 log10 h
convention, so distance moduli are computed from D_L in Mpc/h and do not need h.

Comoving distance is tabulated once per :class:`Cosmology` on a dense redshift grid
with Gauss–Legendre quadrature on every interval and interpolated with a cubic
spline; the inverse z(χ) uses a spline of the same table.  Both are accurate to far
better than 1e-6 over 0 ≤ z ≤ ``z_max_table``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numba
import numpy as np
from numba import prange
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import CubicSpline

from .errors import InputError

#: Speed of light in km/s.
C_KMS = 299792.458
#: Hubble distance c / (100 km/s/Mpc) in Mpc/h.
HUBBLE_DISTANCE = C_KMS / 100.0
#: Square degrees in one steradian.
DEG2_PER_SR = (180.0 / np.pi) ** 2
#: Full sky in square degrees (4π sr).
FULL_SKY_DEG2 = 4.0 * np.pi * DEG2_PER_SR

_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(12)

#: Look-up bins per knot of :class:`TabulatedCubic`'s first guess of the interval.
_GUESS_BINS_PER_KNOT = 4


@numba.njit(cache=True)
def _interval(knots, guess, lo, scale, v):
    """The piece of ``v`` as scipy's PPoly picks it: i with knots[i] ≤ v < knots[i + 1],
    the last piece closed and the end pieces extended beyond the table."""
    b = (v - lo) * scale
    # the table's guess, then a step or two to the exact interval (a guess from the
    # arithmetic alone can fall on the wrong side of a knot by rounding); the bin is
    # clipped as a float, since a conversion of a value beyond int64 is undefined
    i = guess[np.int64(min(max(b, 0.0), guess.size - 1))] if b == b else 0
    last = knots.size - 2
    while i < last and knots[i + 1] <= v:
        i += 1
    while i > 0 and knots[i] > v:
        i -= 1
    return i


@numba.njit(parallel=True, cache=True)
def _intervals(knots, guess, lo, scale, values):
    out = np.empty(values.size, dtype=np.int64)
    for p in prange(values.size):
        out[p] = _interval(knots, guess, lo, scale, values[p])
    return out


@numba.njit(parallel=True, cache=True)
def _cubic_at(knots, coef, guess, lo, scale, values, out):
    """Cubic pieces ``coef`` (4, n − 1) on ``knots`` (n,) at ``values``, as scipy's PPoly:
    the piece of :func:`_interval`, and c₃ + c₂ s + c₁ s² + c₀ s³ summed in that order with
    the powers of s = v − knots[i] built up by products, as scipy 1.17 sums them."""
    for p in prange(values.size):
        v = values[p]
        if v != v:
            out[p] = np.nan
            continue
        i = _interval(knots, guess, lo, scale, v)
        s = v - knots[i]
        z = s
        res = coef[3, i] + coef[2, i] * z
        z *= s
        res = res + coef[1, i] * z
        z *= s
        out[p] = res + coef[0, i] * z


class TabulatedCubic:
    """A scipy ``CubicSpline`` evaluated on numba's threads, with the same values.

    scipy finds each value's interval by a binary search, which for 10⁶ values in random
    order costs about five times the polynomial itself; here a look-up table of
    :data:`_GUESS_BINS_PER_KNOT` bins per knot gives the interval in a step or two.
    The arithmetic is scipy's (:func:`_cubic_at`): with scipy 1.17 the values agree bit for
    bit; the test allows a few rounding errors for another version's order of operations.

    Parameters
    ----------
    spline : scipy.interpolate.CubicSpline
        A spline of one variable on strictly increasing knots.
    """

    def __init__(self, spline: CubicSpline) -> None:
        self.spline = spline
        self.knots = np.ascontiguousarray(spline.x, dtype=np.float64)
        self.coef = np.ascontiguousarray(spline.c, dtype=np.float64)
        n_bins = _GUESS_BINS_PER_KNOT * len(self.knots)
        self.lo = float(self.knots[0])
        self.scale = n_bins / float(self.knots[-1] - self.knots[0])
        edges = self.lo + np.arange(n_bins) / self.scale
        self.guess = np.clip(np.searchsorted(self.knots, edges, side="right") - 1, 0,
                             len(self.knots) - 2).astype(np.int64)

    def intervals(self, x: ArrayLike) -> NDArray[np.int64]:
        """The piece each of ``x`` (flattened) is evaluated on: i with knots[i] ≤ x <
        knots[i + 1], the last piece closed, the end pieces extended beyond the knots."""
        v = np.ascontiguousarray(x, dtype=np.float64).reshape(-1)
        return _intervals(self.knots, self.guess, self.lo, self.scale, v)

    def __call__(self, x: ArrayLike) -> NDArray[np.float64]:
        """The spline at ``x`` (any shape), as ``spline(x)``."""
        v = np.asarray(x, dtype=np.float64)
        out = np.empty(v.shape)
        _cubic_at(self.knots, self.coef, self.guess, self.lo, self.scale,
                  np.ascontiguousarray(v).reshape(-1), out.reshape(-1))
        return out


@dataclass(frozen=True)
class Cosmology:
    """ΛCDM background (flat by default).

    Parameters
    ----------
    omega_m : float
        Matter density today, Ω_m (dimensionless).
    omega_k : float, optional
        Curvature density today, Ω_k; Ω_Λ = 1 − Ω_m − Ω_k.
    h : float, optional
        H0 / (100 km/s/Mpc); only used to convert to h-full units when asked.
    z_max_table : float, optional
        Largest redshift the distance tables cover.
    """

    omega_m: float = 0.31
    omega_k: float = 0.0
    h: float = 0.68
    z_max_table: float = 10.0
    _z: NDArray[np.float64] = field(init=False, repr=False, compare=False)
    _chi_spline: TabulatedCubic = field(init=False, repr=False, compare=False)
    _z_spline: TabulatedCubic = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        problems = []
        if not (0.0 < self.omega_m <= 2.0):
            problems.append(f"omega_m = {self.omega_m!r}: expected 0 < omega_m <= 2")
        if not (-1.0 < self.omega_k < 1.0):
            problems.append(f"omega_k = {self.omega_k!r}: expected -1 < omega_k < 1")
        if not (0.1 < self.h < 2.0):
            problems.append(f"h = {self.h!r}: expected 0.1 < h < 2 (H0 / 100 km/s/Mpc)")
        if not (0.0 < self.z_max_table <= 100.0):
            problems.append(f"z_max_table = {self.z_max_table!r}: expected 0 < z <= 100")
        if problems:
            raise InputError("; ".join(problems), problems)
        z = np.concatenate([np.linspace(0.0, 1.0, 4001)[:-1],
                            np.linspace(1.0, self.z_max_table, 4000)])
        a, b = z[:-1], z[1:]
        mid, half = 0.5 * (a + b), 0.5 * (b - a)
        nodes = mid[:, None] + half[:, None] * _GL_NODES[None, :]
        piece = half * np.sum(_GL_WEIGHTS[None, :] / self.efunc(nodes), axis=1)
        chi = HUBBLE_DISTANCE * np.concatenate([[0.0], np.cumsum(piece)])
        object.__setattr__(self, "_z", z)
        object.__setattr__(self, "_chi_spline", TabulatedCubic(CubicSpline(z, chi)))
        object.__setattr__(self, "_z_spline", TabulatedCubic(CubicSpline(chi, z)))

    # ------------------------------------------------------------------ basics
    @classmethod
    def from_astropy(cls, cosmo: Any) -> Cosmology:
        """The Ω_m, Ω_k and h of an astropy cosmology (radiation and neutrinos left out).

        Parameters
        ----------
        cosmo : astropy.cosmology.Cosmology
            Any astropy FLRW cosmology, e.g. ``astropy.cosmology.Planck18``.
        """
        return cls(omega_m=float(cosmo.Om0), omega_k=float(cosmo.Ok0),
                   h=float(cosmo.H0.to_value("km / (Mpc s)")) / 100.0)

    @property
    def omega_lambda(self) -> float:
        """Dark-energy density today, Ω_Λ = 1 − Ω_m − Ω_k."""
        return 1.0 - self.omega_m - self.omega_k

    def efunc(self, z: ArrayLike) -> NDArray[np.float64]:
        """Dimensionless expansion rate E(z) = H(z)/H0."""
        zp1 = 1.0 + np.asarray(z, dtype=float)
        return np.sqrt(self.omega_m * zp1**3 + self.omega_k * zp1**2 + self.omega_lambda)

    def hubble(self, z: ArrayLike) -> NDArray[np.float64]:
        """Hubble rate H(z) in km/s/(Mpc/h)."""
        return 100.0 * self.efunc(z)

    def omega_m_z(self, z: ArrayLike) -> NDArray[np.float64]:
        """Matter density parameter Ω_m(z)."""
        zp1 = 1.0 + np.asarray(z, dtype=float)
        return self.omega_m * zp1**3 / self.efunc(z) ** 2

    # --------------------------------------------------------------- distances
    def _check_z(self, z: NDArray[np.float64], name: str = "z") -> None:
        if z.size and (not np.all(np.isfinite(z)) or z.min() < 0.0 or z.max() > self.z_max_table):
            raise InputError(
                f"{name} outside the supported range 0 <= z <= {self.z_max_table} "
                f"(got min {np.nanmin(z):.4g}, max {np.nanmax(z):.4g})")

    def comoving_distance(self, z: ArrayLike) -> NDArray[np.float64]:
        """Line-of-sight comoving distance χ(z) in Mpc/h."""
        z = np.asarray(z, dtype=float)
        self._check_z(z)
        return self._chi_spline(z)

    def redshift_at(self, chi: ArrayLike) -> NDArray[np.float64]:
        """Inverse of :meth:`comoving_distance`: redshift at comoving distance χ [Mpc/h]."""
        chi = np.asarray(chi, dtype=float)
        chi_max = float(self._chi_spline(self.z_max_table))
        if chi.size and (not np.all(np.isfinite(chi)) or chi.min() < 0.0 or chi.max() > chi_max):
            raise InputError(
                f"comoving distance outside 0 <= chi <= {chi_max:.1f} Mpc/h "
                f"(got min {np.nanmin(chi):.4g}, max {np.nanmax(chi):.4g})")
        return self._z_spline(chi)

    def transverse_comoving_distance(self, z: ArrayLike) -> NDArray[np.float64]:
        """Transverse comoving distance D_M(z) in Mpc/h (equals χ when flat)."""
        chi = self.comoving_distance(z)
        return self._dm_from_chi(chi)

    def _dm_from_chi(self, chi: NDArray[np.float64]) -> NDArray[np.float64]:
        if self.omega_k == 0.0:
            return chi
        sk = np.sqrt(abs(self.omega_k)) / HUBBLE_DISTANCE
        if self.omega_k > 0:
            return np.sinh(sk * chi) / sk
        return np.sin(sk * chi) / sk

    def luminosity_distance(self, z: ArrayLike) -> NDArray[np.float64]:
        """Luminosity distance D_L(z) = (1 + z) D_M(z) in Mpc/h."""
        z = np.asarray(z, dtype=float)
        return (1.0 + z) * self.transverse_comoving_distance(z)

    def distance_modulus(self, z: ArrayLike) -> NDArray[np.float64]:
        """Distance modulus 5 log10(D_L / (Mpc/h)) + 25, for M − 5 log10 h magnitudes."""
        z = np.asarray(z, dtype=float)
        if z.size and np.any(z <= 0):
            raise InputError("distance_modulus needs z > 0")
        return 5.0 * np.log10(self.luminosity_distance(z)) + 25.0

    def redshift_at_distance_modulus(self, mu: float) -> float:
        """Redshift at which the distance modulus equals ``mu`` (mag); inverse of above."""
        zgrid = self._z[1:]
        mugrid = self.distance_modulus(zgrid)
        if not (mugrid[0] <= mu <= mugrid[-1]):
            raise InputError(f"distance modulus {mu:.3f} outside the tabulated range "
                             f"[{mugrid[0]:.2f}, {mugrid[-1]:.2f}]")
        return float(CubicSpline(mugrid, zgrid)(mu))

    # ----------------------------------------------------------------- volumes
    def shell_volume_per_sr(self, z_min: ArrayLike, z_max: ArrayLike) -> NDArray[np.float64]:
        """Comoving volume per steradian between z_min and z_max, in (Mpc/h)³/sr."""
        return self.volume_between_distances_per_sr(self.comoving_distance(z_min),
                                                    self.comoving_distance(z_max))

    @staticmethod
    def flat_volume_per_sr(chi_min: ArrayLike, chi_max: ArrayLike) -> NDArray[np.float64]:
        """(χ_max³ − χ_min³)/3: comoving volume per steradian in flat space [(Mpc/h)³]."""
        return (np.asarray(chi_max, dtype=float) ** 3 - np.asarray(chi_min, dtype=float) ** 3) / 3.0

    def volume_between_distances_per_sr(self, chi_min: ArrayLike,
                                        chi_max: ArrayLike) -> NDArray[np.float64]:
        """Comoving volume per steradian between distances χ_min and χ_max [Mpc/h]."""
        chi_min = np.asarray(chi_min, dtype=float)
        chi_max = np.asarray(chi_max, dtype=float)
        if self.omega_k == 0.0:
            return self.flat_volume_per_sr(chi_min, chi_max)
        # ∫ D_M² dχ by Gauss–Legendre on [χ_min, χ_max]; D_M is smooth so 12 nodes suffice
        # for each call when the shell is split into pieces of ≲ 200 Mpc/h.
        n_piece = int(np.ceil(np.max(np.abs(chi_max - chi_min)) / 200.0)) + 1
        edges = chi_min[..., None] + (chi_max - chi_min)[..., None] * np.linspace(0, 1, n_piece + 1)
        a, b = edges[..., :-1], edges[..., 1:]
        mid, half = 0.5 * (a + b), 0.5 * (b - a)
        nodes = mid[..., None] + half[..., None] * _GL_NODES
        return np.sum(half * np.sum(_GL_WEIGHTS * self._dm_from_chi(nodes) ** 2, axis=-1),
                      axis=-1)

    def distance_at_volume_fraction(self, chi_min: float, chi_max: float,
                                    u: ArrayLike) -> NDArray[np.float64]:
        """χ [Mpc/h] enclosing the fraction ``u`` of the comoving volume between χ_min and χ_max.

        Maps uniform ``u`` in [0, 1) to distances uniform in comoving volume (randoms):
        flat, χ = ∛(χ_min³ + u (χ_max³ − χ_min³)); curved, the inverse of the tabulated
        ∫ D_M² dχ (2049 nodes, linear interpolation; relative error of the volume below
        10⁻⁶ for shells of a few Gpc/h).
        """
        u = np.asarray(u, dtype=float)
        if self.omega_k == 0.0:  # the inverse of flat_volume_per_sr
            return np.cbrt(chi_min**3 + u * (chi_max**3 - chi_min**3))
        grid = np.linspace(chi_min, chi_max, 2049)
        vol = np.concatenate([[0.0], self.volume_between_distances_per_sr(
            np.full(grid.size - 1, chi_min), grid[1:])])
        return np.interp(u * vol[-1], vol, grid)

    def shell_volume(self, z_min: ArrayLike, z_max: ArrayLike,
                     area_deg2: ArrayLike) -> NDArray[np.float64]:
        """Comoving volume of a shell z_min < z < z_max over ``area_deg2`` square degrees.

        Returns (Mpc/h)³.
        """
        z_min = np.asarray(z_min, dtype=float)
        z_max = np.asarray(z_max, dtype=float)
        if np.any(z_max < z_min):
            raise InputError("shell_volume: z_max must be >= z_min")
        return self.shell_volume_per_sr(z_min, z_max) * np.asarray(area_deg2) / DEG2_PER_SR

    # ------------------------------------------------------------------ growth
    def growth_factor(self, z: ArrayLike) -> NDArray[np.float64]:
        """Linear growth factor D(z), normalised to D(0) = 1.

        Uses the integral solution valid for matter + Λ + curvature,
        D(a) ∝ E(a) ∫₀ᵃ da' / (a' E(a'))³ (Heath 1977, MNRAS 179, 351).
        """
        z = np.asarray(z, dtype=float)
        return self._growth_unnormalised(z) / self._growth_unnormalised(np.zeros(()))

    def _growth_integral(self, a: NDArray[np.float64]) -> NDArray[np.float64]:
        # ∫₀ᵃ da'/(a'E)³ ; substitute a' = a t to keep quadrature on [0, 1].
        t = 0.5 * (_GL_NODES + 1.0)
        w = 0.5 * _GL_WEIGHTS
        # two panels for accuracy near t→0 where the integrand ~ a'^{3/2}
        tt = np.concatenate([0.5 * t, 0.5 + 0.5 * t])
        ww = np.concatenate([0.5 * w, 0.5 * w])
        ap = a[..., None] * tt
        e = self.efunc(1.0 / ap - 1.0)
        return a * np.sum(ww / (ap * e) ** 3, axis=-1)

    def _growth_unnormalised(self, z: NDArray[np.float64]) -> NDArray[np.float64]:
        a = 1.0 / (1.0 + z)
        return self.efunc(z) * self._growth_integral(np.asarray(a))

    def growth_rate(self, z: ArrayLike) -> NDArray[np.float64]:
        """Linear growth rate f(z) = d ln D / d ln a (dimensionless)."""
        z = np.asarray(z, dtype=float)
        a = 1.0 / (1.0 + z)
        e2 = self.efunc(z) ** 2
        dlne_dlna = (-3.0 * self.omega_m * a**-3 - 2.0 * self.omega_k * a**-2) / (2.0 * e2)
        return dlne_dlna + 1.0 / (a**2 * self.efunc(z) ** 3 * self._growth_integral(a))
