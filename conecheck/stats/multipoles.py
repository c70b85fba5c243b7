"""Redshift-space multipoles ξ_ℓ(s) of the two-point correlation function (docs/design.md §6).

ξ(s, μ) is counted in bins of the pair separation s and of |μ|, the cosine of the angle
between the pair and the line of sight, then projected on the Legendre polynomials,

    ξ_ℓ(s) = (2ℓ + 1) Σ_j ξ(s, μ_j) ∫_{μ_j}^{μ_{j+1}} L_ℓ(μ) dμ   (even ℓ, |μ| in [0, μ_max]),

the usual binned form of ξ_ℓ = (2ℓ + 1)/2 ∫ ξ(s, μ) L_ℓ(μ) dμ (e.g. Hamilton 1992, ApJ 385,
L5). With ``mu_max`` < 1 the integral stops there (truncated multipoles, which avoid pairs
close to the line of sight where fibre collisions act); box and cones truncate alike. The data
vector is ξ_ℓ₁(s) followed by ξ_ℓ₂(s) …, each over the s bins.

Box (periodic, LOS along the box's axis): the natural estimator with analytic randoms,
ξ = DD / (N_pairs V_bin / L³) − 1 with V_bin = (4π/3)(s₂³ − s₁³)Δμ (a |μ| bin holds both
signs of μ); as for wp this *is* Landy–Szalay. Box jackknife (see :mod:`.wp` for why):

* the random-pair fraction of a bin with sub-volume C removed is exactly
  f_R = [(L³ − 2V_C) V_bin + ∫_bin d³s V(C ∩ (C − s))] / V_R². Averaged over the azimuth
  about the LOS, ∫dφ (a − ρ|cos φ|)(a − ρ|sin φ|) = 2πa² − 8aρ + 2ρ² with ρ = s√(1 − μ²),
  times L for columns of side a and times (a − s|μ|) for cubes; the remaining (s, μ) integral
  is done by Gauss–Legendre quadrature in each bin (exact in s for the s² of the volume);
* for columns the delete-one estimate is Landy–Szalay with analytic randoms in R: the random
  pairs of galaxy i are its (s, μ) shell less the part inside the removed column,
  ∫_bin d³s 1[x_i,⊥ + s_⊥ ∈ column] = ∫_bin s² ds dμ · 2π f_i(ρ), where f_i(ρ) is the fraction
  of the circle of radius ρ about the galaxy that lies inside the column's square. The sum
  Φ(ρ) = Σ_i w_i f_i(ρ) over the galaxies outside the column is computed on a grid of ρ
  (:func:`ring_weight_in_square`) and interpolated at the quadrature nodes. Cubes keep the
  natural estimator.

Cone: Landy–Szalay in (s, μ) with the line of sight at the pair midpoint (the pair engine's
:func:`~conecheck.pairs.count_smu_cone`) and the cut's RR, counted once for every cone (or
from disjoint random subsets above ``split_above``, Keihänen et al. 2019, A&A 631, A73).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numba
import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs import PairCounts, count_smu_box, count_smu_cone
from ..pairs.binning import SMuBins, check_rp_edges, make_smu_bins
from ._common import (
    check_filled,
    column_neighbourhoods,
    cone_regions,
    count_rr_split,
    landy_szalay,
    want_jackknife,
)
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import (
    RR_METHODS,
    SPLIT_ABOVE,
    check_range_bins,
    non_negative,
    positive,
    range_edges,
)
from .statistic import Cost, Display, Statistic

NAME = "multipoles"
_KEY = f"statistics.{NAME}"
_ELLS = (0, 2, 4)

#: Gauss–Legendre nodes per bin and dimension for the (s, μ) integrals of the box jackknife.
_GL_NODES = 8
#: Radii at which Φ(ρ) is computed (spaced as the square of an even grid, so small radii,
#: where Φ rises from zero, are well sampled) and directions per circle.
_N_RHO = 128
_N_THETA = 24
#: Fixed work split of the Φ sums, so they are bit-identical for any number of threads.
_N_CHUNKS = 32


@dataclass(frozen=True)
class MultipolesSettings:
    """Redshift-space multipoles ξ_ℓ(s).

    Attributes
    ----------
    s_min, s_max : float
        Range of the s bins [Mpc/h] (ignored when ``s_edges`` is given).
    n_s : int
        Number of s bins.
    s_spacing : {"log", "linear"}
        Spacing of the generated s bins.
    s_edges : tuple of float or None
        Explicit s bin edges [Mpc/h], overriding the three above.
    n_mu : int
        Number of equal |μ| bins over [0, 1] the pairs are counted in.
    mu_max : float
        Largest |μ| used (in (0, 1], a whole number of |μ| bins): below 1 the multipoles are
        truncated, leaving out the pairs closest to the line of sight.
    ells : tuple of int
        Even multipoles to measure, from 0, 2 and 4.
    rr_method : {"full", "split"}
        Cone RR from all random pairs, or, in the s bins from ``split_above`` on, only from
        pairs inside disjoint random subsets (Keihänen et al. 2019, A&A 631, A73): cheaper,
        with random noise that ξ picks up with a factor 1 − ξ, hence the full count
        at small s (benchmarks/RESULTS.md).
    split_factor : float
        Size of each random subset of the split method, in units of the data size.
    split_above : float
        The split method splits only the s bins whose lower edge is at least this [Mpc/h];
        smaller bins count every random pair (0: every bin, as Keihänen et al. do).
    """

    s_min: float = 1.0
    s_max: float = 30.0
    n_s: int = 8
    s_spacing: str = "log"
    s_edges: tuple[float, ...] | None = None
    n_mu: int = 20
    mu_max: float = 1.0
    ells: tuple[int, ...] = (0, 2)
    rr_method: str = "full"
    split_factor: float = 1.0
    split_above: float = SPLIT_ABOVE

    def __post_init__(self) -> None:
        if self.s_edges is None:
            check_range_bins(_KEY, "s", self.s_min, self.s_max, self.n_s, self.s_spacing)
        else:
            object.__setattr__(self, "s_edges", tuple(float(x) for x in check_rp_edges(
                self.s_edges, f"{_KEY}.s_edges")))
        make_smu_bins(self.edges, self.n_mu, _KEY)
        mu = self.mu_max
        if not (isinstance(mu, (int, float)) and not isinstance(mu, bool) and 0 < mu <= 1):
            raise InputError(f"{_KEY}.mu_max: expected |μ| in (0, 1], got {mu!r}")
        if abs(mu * self.n_mu - round(mu * self.n_mu)) > 1e-9:
            raise InputError(f"{_KEY}.mu_max: {mu} is not a whole number of the {self.n_mu} "
                             f"|μ| bins (width {1.0 / self.n_mu:g})")
        ells = self.ells
        if (not isinstance(ells, (list, tuple)) or not ells
                or any(e not in _ELLS or isinstance(e, bool) for e in ells)
                or len(set(ells)) != len(ells)):
            raise InputError(f"{_KEY}.ells: expected distinct multipoles from {list(_ELLS)}, "
                             f"got {ells!r}")
        object.__setattr__(self, "ells", tuple(sorted(int(e) for e in ells)))
        if self.rr_method not in RR_METHODS:
            raise InputError(f"{_KEY}.rr_method: expected one of {RR_METHODS}, "
                             f"got {self.rr_method!r}")
        positive(self.split_factor, f"{_KEY}.split_factor")
        non_negative(self.split_above, f"{_KEY}.split_above")

    @property
    def edges(self) -> NDArray[np.float64]:
        """s bin edges [Mpc/h]."""
        return range_edges(self.s_min, self.s_max, self.n_s, self.s_spacing, self.s_edges)

    @property
    def bins(self) -> SMuBins:
        return make_smu_bins(self.edges, self.n_mu, _KEY)

    @property
    def n_mu_used(self) -> int:
        """|μ| bins below ``mu_max``."""
        return int(round(self.mu_max * self.n_mu))


def legendre_weights(mu_edges: NDArray[np.float64], ells: tuple[int, ...]
                     ) -> NDArray[np.float64]:
    """(2ℓ + 1) ∫ L_ℓ(μ) dμ over each |μ| bin, shape (n_ells, n_mu).

    Parameters
    ----------
    mu_edges : ndarray
        |μ| bin edges in [0, 1].
    ells : tuple of int
        Even multipoles.
    """
    out = np.empty((len(ells), mu_edges.size - 1))
    for i, ell in enumerate(ells):
        prim = np.polynomial.Legendre.basis(ell).integ()
        out[i] = (2 * ell + 1) * np.diff(prim(mu_edges))
    return out


def _project(xi: NDArray[np.float64], settings: MultipolesSettings) -> NDArray[np.float64]:
    """ξ(s, μ) of shape (..., n_s, n_mu) → concatenated ξ_ℓ(s), shape (..., n_ells · n_s)."""
    m = settings.n_mu_used
    w = legendre_weights(settings.bins.mu_edges[: m + 1], settings.ells)
    ell_s = np.einsum("...sm,lm->...ls", xi[..., :m], w)
    return ell_s.reshape(ell_s.shape[:-2] + (-1,))


def _measurement(settings: MultipolesSettings, value: NDArray[np.float64],
                 delete_one: NDArray[np.float64] | None, extra: dict) -> Measurement:
    ells = ", ".join(f"ξ_{e}" for e in settings.ells)
    return Measurement(name=NAME, bins=np.tile(settings.bins.s_centres, len(settings.ells)),
                       value=value, delete_one=delete_one, bin_edges=None,
                       bin_label=f"s [Mpc/h] ({ells} in turn)", value_label="ξ_ℓ(s)",
                       extra={"ells": list(settings.ells), "mu_max": settings.mu_max, **extra})


# ---------------------------------------------------------------------------------- box
def _quadrature(bins: SMuBins, n_mu: int) -> tuple[NDArray[np.float64], ...]:
    """Nodes s, μ and weights of ∫_bin d³s / (2π) for each (s, |μ|) bin, shape
    (n_s, n_mu, q): the weight holds s² ds dμ and the 2 of the two signs of μ."""
    x, wx = np.polynomial.legendre.leggauss(_GL_NODES)
    se, me = bins.s_edges, bins.mu_edges[: n_mu + 1]
    hs, cs = 0.5 * np.diff(se), 0.5 * (se[1:] + se[:-1])
    hm, cm = 0.5 * np.diff(me), 0.5 * (me[1:] + me[:-1])
    s = cs[:, None] + hs[:, None] * x[None, :]                      # (n_s, g)
    mu = cm[:, None] + hm[:, None] * x[None, :]                     # (n_mu, g)
    ws = hs[:, None] * wx[None, :] * s**2
    wm = hm[:, None] * wx[None, :]
    shape = (se.size - 1, n_mu, _GL_NODES * _GL_NODES)
    s_q = np.broadcast_to(s[:, None, :, None], shape[:2] + (_GL_NODES, _GL_NODES)).reshape(shape)
    mu_q = np.broadcast_to(mu[None, :, None, :], shape[:2] + (_GL_NODES, _GL_NODES)
                           ).reshape(shape)
    w_q = (2.0 * ws[:, None, :, None] * wm[None, :, None, :]).reshape(shape)
    return s_q, mu_q, w_q


def _azimuthal_overlap(rho: NDArray[np.float64], a: float) -> NDArray[np.float64]:
    """∫₀^{2π} (a − ρ|cos φ|)(a − ρ|sin φ|) dφ [(Mpc/h)²]."""
    return 2.0 * np.pi * a * a - 8.0 * a * rho + 2.0 * rho * rho


def box_pair_fractions(bins: SMuBins, n_mu: int, box_size: float, layout: object | None,
                       n_regions: int) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
    """Fraction of random pairs in each (s, |μ|) bin: full box and one region removed.

    Returns ``(f_full, f_delete_one)``, each (n_s, n_mu); ``f_delete_one`` is None without
    regions (see the module notes).
    """
    vol = box_size**3
    vbin = bins.shell_volumes()[:, :n_mu]
    f_full = vbin / vol
    if n_regions < 2:
        return f_full, None
    v_c = vol / n_regions
    v_r = vol - v_c
    if layout is None:
        return f_full, vbin / v_r
    a = float(layout.side)
    if bins.s_max >= a:
        raise InputError(f"multipoles jackknife: sub-volumes are {a:g} Mpc/h across, not more "
                         f"than the largest separation s_max = {bins.s_max:g} Mpc/h; use fewer "
                         "jackknife regions")
    if layout.layout == "columns" and 2.0 * bins.s_max >= box_size - a:
        # a galaxy within s_max of a column must see it through one periodic image only
        raise InputError(f"multipoles jackknife: with {layout.n_side} columns per side the "
                         f"largest separation s_max = {bins.s_max:g} Mpc/h must stay below "
                         f"{0.5 * (box_size - a):g} Mpc/h; use more jackknife regions")
    s_q, mu_q, w_q = _quadrature(bins, n_mu)
    azim = _azimuthal_overlap(s_q * np.sqrt(1.0 - mu_q**2), a)
    los = box_size if layout.layout == "columns" else a - s_q * mu_q
    overlap = (w_q * azim * los).sum(axis=-1)
    return f_full, ((vol - 2.0 * v_c) * vbin + overlap) / v_r**2


@numba.njit(parallel=True, cache=True)
def _ring_sums(dx, dy, w, side, rho, cos_t, sin_t, n_chunks):  # pragma: no cover - numba
    n, nr, nt = dx.size, rho.size, cos_t.shape[1]
    acc = np.zeros((n_chunks, nr))
    per = (n + n_chunks - 1) // n_chunks
    for c in numba.prange(n_chunks):
        for i in range(c * per, min(n, (c + 1) * per)):
            # distance from the point to the square: circles smaller than it miss the square
            ex = max(-dx[i], 0.0, dx[i] - side)
            ey = max(-dy[i], 0.0, dy[i] - side)
            d2 = ex * ex + ey * ey
            for j in range(nr):
                r = rho[j]
                if r * r <= d2:
                    continue
                hit = 0
                for t in range(nt):
                    x = dx[i] + r * cos_t[j, t]
                    y = dy[i] + r * sin_t[j, t]
                    if 0.0 <= x < side and 0.0 <= y < side:
                        hit += 1
                acc[c, j] += w[i] * hit / nt
    out = np.zeros(nr)
    for c in range(n_chunks):  # fixed order: the same sum for any number of threads
        out += acc[c]
    return out


def ring_weight_in_square(dx: NDArray[np.float64], dy: NDArray[np.float64],
                          w: NDArray[np.float64], side: float, rho: NDArray[np.float64]
                          ) -> NDArray[np.float64]:
    """Φ(ρ) = Σ_i w_i f_i(ρ): f_i the fraction of the circle of radius ρ about (dx_i, dy_i)
    inside the square [0, side)².

    Parameters
    ----------
    dx, dy : ndarray, shape (N,)
        Points [Mpc/h] relative to the square's corner.
    w : ndarray, shape (N,)
        Weights.
    side : float
        Side of the square [Mpc/h].
    rho : ndarray, shape (R,)
        Radii [Mpc/h].

    Returns
    -------
    ndarray, shape (R,)
        From _N_THETA directions per circle, rotated from radius to radius so the sampling
        errors of neighbouring radii do not line up.
    """
    golden = 0.5 * (math.sqrt(5.0) - 1.0)
    t = (np.arange(_N_THETA)[None, :] + np.mod(golden * np.arange(rho.size), 1.0)[:, None])
    theta = 2.0 * np.pi * t / _N_THETA
    return _ring_sums(np.ascontiguousarray(dx, dtype=np.float64),
                      np.ascontiguousarray(dy, dtype=np.float64),
                      np.ascontiguousarray(w, dtype=np.float64), float(side),
                      np.ascontiguousarray(rho, dtype=np.float64), np.cos(theta),
                      np.sin(theta), _N_CHUNKS)


def _delete_one_dr_columns(sample: BoxSample, bins: SMuBins, n_mu: int, layout: object
                           ) -> NDArray[np.float64]:
    """DR/(W N_R) of each delete-one region R (columns), shape (K, n_s, n_mu)."""
    L, a = sample.box_size, float(layout.side)
    w = sample.w
    s_q, mu_q, w_q = _quadrature(bins, n_mu)
    rho_q = s_q * np.sqrt(1.0 - mu_q**2)
    vbin = 2.0 * np.pi * w_q.sum(axis=-1)
    v_rest = L**3 * (1.0 - 1.0 / layout.k)
    s_max = bins.s_max
    rho = s_max * np.linspace(0.0, 1.0, _N_RHO + 1) ** 2
    out = np.empty((layout.k, bins.n_s, n_mu))
    # one pass per region, vectorised over the galaxies near it
    for k, near, dx, dy in column_neighbourhoods(sample, float(s_max)):
        phi = ring_weight_in_square(dx, dy, w[near], a, rho)
        lost = 2.0 * np.pi * (w_q * np.interp(rho_q, rho, phi)).sum(axis=-1)
        w_rest = w[sample.region != k].sum()
        out[k] = (w_rest * vbin - lost) / (v_rest * w_rest)
    return out


def multipoles_box(sample: BoxSample, settings: MultipolesSettings | None = None, *,
                   jackknife: bool | None = None) -> Measurement:
    """ξ_ℓ(s) of a periodic box sample (analytic randoms, LOS along ``sample.los_axis``).

    Parameters
    ----------
    sample : BoxSample
        Positions [Mpc/h] in redshift space along ``sample.los_axis``.
    settings : MultipolesSettings, optional
    jackknife : bool, optional
        Also compute delete-one vectors (default: when the sample has regions).
    """
    settings = settings or MultipolesSettings()
    bins, m = settings.bins, settings.n_mu_used
    jk = want_jackknife(jackknife, sample.n_regions, NAME)
    k = sample.n_regions if jk else 0
    if jk:
        check_filled(sample.region, k, "galaxies")
    try:
        dd = count_smu_box(sample.position, sample.weight, sample.region if jk else None,
                           box_size=sample.box_size, los_axis=sample.los_axis, bins=bins,
                           n_regions=k)
    except InputError as exc:  # e.g. s_max beyond half the box: name the table
        raise InputError(f"{_KEY}: {exc}") from exc
    if dd.norm <= 0:
        raise InputError(f"{NAME}: the box sample needs at least two galaxies with positive "
                         "weight")
    f_full, f_del = box_pair_fractions(bins, m, sample.box_size,
                                       sample.layout if jk else None, k)
    xi = dd.total[:, :m] / (dd.norm * f_full) - 1.0
    delete_one = None
    jk_estimator = None
    if jk:
        dd_k = (dd.delete_one_all() / dd.norm_delete_one[:, None, None])[:, :, :m]
        layout = sample.layout
        if layout is not None and layout.layout == "columns":
            dr_k = _delete_one_dr_columns(sample, bins, m, layout)
            xi_k = (dd_k - 2.0 * dr_k + f_del[None]) / f_del[None]
            jk_estimator = "Landy–Szalay with analytic randoms in the remaining volume"
        else:
            xi_k = dd_k / f_del[None] - 1.0
            jk_estimator = "natural, analytic RR of the remaining volume"
        delete_one = _project(xi_k, settings)
    return _measurement(settings, _project(xi, settings), delete_one,
                        {"dd_pairs": dd.total[:, :m].sum(axis=1).tolist(),
                         "estimator": "analytic RR", "jackknife_estimator": jk_estimator})


# ---------------------------------------------------------------------------------- cone
def count_rr_cone(randoms: ConeSample, geometry: ConeGeometry | None = None,
                  settings: MultipolesSettings | None = None, *, n_data: int | None = None
                  ) -> PairCounts:
    """(s, μ) RR counts of the randoms of one sample and cut, shared by every cone.

    Parameters
    ----------
    randoms : ConeSample
        The randoms, with the same region map as the data.
    geometry : ConeGeometry, optional
        Unused by the count itself; accepted so every cone-side call looks alike.
    settings : MultipolesSettings, optional
        Binning and ``rr_method``.
    n_data : int, optional
        Expected data size, needed by ``rr_method = "split"`` to size the subsets.
    """
    settings = settings or MultipolesSettings()
    bins = settings.bins
    return count_rr_split(
        randoms, settings.rr_method, settings.split_factor, n_data, NAME,
        lambda xyz, w, reg, edges: count_smu_cone(
            xyz, w, reg, bins=make_smu_bins(edges, bins.n_mu), n_regions=randoms.n_regions),
        bins.s_edges, settings.split_above)


def _check_rr(rr: PairCounts, settings: MultipolesSettings, k: int) -> None:
    bins = settings.bins
    if (not rr.is_auto or rr.total.shape != (bins.n_s, bins.n_mu)
            or not np.allclose(rr.rp_edges, bins.s_edges)
            or not np.allclose(rr.pi_edges, bins.mu_edges)):
        raise InputError(f"{NAME}: the precomputed RR counts do not match the (s, μ) binning "
                         "(recount RR with the same settings)")
    if k and rr.n_regions != k:
        raise InputError(f"{NAME}: the precomputed RR carries {rr.n_regions} jackknife "
                         f"regions, the data {k}")
    m = settings.n_mu_used
    empty = np.argwhere(rr.total[:, :m] <= 0)
    if empty.size:
        si, mi = empty[0]
        raise InputError(f"{NAME}: no random pairs in bin s ∈ [{bins.s_edges[si]:g}, "
                         f"{bins.s_edges[si + 1]:g}) Mpc/h, |μ| bin {mi}; use more randoms, "
                         "a larger s_min or fewer |μ| bins")


def multipoles_cone(data: ConeSample, randoms: ConeSample,
                    geometry: ConeGeometry | None = None,
                    settings: MultipolesSettings | None = None, *, rr: PairCounts | None = None,
                    jackknife: bool | None = None) -> Measurement:
    """ξ_ℓ(s) of a cone with the Landy–Szalay estimator, LOS at the pair midpoint.

    Parameters
    ----------
    data, randoms : ConeSample
        Galaxies and randoms (same footprint, shell and region map).
    geometry : ConeGeometry, optional
        Passed on to :func:`count_rr_cone` when ``rr`` is not given.
    settings : MultipolesSettings, optional
    rr : PairCounts, optional
        Precomputed :func:`count_rr_cone` result (shared by all cones).
    jackknife : bool, optional
        Also compute delete-one vectors (default: when the data have regions).
    """
    settings = settings or MultipolesSettings()
    bins, m = settings.bins, settings.n_mu_used
    k = cone_regions(data, randoms, jackknife, NAME)
    if rr is None:
        rr = count_rr_cone(randoms, geometry, settings, n_data=len(data))
    _check_rr(rr, settings, k)
    dreg = data.region if k else None
    rreg = randoms.region if k else None
    dd = count_smu_cone(data.xyz, data.weight, dreg, bins=bins, n_regions=k)
    dr = count_smu_cone(data.xyz, data.weight, dreg, randoms.xyz, randoms.weight, rreg,
                        bins=bins, n_regions=k)
    xi, xik = landy_szalay(dd, dr, rr, NAME, slice(0, m))  # the |μ| bins below mu_max
    delete_one = None if xik is None else _project(xik, settings)
    extra = {"dd_pairs": dd.total[:, :m].sum(axis=1).tolist(),
             "dr_pairs": dr.total[:, :m].sum(axis=1).tolist(),
             "rr_pairs": rr.total[:, :m].sum(axis=1).tolist(),
             "rr_subsets": rr.n_subsets, "estimator": "Landy-Szalay"}
    return _measurement(settings, _project(xi, settings), delete_one, extra)


class Multipoles(Statistic):
    """ξ_ℓ(s): box with analytic randoms, cones with Landy–Szalay and the cut's shared RR."""

    name = NAME
    settings_type = MultipolesSettings
    display = Display(title="redshift-space multipoles ξ_ℓ(s)", short="ξ_ℓ(s)", symbol="ξ_ℓ",
                      order=50, scale_by_bins=True, scale_power=2,
                      scaled_label="s²ξ_ℓ [(Mpc/h)²]")
    needs_randoms = True

    def n_bins(self, settings=None):
        s = self.settings_or_default(settings)
        return (len(s.edges) - 1) * len(s.ells)

    def prepare_cone(self, randoms, geometry, settings=None, *, n_data=None, rng=None):
        return count_rr_cone(randoms, geometry, self.settings_or_default(settings),
                             n_data=n_data)

    def unpack_shared(self, payload: Mapping[str, Any]) -> PairCounts:
        return PairCounts(**payload)

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return multipoles_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return multipoles_cone(sample, randoms, geometry, settings, rr=shared,
                               jackknife=jackknife)

    def random_cell_volume(self, settings=None):
        s = self.settings_or_default(settings)
        e = s.edges
        # the innermost s shell, over the |μ| range the multipoles use
        return float(4.0 / 3.0 * math.pi * (e[1] ** 3 - e[0] ** 3) * s.mu_max)

    def cost(self, settings, randoms_multiple):
        s = self.settings_or_default(settings)
        sphere = 4.0 / 3.0 * math.pi * s.edges[-1] ** 3
        # DD, DR and RR in every cone; three line-of-sight axes in the box
        return Cost(cone_volume=(1.0 + randoms_multiple) ** 2 * sphere,
                    box_volume=3.0 * sphere)


STATISTIC = Multipoles()
