"""Ratio of counts in two concentric cylinders around each galaxy, N_small / N_large.

For each galaxy (the centre) N_small and N_large are the weighted numbers of *other*
galaxies with r_p < R_small, |π| < H_small and r_p < R_large, |π| < H_large (box: LOS axis,
minimum image; cone: LOS at the centre–neighbour midpoint, as for the counts in
cylinders). The small cylinder lies inside the large one, so 0 ≤ N_small/N_large ≤ 1.
The statistic is the distribution of that ratio over the centres with
N_large ≥ ``min_large_count`` (the ratio of an empty cylinder is undefined); those left
out are reported as ``undefined_fraction``. The ratio measures how concentrated a
galaxy's neighbours are at fixed environment, which makes it sensitive to satellite
fractions and assembly bias while shot noise in N_large cancels to first order.

On Poisson points, given N_large = n, N_small is binomial with p = V_small/V_large
(tests/test_stats_count_ratio.py checks the measured distribution against that mixture).
Weights, normalisation, the cone edge treatment (applied to the large cylinder) and the
jackknife follow :mod:`._count_distribution`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs import neighbours_box, neighbours_cone
from ..pairs.binning import check_rp_edges
from ._common import check_filled, want_jackknife
from ._count_distribution import distribution, kept_centres
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import EDGE_TREATMENTS, fraction, positive
from .statistic import Cost, Display, Statistic

NAME = "count_ratio"
_KEY = f"statistics.{NAME}"


@dataclass(frozen=True)
class CountRatioSettings:
    """Distribution of the ratio N_small/N_large of counts in two concentric cylinders.

    Attributes
    ----------
    r_small, r_large : float
        Radii of the small and large cylinders [Mpc/h], r_small < r_large.
    half_length_small, half_length_large : float
        Half-lengths of the small and large cylinders [Mpc/h] (|π| < H),
        half_length_small ≤ half_length_large.
    n_ratio : int
        Number of equal ratio bins over [0, 1] (ignored when ``ratio_edges`` is given);
        the last bin includes a ratio of exactly 1.
    ratio_edges : tuple of float or None
        Explicit ratio bin edges inside [0, 1].
    min_large_count : float
        Centres with a weighted N_large below this are left out (their ratio is undefined
        or too coarse); at least 1.
    edge_treatment : {"none", "drop"}
        Cone only: drop centres whose large cylinder lies less than ``min_inside_fraction``
        inside the survey (default), or keep every centre.
    min_inside_fraction : float
        Threshold of the ``drop`` treatment (as for the counts in cylinders).
    """

    r_small: float = 2.0
    r_large: float = 5.0
    half_length_small: float = 10.0
    half_length_large: float = 10.0
    n_ratio: int = 10
    ratio_edges: tuple[float, ...] | None = None
    min_large_count: float = 1.0
    edge_treatment: str = "drop"
    min_inside_fraction: float = 0.99

    def __post_init__(self) -> None:
        rs = positive(self.r_small, f"{_KEY}.r_small")
        rl = positive(self.r_large, f"{_KEY}.r_large")
        if rs >= rl:
            raise InputError(f"{_KEY}: r_small = {rs:g} must be smaller than r_large = {rl:g} "
                             "Mpc/h (the small cylinder lies inside the large one)")
        hs = positive(self.half_length_small, f"{_KEY}.half_length_small")
        hl = positive(self.half_length_large, f"{_KEY}.half_length_large")
        if hs > hl:
            raise InputError(f"{_KEY}: half_length_small = {hs:g} must not exceed "
                             f"half_length_large = {hl:g} Mpc/h")
        if self.ratio_edges is None:
            if not (isinstance(self.n_ratio, (int, np.integer)) and self.n_ratio >= 1):
                raise InputError(f"{_KEY}.n_ratio: expected a positive integer, got "
                                 f"{self.n_ratio!r}")
        else:
            e = check_rp_edges(self.ratio_edges, f"{_KEY}.ratio_edges")
            if e[-1] > 1.0:
                raise InputError(f"{_KEY}.ratio_edges: a ratio lies in [0, 1], got edges up "
                                 f"to {e[-1]:g}")
            object.__setattr__(self, "ratio_edges", tuple(float(x) for x in e))
        m = float(self.min_large_count)
        if not (np.isfinite(m) and m >= 1):
            raise InputError(f"{_KEY}.min_large_count: expected a number ≥ 1, got "
                             f"{self.min_large_count!r}")
        if self.edge_treatment not in EDGE_TREATMENTS:
            raise InputError(f"{_KEY}.edge_treatment: expected one of {EDGE_TREATMENTS}, "
                             f"got {self.edge_treatment!r}")
        fraction(self.min_inside_fraction, f"{_KEY}.min_inside_fraction")

    @property
    def edges(self) -> NDArray[np.float64]:
        """Ratio bin edges; a last edge of 1 is moved just above 1 so the bin holds 1."""
        e = (np.linspace(0.0, 1.0, int(self.n_ratio) + 1) if self.ratio_edges is None
             else np.asarray(self.ratio_edges, dtype=np.float64))
        if e[-1] == 1.0:
            e = e.copy()
            e[-1] = np.nextafter(1.0, 2.0)
        return e

    @property
    def volume_ratio(self) -> float:
        """V_small / V_large of the two cylinders."""
        return (self.r_small ** 2 * self.half_length_small
                / (self.r_large ** 2 * self.half_length_large))


def _small_large(s: CountRatioSettings,
                 count: Callable[[list[float], float], NDArray[np.float64]]
                 ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Weighted (N_small, N_large) per centre from a neighbour counter ``count(edges, H)``;
    one pass over the neighbours when both cylinders have the same half-length."""
    if s.half_length_small == s.half_length_large:
        shells = count([0.0, s.r_small, s.r_large], s.half_length_large)
        return shells[:, 0], shells.sum(axis=1)
    return (count([0.0, s.r_small], s.half_length_small)[:, 0],
            count([0.0, s.r_large], s.half_length_large)[:, 0])


def _ratios(small: NDArray[np.float64], large: NDArray[np.float64], min_large: float
            ) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    defined = large >= min_large
    ratio = np.zeros_like(large)
    ratio[defined] = small[defined] / large[defined]
    return ratio, defined


def _measure(ratio: NDArray[np.float64], w: NDArray[np.float64], use: NDArray[np.bool_],
             region: NDArray[np.int64] | None, k: int, s: CountRatioSettings,
             extra: dict) -> Measurement:
    if not use.any():
        raise InputError(f"{NAME}: no centre has N_large ≥ {s.min_large_count:g} "
                         f"(r_large = {s.r_large:g} Mpc/h); use a larger cylinder")
    reg = None
    extra = dict(extra)
    if k:
        check_filled(region, k, "galaxies")
        reg = region[use]
        # A sparse sample can leave a small region without any centre of N_large ≥ the
        # floor: its delete-one value is then the full one, which is what removing it does.
        # The galaxies themselves must fill every region.
        empty = np.flatnonzero(np.bincount(reg, minlength=k) == 0)
        if k - empty.size < 2:
            raise InputError(f"{NAME}: only {k - empty.size} of {k} jackknife regions hold "
                             f"centres with N_large ≥ {s.min_large_count:g}; use a larger "
                             "r_large or fewer jackknife regions")
        extra["regions_without_centres"] = empty.tolist()
    extra["undefined_fraction"] = float(w[~use].sum() / w.sum()) if w.sum() > 0 else 0.0
    extra["volume_ratio"] = s.volume_ratio
    return distribution(NAME, ratio[use], w[use], reg, k, s.edges, extra,
                        bin_label="N_small/N_large", value_label="P(N_small/N_large)")


def count_ratio_box(sample: BoxSample, settings: CountRatioSettings | None = None, *,
                    jackknife: bool | None = None) -> Measurement:
    """Distribution of N_small/N_large around every galaxy of a periodic box."""
    s = settings or CountRatioSettings()
    jk = want_jackknife(jackknife, sample.n_regions, NAME)
    k = sample.n_regions if jk else 0
    small, large = _small_large(s, lambda edges, h: neighbours_box(
        sample.position, weights=sample.w, box_size=sample.box_size, los_axis=sample.los_axis,
        edges=edges, half_length=h))
    ratio, use = _ratios(small, large, s.min_large_count)
    return _measure(ratio, sample.w, use, sample.region if jk else None, k, s,
                    {"geometry": "box"})


def count_ratio_cone(sample: ConeSample, geometry: ConeGeometry | None = None,
                     settings: CountRatioSettings | None = None, *,
                     jackknife: bool | None = None) -> Measurement:
    """Distribution of N_small/N_large around the galaxies of a cone (midpoint LOS)."""
    s = settings or CountRatioSettings()
    jk = want_jackknife(jackknife, sample.n_regions, NAME)
    k = sample.n_regions if jk else 0
    xyz, w = sample.xyz, sample.w
    small, large = _small_large(s, lambda edges, h: neighbours_cone(
        xyz, weights=w, edges=edges, half_length=h))
    keep = kept_centres(NAME, sample, geometry, s.r_large, s.half_length_large,
                        s.edge_treatment, s.min_inside_fraction)
    ratio, defined = _ratios(small, large, s.min_large_count)
    return _measure(ratio, w, keep & defined, sample.region if jk else None, k, s,
                    {"geometry": "cone", "edge_treatment": s.edge_treatment,
                     "kept_fraction": float(keep.mean()) if keep.size else 0.0})


class CountRatio(Statistic):
    """P(N_small/N_large) around every galaxy."""

    name = NAME
    counts_in_cells = True
    settings_type = CountRatioSettings
    display = Display(title="count ratio P(N_small/N_large)", short="count ratio",
                      symbol="N_s/N_l", order=45)

    def n_bins(self, settings=None):
        return len(self.settings_or_default(settings).edges) - 1

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return count_ratio_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return count_ratio_cone(sample, geometry, settings, jackknife=jackknife)

    def cost(self, settings, randoms_multiple):
        s = self.settings_or_default(settings)
        v = math.pi * 2.0 * (s.r_small ** 2 * s.half_length_small
                             + s.r_large ** 2 * s.half_length_large)
        return Cost(cone_volume=v, box_volume=v)


STATISTIC = CountRatio()
