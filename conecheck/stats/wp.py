"""Projected correlation function wp(r_p) = 2 Σ_π ξ(r_p, π) Δπ up to π_max (docs/design.md §6).

Box (periodic): the natural estimator with the analytic random-pair fraction,
ξ = DD / (N_pairs · V_bin / L³) − 1, where N_pairs = ((Σw)² − Σw²)/2 counts distinct
pairs (DD counts each unordered pair once) and V_bin = π (r₂² − r₁²) · 2Δπ (a |π| bin
holds both signs of π).  With analytic randoms DR = RR, so this *is* Landy–Szalay.

Box jackknife: removing sub-volume C (volume V_C = L³/K) leaves a region R that is no
longer periodic, so the analytic random-pair fraction of a bin becomes exactly

    f_R = (1 / V_R²) ∫_bin d³s [L³ − 2 V_C + V(C ∩ (C − s))],

with V(C ∩ (C − s)) = L (a − |s_x|)(a − |s_y|) for columns of side a along the LOS and
(a − |s_x|)(a − |s_y|)(a − |s_z|) for cubes (valid while r_p,max, and π_max for cubes,
are < a).  Integrating over an annulus r₁ ≤ r_p < r₂ gives
a² π(r₂² − r₁²) − (8a/3)(r₂³ − r₁³) + (r₂⁴ − r₁⁴)/2 (:func:`_overlap_perp`), times
L · 2Δπ (columns) or 2[aΔπ − (z₂² − z₁²)/2] (cubes) for the |π| slab [z₁, z₂).
When the layout is unknown (labels given by hand) the remaining-volume approximation
f_R = V_bin / V_R is used instead.

The region R is not periodic any more: galaxies near the removed column have fewer neighbours
inside R, so with the natural estimator DD/RR − 1 the delete-one values follow the number of
galaxies near each hole, a first-order noise the full periodic estimate does not have (on
Poisson boxes at the demo geometry the jackknife σ of wp at r_p = 15 Mpc/h came out 5× the
true scatter). For columns the delete-one estimate is therefore Landy–Szalay with analytic
randoms in R: DR_R/(W_R N_R) = Σ_{i∈R} w_i [V_bin − 2Δπ A_i] / (V_R W_R), where A_i is the
area of the galaxy's r_p annulus that falls inside the removed column (the LOS is whole), and
ξ_R = (DD_R − 2 DR_R + RR_R)/RR_R with RR_R = f_R (Landy & Szalay 1993, ApJ 412, 64). The full
periodic estimate is unchanged (there DR = RR). Cubes keep the natural estimator.

Cone: Landy–Szalay ξ = (DD − 2DR + RR)/RR with each count divided by its weighted number
of pairs (DD, RR: ((Σw)² − Σw²)/2; DR: Σw_D Σw_R).  RR depends only on the randoms, so it
is counted once per sample and cut (:func:`count_rr_cone`) and passed to every cone.  The
``split`` option counts RR only inside M disjoint random subsets, each ``split_factor``
times the data size, normalised by Σ_subsets of their pair numbers (Keihänen et al. 2019,
A&A 631, A73), in the r_p bins from ``split_above`` on; the smaller bins, where ξ is large
and amplifies RR's noise, count every random pair, on their own normalisation
(:func:`~conecheck.pairs.join_separations`).  DR uses all randoms, or with
``dr_method = "prefix"``, in the r_p bins from ``split_above`` on, the smallest leading part
of them that the randoms declare as precise there as 20 pseudo-random points per galaxy
(:attr:`~conecheck.stats.base.ConeSample.prefixes`; QMC randoms offer such parts where a
bin's cell holds many of them), on its own normalisation.  Delete-one
counts and normalisations come from the one-pass region bookkeeping of
:mod:`conecheck.pairs`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs import PairCounts, RpPiBins, count_rppi_box, count_rppi_box_shared, count_rppi_cone
from ..pairs.binning import check_rp_edges, make_bins
from ._common import (
    check_filled,
    column_neighbourhoods,
    cone_regions,
    count_dr_prefix,
    count_rr_split,
    landy_szalay,
    want_jackknife,
)
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import (
    DR_METHODS,
    RR_METHODS,
    SPLIT_ABOVE,
    check_range_bins,
    non_negative,
    positive,
    range_edges,
)
from .statistic import Cost, Display, Statistic

NAME = "wp"

@dataclass(frozen=True)
class WpSettings:
    """Projected correlation function wp(r_p).

    Attributes
    ----------
    rp_min, rp_max : float
        Range of the r_p bins [Mpc/h] (ignored when ``rp_edges`` is given).
    n_rp : int
        Number of r_p bins.
    rp_spacing : {"log", "linear"}
        Spacing of the generated r_p bins.
    rp_edges : tuple of float or None
        Explicit r_p bin edges [Mpc/h], overriding the three above.
    pi_max : float
        Line-of-sight integration limit [Mpc/h] (a whole multiple of ``dpi``).
    dpi : float
        |π| bin width [Mpc/h].
    rr_method : {"full", "split"}
        RR from all random pairs, or, in the r_p bins from ``split_above`` on, only from
        pairs inside disjoint random subsets (Keihänen et al. 2019, A&A 631, A73): cheaper,
        with random noise that ξ picks up with a factor 1 − ξ, hence the full count
        at small r_p (benchmarks/RESULTS.md).
    split_factor : float
        Size of each random subset of the split method, in units of the data size.
    split_above : float
        The split method splits only the r_p bins whose lower edge is at least this
        [Mpc/h]; smaller bins count every random pair (0: every bin, as Keihänen et al. do).
        ``dr_method = "prefix"`` uses the same edge.
    dr_method : {"full", "prefix"}
        DR from all randoms, or, in the r_p bins from ``split_above`` on, from the fewest
        leading randoms that are as precise there as 20 pseudo-random points per galaxy (with
        QMC randoms a half to an eighth of them, where the bins hold many per galaxy:
        README, "Randoms"); cheaper at equal precision.
    """

    rp_min: float = 0.1
    rp_max: float = 30.0
    n_rp: int = 14
    rp_spacing: str = "log"
    rp_edges: tuple[float, ...] | None = None
    pi_max: float = 40.0
    dpi: float = 1.0
    rr_method: str = "full"
    split_factor: float = 1.0
    split_above: float = SPLIT_ABOVE
    dr_method: str = "full"

    def __post_init__(self) -> None:
        key = "statistics.wp"
        if self.rp_edges is None:
            check_range_bins(key, "rp", self.rp_min, self.rp_max, self.n_rp, self.rp_spacing)
        else:
            object.__setattr__(self, "rp_edges", tuple(float(x) for x in
                                                       check_rp_edges(self.rp_edges,
                                                                      f"{key}.rp_edges")))
        if self.rr_method not in RR_METHODS:
            raise InputError(f"{key}.rr_method: expected one of {RR_METHODS}, "
                             f"got {self.rr_method!r}")
        if self.dr_method not in DR_METHODS:
            raise InputError(f"{key}.dr_method: expected one of {DR_METHODS}, "
                             f"got {self.dr_method!r}")
        positive(self.split_factor, f"{key}.split_factor")
        non_negative(self.split_above, f"{key}.split_above")
        try:
            self.bins  # noqa: B018 — validates pi_max / dpi
        except InputError as exc:
            raise InputError(f"{key}: {exc}") from exc

    @property
    def edges(self) -> NDArray[np.float64]:
        """r_p bin edges [Mpc/h]."""
        return range_edges(self.rp_min, self.rp_max, self.n_rp, self.rp_spacing, self.rp_edges)

    @property
    def bins(self) -> RpPiBins:
        return make_bins(self.edges, self.pi_max, self.dpi)

    @property
    def cell_volumes(self) -> NDArray[np.float64]:
        """Volume around a galaxy of each r_p bin over the whole line-of-sight integration,
        π (r₂² − r₁²) · 2 π_max [(Mpc/h)³]: where its data–random pairs lie."""
        e = self.edges
        return math.pi * (e[1:] ** 2 - e[:-1] ** 2) * 2.0 * self.pi_max


def _overlap_perp(e: NDArray[np.float64], a: float) -> NDArray[np.float64]:
    """∫ (a − |s_x|)(a − |s_y|) d²s_perp over each r_p annulus [(Mpc/h)⁴]."""
    r1, r2 = e[:-1], e[1:]
    return (a * a * np.pi * (r2**2 - r1**2) - a * 8.0 / 3.0 * (r2**3 - r1**3)
            + 0.5 * (r2**4 - r1**4))


def box_pair_fractions(bins: RpPiBins, box_size: float, layout: object | None,
                       n_regions: int) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
    """Fraction of random pairs in each (r_p, |π|) bin: full box and with one region removed.

    Returns ``(f_full, f_delete_one)``, each (n_rp, n_pi); ``f_delete_one`` is None without
    regions.  See the module notes for the formula.
    """
    vol = box_size**3
    vbin = bins.cylinder_volumes()
    f_full = vbin / vol
    if n_regions < 2:
        return f_full, None
    v_c = vol / n_regions
    v_r = vol - v_c
    if layout is None:
        return f_full, vbin / v_r
    a = float(layout.side)
    if bins.rp_max >= a or (layout.layout == "cubes" and bins.pi_max >= a):
        raise InputError(f"wp jackknife: sub-volumes are {a:g} Mpc/h across, smaller than the "
                         f"largest separation (r_p,max = {bins.rp_max:g}, pi_max = "
                         f"{bins.pi_max:g} Mpc/h); use fewer jackknife regions")
    perp = _overlap_perp(bins.rp_edges, a)
    z = bins.pi_edges
    if layout.layout == "columns":
        los = np.full(bins.n_pi, box_size * 2.0 * bins.dpi)
    else:
        los = 2.0 * (a * bins.dpi - 0.5 * (z[1:] ** 2 - z[:-1] ** 2))
    overlap = np.outer(perp, los)
    return f_full, ((vol - 2.0 * v_c) * vbin + overlap) / v_r**2


def _wp_from_xi(xi: NDArray[np.float64], dpi: float) -> NDArray[np.float64]:
    return 2.0 * dpi * xi.sum(axis=-1)


def _measurement(bins: RpPiBins, value: NDArray[np.float64],
                 delete_one: NDArray[np.float64] | None, extra: dict) -> Measurement:
    return Measurement(name=NAME, bins=bins.rp_centres, value=value, delete_one=delete_one,
                       bin_edges=bins.rp_edges.copy(), bin_label="r_p [Mpc/h]",
                       value_label="w_p(r_p) [Mpc/h]", extra=extra)


def box_pair_counts(sample: BoxSample, settings: WpSettings | None = None,
                    n_regions: int = 0) -> PairCounts:
    """The (r_p, |π|) auto counts of ``sample`` that wp's box estimator uses; jackknife
    regions when ``n_regions`` > 0."""
    bins = (settings or WpSettings()).bins
    k = int(n_regions)
    return count_rppi_box(sample.position, sample.weight, sample.region if k else None,
                          box_size=sample.box_size, los_axis=sample.los_axis,
                          rp_edges=bins.rp_edges, pi_max=bins.pi_max, dpi=bins.dpi,
                          n_regions=k)


def wp_box_pair(common: BoxSample, only_first: BoxSample, only_second: BoxSample,
                settings: WpSettings | None = None) -> tuple[Measurement, Measurement]:
    """wp(r_p) [Mpc/h] of two boxes that share the galaxies ``common`` (first box: common
    and ``only_first``, second: common and ``only_second``), without jackknife.

    The shared galaxies' pairs are counted once
    (:func:`~conecheck.pairs.count_rppi_box_shared`), so two boxes that differ in a few per
    cent of their galaxies cost little more than one; each result equals :func:`wp_box` of
    its box bit for bit (unit weights).
    """
    parts = (common, only_first, only_second)
    if any(p.box_size != common.box_size or p.los_axis != common.los_axis
           or p.weight is not None for p in parts):
        raise ValueError("wp_box_pair: three unweighted samples of one box and line of sight")
    bins = (settings or WpSettings()).bins
    counts = count_rppi_box_shared(common.position, only_first.position, only_second.position,
                                   box_size=common.box_size, los_axis=common.los_axis,
                                   rp_edges=bins.rp_edges, pi_max=bins.pi_max, dpi=bins.dpi)
    out = []
    for only, dd in zip((only_first, only_second), counts, strict=True):
        union = BoxSample(np.concatenate([common.position, only.position]), common.box_size,
                          common.los_axis)
        out.append(wp_box(union, settings, jackknife=False, dd=dd))
    return out[0], out[1]


def wp_box(sample: BoxSample, settings: WpSettings | None = None, *,
           jackknife: bool | None = None, dd: PairCounts | None = None) -> Measurement:
    """wp(r_p) [Mpc/h] of a periodic box sample (analytic randoms).

    Parameters
    ----------
    sample : BoxSample
        Positions in redshift space along ``sample.los_axis``.
    settings : WpSettings, optional
    jackknife : bool, optional
        Also compute delete-one vectors (default: when the sample has regions).
    dd : PairCounts, optional
        The sample's pair counts (:func:`box_pair_counts`), when already known.
    """
    settings = settings or WpSettings()
    bins = settings.bins
    jk = want_jackknife(jackknife, sample.n_regions, "wp")
    k = sample.n_regions if jk else 0
    if jk:
        check_filled(sample.region, k, "galaxies")
    if dd is None:
        dd = box_pair_counts(sample, settings, n_regions=k)
    elif dd.n_regions != k or not np.array_equal(dd.rp_edges, bins.rp_edges):
        raise ValueError("wp_box: the given pair counts do not have the sample's bins and "
                         "regions")
    if dd.norm <= 0:
        raise InputError("wp: the box sample needs at least two galaxies with positive weight")
    f_full, f_del = box_pair_fractions(bins, sample.box_size, sample.layout if jk else None, k)
    xi = dd.total / (dd.norm * f_full) - 1.0
    delete_one = None
    jk_estimator = None
    if jk:
        dd_k = dd.delete_one_all() / dd.norm_delete_one[:, None, None]
        layout = sample.layout
        if layout is not None and layout.layout == "columns":
            dr_k = _delete_one_dr_columns(sample, bins, layout)
            xi_k = (dd_k - 2.0 * dr_k + f_del[None]) / f_del[None]
            jk_estimator = "Landy–Szalay with analytic randoms in the remaining volume"
        else:
            xi_k = dd_k / f_del[None] - 1.0
            jk_estimator = "natural, analytic RR of the remaining volume"
        delete_one = _wp_from_xi(xi_k, bins.dpi)
    return _measurement(bins, _wp_from_xi(xi, bins.dpi), delete_one,
                        {"dd_pairs": dd.total.sum(axis=1).tolist(), "estimator": "analytic RR",
                         "jackknife_estimator": jk_estimator})


def _below_left_area(x: NDArray[np.float64], y: NDArray[np.float64],
                     r: NDArray[np.float64]) -> NDArray[np.float64]:
    """Area of the disc X² + Y² < r² with X < x and Y < y, elementwise (x, y, r in one unit
    of length, e.g. Mpc/h; the area in its square).

    With h(u) = √(r² − u²) and S(t) = ∫_{−r}^{t} h du = (t h(t) + r² asin(t/r))/2 + πr²/4,
    the strip X < x holds 2S(x); cutting it at Y < y removes, for y ≥ 0, the part of the
    chord above y over |u| < c = √(r² − y²), and keeps, for y < 0, only the chord below y
    over the same |u| < c (elementary integration of the chord length).
    """
    x = np.clip(x, -r, r)
    y = np.clip(y, -r, r)

    def strip(t: NDArray[np.float64]) -> NDArray[np.float64]:
        ratio = np.clip(t / np.where(r > 0.0, r, 1.0), -1.0, 1.0)  # r = 0: no area
        return 0.5 * (t * np.sqrt(np.maximum(r * r - t * t, 0.0)) + r * r * np.arcsin(ratio)) \
            + 0.25 * np.pi * r * r

    c = np.sqrt(np.maximum(r * r - y * y, 0.0))
    m = np.minimum(x, c)
    active = x > -c
    inner = np.where(active, strip(m) - strip(-c), 0.0)
    width = np.where(active, m + c, 0.0)
    return np.where(y >= 0.0, 2.0 * strip(x) - inner + y * width, inner + y * width)


def disc_square_area(cx: NDArray[np.float64], cy: NDArray[np.float64],
                     radii: NDArray[np.float64], side: float) -> NDArray[np.float64]:
    """Area [(Mpc/h)²] of discs of the given radii around (cx, cy) inside the square [0, side)².

    Parameters
    ----------
    cx, cy : ndarray, shape (N,)
        Disc centres [Mpc/h] relative to the square's corner.
    radii : ndarray, shape (E,)
        Radii [Mpc/h].
    side : float
        Side of the square [Mpc/h].

    Returns
    -------
    ndarray, shape (N, E)
        Exact, by inclusion–exclusion over the square's corners of the disc's area below and
        left of each corner (:func:`_below_left_area`).
    """
    radii = np.asarray(radii, dtype=np.float64)
    cx = np.asarray(cx, dtype=np.float64)
    cy = np.asarray(cy, dtype=np.float64)
    area = np.zeros((cx.size, radii.size))
    # only the discs whose bounding square meets the square: the others hold no area (the
    # four terms below cancel, to a rounding residue of a few ulp of r² when the disc lies
    # above or below). Most discs of the delete-one DR lie beside a column and the small
    # radii miss it: 4x faster on a 10⁶-galaxy box
    i, e = np.nonzero((cx[:, None] > -radii) & (cx[:, None] < side + radii)
                      & (cy[:, None] > -radii) & (cy[:, None] < side + radii))
    r = radii[e]
    x0, y0 = -cx[i], -cy[i]
    x1, y1 = x0 + side, y0 + side
    hit = (_below_left_area(x1, y1, r) - _below_left_area(x0, y1, r)
           - _below_left_area(x1, y0, r) + _below_left_area(x0, y0, r))
    # inclusion–exclusion of four O(r²) terms can leave a rounding residue of either sign
    area[i, e] = np.clip(hit, 0.0, np.pi * r * r)
    return area


def _delete_one_dr_columns(sample: BoxSample, bins: RpPiBins, layout: object
                           ) -> NDArray[np.float64]:
    """DR/(W N_R) of each delete-one region R (columns), shape (K, n_rp, n_pi).

    For a galaxy of R the random pairs in a bin are those of its (r_p, π) cylinder shell
    inside R: the whole shell V_bin less the part in the removed column, 2Δπ times the area
    of its r_p annulus inside the column's square (the LOS is whole and periodic).
    """
    L, a = sample.box_size, float(layout.side)
    w = sample.w
    vbin = bins.cylinder_volumes()
    v_rest = L ** 3 * (1.0 - 1.0 / layout.k)
    out = np.empty((layout.k, bins.n_rp, bins.n_pi))
    # one pass per region, vectorised over the galaxies near it
    for k, near, dx, dy in column_neighbourhoods(sample, float(bins.rp_edges[-1])):
        area = disc_square_area(dx, dy, bins.rp_edges, a)
        lost = (w[near][:, None] * np.diff(area, axis=1)).sum(axis=0)  # Σ w_i A_i per r_p bin
        w_rest = w[sample.region != k].sum()
        out[k] = (w_rest * vbin - 2.0 * bins.dpi * lost[:, None]) / (v_rest * w_rest)
    return out


def count_rr_cone(randoms: ConeSample, geometry: ConeGeometry | None = None,
                  settings: WpSettings | None = None, *, n_data: int | None = None) -> PairCounts:
    """RR pair counts of the randoms of one sample and cut, shared by every cone.

    Parameters
    ----------
    randoms : ConeSample
        The randoms, with the same region map as the data.
    geometry : ConeGeometry, optional
        Unused by the count itself; accepted so every cone-side call looks alike.
    settings : WpSettings, optional
        Binning and ``rr_method``.
    n_data : int, optional
        Expected data size, needed by ``rr_method = "split"`` to size the subsets.
    """
    settings = settings or WpSettings()
    bins = settings.bins
    return count_rr_split(
        randoms, settings.rr_method, settings.split_factor, n_data, "wp",
        lambda xyz, w, reg, edges: count_rppi_cone(xyz, w, reg, rp_edges=edges,
                                                   pi_max=bins.pi_max, dpi=bins.dpi,
                                                   n_regions=randoms.n_regions),
        bins.rp_edges, settings.split_above)


def _check_rr(rr: PairCounts, bins: RpPiBins, k: int) -> None:
    if (not rr.is_auto or rr.total.shape != (bins.n_rp, bins.n_pi)
            or not np.allclose(rr.rp_edges, bins.rp_edges)
            or not np.allclose(rr.pi_edges, bins.pi_edges)):
        raise InputError("wp: the precomputed RR counts do not match the wp binning "
                         "(recount RR with the same settings)")
    if k and rr.n_regions != k:
        raise InputError(f"wp: the precomputed RR carries {rr.n_regions} jackknife regions, "
                         f"the data {k}")


def wp_cone(data: ConeSample, randoms: ConeSample, geometry: ConeGeometry | None = None,
            settings: WpSettings | None = None, *, rr: PairCounts | None = None,
            jackknife: bool | None = None) -> Measurement:
    """wp(r_p) [Mpc/h] of a cone with the Landy–Szalay estimator.

    Parameters
    ----------
    data, randoms : ConeSample
        Galaxies and randoms (same footprint, shell and region map).
    geometry : ConeGeometry, optional
        Passed on to :func:`count_rr_cone` when ``rr`` is not given.
    settings : WpSettings, optional
    rr : PairCounts, optional
        Precomputed :func:`count_rr_cone` result (shared by all cones).
    jackknife : bool, optional
        Also compute delete-one vectors (default: when the data have regions).
    """
    settings = settings or WpSettings()
    bins = settings.bins
    k = cone_regions(data, randoms, jackknife, "wp")
    if rr is None:
        rr = count_rr_cone(randoms, geometry, settings, n_data=len(data))
    _check_rr(rr, bins, k)
    empty = np.argwhere(rr.total <= 0)
    if empty.size:
        rp_i, pi_i = empty[0]
        raise InputError(f"wp: no random pairs in bin r_p ∈ [{bins.rp_edges[rp_i]:g}, "
                         f"{bins.rp_edges[rp_i + 1]:g}) Mpc/h, |π| bin {pi_i}; use more randoms "
                         "or a larger r_p,min")
    dxyz = data.xyz
    dreg = data.region if k else None
    kw = {"pi_max": bins.pi_max, "dpi": bins.dpi, "n_regions": k}
    dd = count_rppi_cone(dxyz, data.weight, dreg, rp_edges=bins.rp_edges, **kw)
    dr, n_dr = count_dr_prefix(
        randoms, settings.dr_method,
        lambda xyz, w, reg, edges: count_rppi_cone(dxyz, data.weight, dreg, xyz, w,
                                                   reg if k else None, rp_edges=edges, **kw),
        bins.rp_edges, settings.split_above, settings.cell_volumes)
    xi, xik = landy_szalay(dd, dr, rr, "wp")
    delete_one = None if xik is None else _wp_from_xi(xik, bins.dpi)
    extra = {"dd_pairs": dd.total.sum(axis=1).tolist(),
             "dr_pairs": dr.total.sum(axis=1).tolist(),
             "rr_pairs": rr.total.sum(axis=1).tolist(),
             "rr_subsets": rr.n_subsets, "dr_randoms_above_split": n_dr,
             "estimator": "Landy-Szalay"}
    return _measurement(bins, _wp_from_xi(xi, bins.dpi), delete_one, extra)


class ProjectedCorrelation(Statistic):
    """wp(r_p): box with analytic randoms, cones with Landy–Szalay and the cut's shared RR."""

    name = NAME
    settings_type = WpSettings
    display = Display(title="projected correlation w_p(r_p)", short="w_p(r_p)", symbol="w_p",
                      order=10, scale_by_bins=True, scaled_label="r_p·w_p [(Mpc/h)²]")
    needs_randoms = True

    def n_bins(self, settings=None):
        return len(self.settings_or_default(settings).edges) - 1

    def prepare_cone(self, randoms, geometry, settings=None, *, n_data=None, rng=None):
        return count_rr_cone(randoms, geometry, self.settings_or_default(settings),
                             n_data=n_data)

    def unpack_shared(self, payload: Mapping[str, Any]) -> PairCounts:
        return PairCounts(**payload)

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return wp_box(sample, settings, jackknife=jackknife)

    def measure_box_pair(self, common, only_first, only_second, settings=None, rng=None):
        return wp_box_pair(common, only_first, only_second, settings)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return wp_cone(sample, randoms, geometry, settings, rr=shared, jackknife=jackknife)

    def random_cell_volume(self, settings=None):
        # the innermost r_p annulus
        return float(self.settings_or_default(settings).cell_volumes[0])

    def cost(self, settings, randoms_multiple):
        s = self.settings_or_default(settings)
        cyl = math.pi * s.rp_max ** 2 * 2.0 * s.pi_max
        # DD, DR and RR in every cone; three line-of-sight axes in the box
        return Cost(cone_volume=(1.0 + randoms_multiple) ** 2 * cyl, box_volume=3.0 * cyl)


STATISTIC = ProjectedCorrelation()
