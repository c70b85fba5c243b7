"""Checks and shared fields used by the statistics' settings classes.

Each statistic's frozen settings dataclass lives in the statistic's own module; its field
names are the config's ``[statistics.<name>]`` keys and every error names the key.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs.binning import check_rp_edges

EDGE_TREATMENTS = ("none", "drop")
RR_METHODS = ("full", "split")
DR_METHODS = ("full", "prefix")
#: Default ``split_above`` [Mpc/h] of the split RR: bins starting below it count every
#: random pair. ξ ≳ 1 below a few Mpc/h for typical galaxy samples, and Landy–Szalay passes
#: RR's relative noise on with a factor 1 − ξ (benchmarks/RESULTS.md measures the wp
#: variance against the full RR's).
SPLIT_ABOVE = 2.0


def positive(value: Any, key: str) -> float:
    """``value`` as a positive finite float, or an error naming ``key``."""
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{key}: expected a positive number, got {value!r}") from exc
    if not (np.isfinite(v) and v > 0):
        raise InputError(f"{key}: expected a positive number, got {value!r}")
    return v


def non_negative(value: Any, key: str) -> float:
    """``value`` as a finite float ≥ 0, or an error naming ``key``."""
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{key}: expected a number ≥ 0, got {value!r}") from exc
    if not (np.isfinite(v) and v >= 0):
        raise InputError(f"{key}: expected a number ≥ 0, got {value!r}")
    return v


def check_range_bins(key: str, name: str, lo: Any, hi: Any, n: Any, spacing: Any) -> None:
    """Validate generated bins ``{name}_min``, ``{name}_max``, ``n_{name}`` and
    ``{name}_spacing`` of table ``key`` (e.g. ``rp`` of ``statistics.wp``) [Mpc/h]."""
    if spacing not in ("log", "linear"):
        raise InputError(f"{key}.{name}_spacing: expected 'log' or 'linear', got {spacing!r}")
    if not (isinstance(n, (int, np.integer)) and n >= 1):
        raise InputError(f"{key}.n_{name}: expected a positive integer, got {n!r}")
    low = positive(lo, f"{key}.{name}_min")
    high = positive(hi, f"{key}.{name}_max")
    if high <= low:
        raise InputError(f"{key}: {name}_max = {high} must exceed {name}_min = {low} Mpc/h")


def range_edges(lo: float, hi: float, n: int, spacing: str,
                explicit: tuple[float, ...] | None) -> NDArray[np.float64]:
    """Bin edges [Mpc/h]: ``explicit`` when given, else ``n`` bins from ``lo`` to ``hi``,
    logarithmic or linear."""
    if explicit is not None:
        return np.asarray(explicit, dtype=np.float64)
    if spacing == "log":
        return np.geomspace(lo, hi, n + 1)
    return np.linspace(lo, hi, n + 1)


def fraction(value: Any, key: str) -> float:
    """``value`` as a float in (0, 1], or an error naming ``key``."""
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{key}: expected a number in (0, 1], got {value!r}") from exc
    if not (0 < v <= 1):
        raise InputError(f"{key}: expected a number in (0, 1], got {value!r}")
    return v


def count_edges(edges: Any, max_count: Any, key: str) -> NDArray[np.float64]:
    """Count bin edges: the explicit ``edges`` or unit bins centred on 0 … ``max_count``."""
    if edges is not None:
        return np.asarray(check_rp_edges(edges, f"{key}.count_edges"))
    if not (isinstance(max_count, (int, np.integer)) and max_count >= 0):
        raise InputError(f"{key}.max_count: expected a non-negative integer, got {max_count!r}")
    # unit bins centred on the integers 0 … max_count
    return np.arange(int(max_count) + 2, dtype=np.float64) - 0.5


@dataclass(frozen=True)
class CountSettings:
    """Shared fields of the counts-in-cylinders and counts-in-annuli distributions."""

    half_length: float = 10.0
    max_count: int = 30
    count_edges: tuple[float, ...] | None = None
    edge_treatment: str = "drop"
    min_inside_fraction: float = 0.99

    _key = "statistics"

    def _check_common(self) -> None:
        key = self._key
        positive(self.half_length, f"{key}.half_length")
        count_edges(self.count_edges, self.max_count, key)
        if self.edge_treatment not in EDGE_TREATMENTS:
            raise InputError(f"{key}.edge_treatment: expected one of {EDGE_TREATMENTS}, "
                             f"got {self.edge_treatment!r}")
        fraction(self.min_inside_fraction, f"{key}.min_inside_fraction")

    @property
    def edges(self) -> NDArray[np.float64]:
        """Count bin edges (weighted counts N lie in [edges[b], edges[b+1]))."""
        return count_edges(self.count_edges, self.max_count, self._key)
