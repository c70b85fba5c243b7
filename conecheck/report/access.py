"""Reading the results dictionary tolerantly: ordering, display names, number formats."""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..compare.comparison import Comparison
from ..compare.jsonsafe import as_float, as_float_array
from ..compare.rollup import Rollup, rollup
from ..stats import STATISTICS, Display


def display(name: str) -> Display:
    """How the report names and draws statistic ``name``: the registered statistic's
    :class:`~conecheck.stats.Display`, or plain names for a statistic this installation
    does not know (results written where a plug-in was installed)."""
    stat = STATISTICS.get(name)
    if stat is not None:
        return stat.display
    plain = name.replace("_", " ")
    return Display(title=plain, short=plain, symbol=plain, order=1_000_000)


def stat_symbol(name: str) -> str:
    """The statistic's symbol alone (narrow table columns)."""
    return display(name).symbol


#: A positive axis whose values span more than this ratio is drawn logarithmically.
LOG_AXIS_RATIO = 20.0


def wants_log_axis(values: NDArray[np.float64]) -> bool:
    """True when the finite ``values`` are all positive and span more than LOG_AXIS_RATIO."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    return bool(v.size and np.all(v > 0) and v.max() / v.min() > LOG_AXIS_RATIO)


def with_breaks(x: NDArray[np.float64], *ys: NDArray[np.float64]
                ) -> tuple[NDArray[np.float64], ...]:
    """``x`` and each ``y`` (last axis along x) with NaN inserted where x stops increasing.

    A data vector made of several pieces, each over its own increasing bins (e.g. ξ_0(s)
    then ξ_2(s)), is then drawn as separate curves instead of one zigzag.
    """
    x = np.asarray(x, dtype=float)
    at = np.flatnonzero(np.diff(x) <= 0) + 1
    if not at.size:
        return (x, *ys)
    return (np.insert(x, at, np.nan),
            *(np.insert(np.asarray(y, dtype=float), at, np.nan, axis=-1) for y in ys))


def stat_short(name: str) -> str:
    """Short name of a statistic key (tables)."""
    return display(name).short


def stat_title(name: str) -> str:
    """Readable name of a statistic key."""
    return display(name).title


def ordered_stats(stats: dict[str, Any]) -> list[str]:
    """Statistic keys in report order (unknown ones last, alphabetically)."""
    return sorted(stats, key=lambda s: (display(s).order, s))


def samples(results: dict[str, Any]) -> dict[str, Any]:
    s = results.get("samples")
    return s if isinstance(s, dict) else {}


def cuts(sample: dict[str, Any]) -> dict[str, Any]:
    c = sample.get("cuts")
    return c if isinstance(c, dict) else {}


def statistics(cut: dict[str, Any]) -> dict[str, Any]:
    s = cut.get("statistics")
    return s if isinstance(s, dict) else {}


def primary_cut(sample: dict[str, Any]) -> str | None:
    """Name of the sample's primary cut (the first cut when none is flagged)."""
    cs = cuts(sample)
    for name, cut in cs.items():
        if cut.get("primary"):
            return name
    return next(iter(cs), None)


def iter_stats(results: dict[str, Any]) -> Iterator[tuple[str, str, str, Comparison]]:
    """(sample, cut, statistic, its typed comparison) over the results, in report order."""
    for sname, sample in samples(results).items():
        for cname, cut in cuts(sample).items():
            stats = statistics(cut)
            for stat in ordered_stats(stats):
                yield sname, cname, stat, comparison(stats[stat])


def verdicts(results: dict[str, Any]) -> Rollup:
    """Every verdict of the results, typed (statistics, cuts, samples, overall)."""
    return rollup(results)


def single_bin(d: Mapping[str, Any] | Comparison) -> bool:
    """True for a statistic that is one number (drawn as box against cones, no curve)."""
    return comparison(d).bins.size == 1


def comparison(d: Mapping[str, Any] | Comparison) -> Comparison:
    """A statistic's entry of the results, typed (an entry already typed is returned)."""
    return d if isinstance(d, Comparison) else Comparison.from_dict(d or {})


def arr(d: dict[str, Any], key: str) -> NDArray[np.float64]:
    """A numeric list from the results as a float array (None → NaN; missing → empty)."""
    try:
        return as_float_array(d.get(key))
    except (TypeError, ValueError):
        return np.array([], dtype=np.float64)


def num(d: dict[str, Any], key: str) -> float:
    """A number from the results (None/missing → NaN)."""
    return as_float(d.get(key))


def fmt(x: float, digits: int = 3) -> str:
    """Compact number; "—" for NaN/None."""
    if x is None or not math.isfinite(x):
        return "∞" if x is not None and math.isinf(x) else "—"
    return f"{x:.{digits}g}"


def fmt_fixed(x: float, decimals: int = 2) -> str:
    if x is None or not math.isfinite(x):
        return "∞" if x is not None and math.isinf(x) else "—"
    return f"{x:.{decimals}f}"


def fmt_p(p: float) -> str:
    """p-value with sensible precision."""
    if p is None or not math.isfinite(p):
        return "—"
    if p < 1e-4:
        return f"{p:.1e}"
    return f"{p:.3f}" if p < 0.1 else f"{p:.2f}"


def fmt_pct(x: float) -> str:
    """Fraction as a percentage."""
    if x is None or not math.isfinite(x):
        return "—"
    v = 100 * x
    return f"{v:.2g} %" if abs(v) < 10 else f"{v:.0f} %"


def max_abs_z(stat: Mapping[str, Any] | Comparison) -> float:
    """max |z| of a statistic; ∞ when a flagged bin's z is null (offset with zero error)."""
    c = comparison(stat)
    if math.isnan(c.max_abs_z):
        z = c.z
        flagged = [int(i) for i in c.noisy_bins if 0 <= int(i) < z.size]
        if any(not np.isfinite(z[i]) for i in flagged):
            return math.inf
        z = z[np.isfinite(z)]
        return float(np.abs(z).max()) if z.size else math.nan
    return c.max_abs_z


def chi2_per_dof(stat: Mapping[str, Any] | Comparison) -> float:
    c = comparison(stat)
    return c.chi2 / c.dof if c.dof > 0 else math.nan


def detectable_fraction(stat: Mapping[str, Any] | Comparison) -> float:
    """Smallest fractional bias common to every bin that would fail (bins with b = 0 ignored).

    Read from ``detectable_uniform_fraction``; older results without it use the minimum of
    the per-bin detectable fractions.
    """
    c = comparison(stat)
    if math.isfinite(c.detectable_uniform_fraction):
        return c.detectable_uniform_fraction
    frac = c.detectable_fractional_offset
    if not frac.size:
        det, b = c.detectable_offset, c.box
        if det.size and det.size == b.size:
            with np.errstate(divide="ignore", invalid="ignore"):
                frac = np.where(b != 0, det / np.abs(b), np.nan)
    frac = frac[np.isfinite(frac)]
    return float(frac.min()) if frac.size else math.nan
