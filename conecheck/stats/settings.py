"""Frozen settings of each statistic; field names mirror the config's ``[statistics.*]`` keys.

Defaults follow docs/design.md §6 (π_max = 40 Mpc/h, Δπ = 1 Mpc/h, cylinders R = 2 Mpc/h,
half-length 10 Mpc/h: common practice).  Every error names the config key.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..loader import build_or_raise
from ..pairs.binning import RpPiBins, check_rp_edges, make_bins

EDGE_TREATMENTS = ("none", "drop")
RR_METHODS = ("full", "split")


def _positive(value: Any, key: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{key}: expected a positive number, got {value!r}") from exc
    if not (np.isfinite(v) and v > 0):
        raise InputError(f"{key}: expected a positive number, got {value!r}")
    return v


def _fraction(value: Any, key: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{key}: expected a number in (0, 1], got {value!r}") from exc
    if not (0 < v <= 1):
        raise InputError(f"{key}: expected a number in (0, 1], got {value!r}")
    return v


def _count_edges(count_edges: Any, max_count: Any, key: str) -> NDArray[np.float64]:
    if count_edges is not None:
        e = np.asarray(check_rp_edges(count_edges, f"{key}.count_edges"))
        return e
    if not (isinstance(max_count, (int, np.integer)) and max_count >= 0):
        raise InputError(f"{key}.max_count: expected a non-negative integer, got {max_count!r}")
    # unit bins centred on the integers 0 … max_count
    return np.arange(int(max_count) + 2, dtype=np.float64) - 0.5


@dataclass(frozen=True)
class NumberDensitySettings:
    """Number density has no settings; kept for a uniform interface."""


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
        RR from all random pairs, or only from pairs inside disjoint random subsets
        (Keihänen et al. 2019, A&A 631, A73).
    split_factor : float
        Size of each random subset of the split method, in units of the data size.
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

    def __post_init__(self) -> None:
        key = "statistics.wp"
        if self.rp_edges is None:
            if self.rp_spacing not in ("log", "linear"):
                raise InputError(f"{key}.rp_spacing: expected 'log' or 'linear', "
                                 f"got {self.rp_spacing!r}")
            if not (isinstance(self.n_rp, (int, np.integer)) and self.n_rp >= 1):
                raise InputError(f"{key}.n_rp: expected a positive integer, got {self.n_rp!r}")
            lo = _positive(self.rp_min, f"{key}.rp_min")
            hi = _positive(self.rp_max, f"{key}.rp_max")
            if hi <= lo:
                raise InputError(f"{key}: rp_max = {hi} must exceed rp_min = {lo} Mpc/h")
        else:
            object.__setattr__(self, "rp_edges", tuple(float(x) for x in
                                                       check_rp_edges(self.rp_edges,
                                                                      f"{key}.rp_edges")))
        if self.rr_method not in RR_METHODS:
            raise InputError(f"{key}.rr_method: expected one of {RR_METHODS}, "
                             f"got {self.rr_method!r}")
        _positive(self.split_factor, f"{key}.split_factor")
        try:
            self.bins  # noqa: B018 — validates pi_max / dpi
        except InputError as exc:
            raise InputError(f"{key}: {exc}") from exc

    @property
    def edges(self) -> NDArray[np.float64]:
        """r_p bin edges [Mpc/h]."""
        if self.rp_edges is not None:
            return np.asarray(self.rp_edges, dtype=np.float64)
        if self.rp_spacing == "log":
            return np.geomspace(self.rp_min, self.rp_max, self.n_rp + 1)
        return np.linspace(self.rp_min, self.rp_max, self.n_rp + 1)

    @property
    def bins(self) -> RpPiBins:
        return make_bins(self.edges, self.pi_max, self.dpi)


@dataclass(frozen=True)
class _CountSettings:
    """Shared fields of the counts-in-cylinders and counts-in-annuli distributions."""

    half_length: float = 10.0
    max_count: int = 30
    count_edges: tuple[float, ...] | None = None
    edge_treatment: str = "drop"
    min_inside_fraction: float = 0.99

    _key = "statistics"

    def _check_common(self) -> None:
        key = self._key
        _positive(self.half_length, f"{key}.half_length")
        _count_edges(self.count_edges, self.max_count, key)
        if self.edge_treatment not in EDGE_TREATMENTS:
            raise InputError(f"{key}.edge_treatment: expected one of {EDGE_TREATMENTS}, "
                             f"got {self.edge_treatment!r}")
        _fraction(self.min_inside_fraction, f"{key}.min_inside_fraction")

    @property
    def edges(self) -> NDArray[np.float64]:
        """Count bin edges (weighted counts N lie in [edges[b], edges[b+1]))."""
        return _count_edges(self.count_edges, self.max_count, self._key)


@dataclass(frozen=True)
class CicSettings(_CountSettings):
    """Counts in cylinders P(N_c).

    Attributes
    ----------
    r_cyl : float
        Cylinder radius R [Mpc/h] (r_p < R).
    half_length : float
        Cylinder half-length H [Mpc/h] (|π| < H).
    max_count : int
        Unit count bins centred on 0 … max_count (ignored when ``count_edges`` is given).
    count_edges : tuple of float or None
        Explicit count bin edges.
    edge_treatment : {"none", "drop"}
        Cone only: drop centres whose cylinder lies less than ``min_inside_fraction`` inside
        the survey (default: a cylinder cut by an edge holds fewer neighbours than in the
        box, which biases P(N) low), or keep every centre.
    min_inside_fraction : float
        Threshold of the ``drop`` treatment: the completeness-weighted fraction of the
        cylinder inside the survey (0.99: essentially whole, as the VPF's spheres).
    """

    r_cyl: float = 2.0
    _key = "statistics.cic"

    def __post_init__(self) -> None:
        _positive(self.r_cyl, f"{self._key}.r_cyl")
        self._check_common()


@dataclass(frozen=True)
class AnnuliSettings(_CountSettings):
    """Counts in annuli: distribution of neighbours with r_inner ≤ r_p < r_outer, |π| < H.

    Attributes
    ----------
    r_inner, r_outer : float
        Inner and outer radius of the annulus [Mpc/h] (r_inner ≤ r_p < r_outer).
    half_length : float
        Half-length H of the annular cylinder [Mpc/h] (|π| < H).
    max_count : int
        Unit count bins centred on 0 … max_count (ignored when ``count_edges`` is given).
    count_edges : tuple of float or None
        Explicit count bin edges.
    edge_treatment : {"none", "drop"}
        Cone only: drop centres whose annulus lies less than ``min_inside_fraction`` inside
        the survey (default, as for the cylinders), or keep every centre.
    min_inside_fraction : float
        Threshold of the ``drop`` treatment: the completeness-weighted fraction of the
        cylinder inside the survey (0.99: essentially whole, as the VPF's spheres).
    """

    r_inner: float = 2.0
    r_outer: float = 5.0
    _key = "statistics.annuli"

    def __post_init__(self) -> None:
        key = self._key
        if not (np.isfinite(float(self.r_inner)) and float(self.r_inner) >= 0):
            raise InputError(f"{key}.r_inner: expected a number ≥ 0, got {self.r_inner!r}")
        if _positive(self.r_outer, f"{key}.r_outer") <= float(self.r_inner):
            raise InputError(f"{key}: r_outer = {self.r_outer} must exceed "
                             f"r_inner = {self.r_inner} Mpc/h")
        self._check_common()


@dataclass(frozen=True)
class VpfSettings:
    """Void probability function P₀(R).

    Attributes
    ----------
    radii : tuple of float
        Sphere radii [Mpc/h], increasing.
    n_spheres : int
        Random sphere centres drawn per catalogue (a cone keeps those wholly inside).
    min_inside_fraction : float
        Cone only: a sphere counts as inside when its disc's footprint fraction reaches this
        and χ ± R lies inside the shell.
    """

    radii: tuple[float, ...] = (2.0, 4.0, 6.0, 8.0, 10.0, 12.0, 14.0, 16.0)
    n_spheres: int = 100_000
    min_inside_fraction: float = 0.99

    def __post_init__(self) -> None:
        key = "statistics.vpf"
        r = check_rp_edges(self.radii, f"{key}.radii")
        if r[0] <= 0:
            raise InputError(f"{key}.radii: radii must be > 0 Mpc/h, got {r.tolist()}")
        object.__setattr__(self, "radii", tuple(float(x) for x in r))
        if not (isinstance(self.n_spheres, (int, np.integer)) and self.n_spheres >= 1):
            raise InputError(f"{key}.n_spheres: expected a positive integer, "
                             f"got {self.n_spheres!r}")
        _fraction(self.min_inside_fraction, f"{key}.min_inside_fraction")


SETTINGS_TYPES: dict[str, type] = {
    "number_density": NumberDensitySettings,
    "wp": WpSettings,
    "cic": CicSettings,
    "vpf": VpfSettings,
    "annuli": AnnuliSettings,
}


def make_settings(name: str, values: Mapping[str, Any] | None = None) -> Any:
    """Settings of statistic ``name`` from a config mapping (unknown keys are an error)."""
    if name not in SETTINGS_TYPES:
        raise InputError(f"statistics: unknown statistic {name!r}; expected one of "
                         f"{sorted(SETTINGS_TYPES)}")
    return build_or_raise(SETTINGS_TYPES[name], dict(values or {}), f"statistics.{name}")
