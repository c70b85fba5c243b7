"""The typed result of comparing one statistic: :class:`Comparison`.

Its field names are the keys of a statistic's entry in results.json, spelled here once:
:meth:`Comparison.to_dict` writes that entry (JSON-safe, NaN → null) and
:meth:`Comparison.from_dict` reads it back, so the comparison, the attribution stages and the
report read the same typed object whether it was just computed or loaded from a run
directory. The quantities are defined in :mod:`conecheck.compare.rules` and docs/design.md §8.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .jsonsafe import as_float, as_float_array, jsonable

Floats = NDArray[np.float64]
Ints = NDArray[np.int64]


@dataclass
class Comparison:
    """Box against cones for one sample, redshift cut and statistic, with its verdict.

    Arrays are per bin (p bins) unless stated; ``cones`` is (N cones, p); the correlation
    matrices are (p, p). Units are those of the statistic (``value_label``).

    Attributes
    ----------
    name, verdict, reasons, notes
        Statistic name; ``pass``/``warn``/``fail``; the verdict's reasons and further notes
        in words.
    bins, bin_edges, bin_label, value_label
        Bin centres (edges when the statistic has them) and axis labels.
    box, cone_mean, cones
        The box value b, the mean of the cones c̄ and every cone's value.
    offset, fractional_offset
        Δ = c̄ − b and Δ/b (NaN where b = 0).
    sigma_box, sigma_cone, sigma_total
        √diag of C_box, of the mean single-cone C_cone and of C_tot = C_box + C_cone.
    cone_scatter, cone_scatter_ratio
        √diag S (cone-to-cone) and diag S / diag C_cone; None with one cone.
    correlation_box, correlation_cone
        Correlation matrices of C_box and C_cone (NaN rows for bins without variance).
    z, max_abs_z
        Δ/σ_tot per bin and its largest absolute value (inf when an offset has no error).
    chi2, dof, chi2_per_dof, p_value, hartlap_factor, chi2_bins, condition_number,
    pseudo_inverse
        The bias χ² with the Hartlap factor, Hotelling's p-value, the bins it uses, the
        covariance's condition number and whether a pseudo-inverse was needed.
    n_regions, n_regions_box, n_regions_cone
        Jackknife regions (the smaller of box and cones enters the χ²).
    sigma_offset, sigma_offset_method, sigma_offset_dof, sigma_offset_los,
    sigma_offset_independent, n_eff_cones, offset_t, significance
        σ_Δ, how it was computed, its degrees of freedom per bin (None for the one-cone
        bound), the line-of-sight part, the independent-cones reference, the effective
        number of cones, Δ/σ_Δ and its Gaussian-equivalent significance.
    detectable_offset, detectable_fractional_offset, detectable_uniform_fraction
        Per bin the smallest |Δ| that would fail (and its ratio to |b|); the smallest
        fractional bias common to every bin that would fail.
    failing_bins, noisy_bins, real_small_bins, cones_needed
        Bins that fail; outside the error bar but not significant; significant but inside
        the error bar; cones that would settle the noisy bins (None: none would).
    n_cones, cones_independent
    first_failing_rung, largest_increment_rung
        Set by the effect ladder on the main results (None otherwise).
    """

    name: str
    verdict: str
    reasons: list[str]
    notes: list[str]
    bins: Floats
    bin_edges: Floats | None
    bin_label: str
    value_label: str
    box: Floats
    cone_mean: Floats
    cones: Floats
    offset: Floats
    fractional_offset: Floats
    sigma_box: Floats
    sigma_cone: Floats
    sigma_total: Floats
    cone_scatter: Floats | None
    correlation_box: Floats
    correlation_cone: Floats
    cone_scatter_ratio: Floats | None
    z: Floats
    max_abs_z: float
    chi2: float
    dof: int
    chi2_per_dof: float
    p_value: float
    hartlap_factor: float
    n_regions: int
    n_regions_box: int
    n_regions_cone: int
    chi2_bins: Ints
    condition_number: float
    pseudo_inverse: bool
    sigma_offset: Floats
    sigma_offset_method: Any
    sigma_offset_dof: list[float | None]
    sigma_offset_los: Floats
    sigma_offset_independent: Floats | None
    n_eff_cones: float
    offset_t: Floats
    significance: Floats
    detectable_offset: Floats
    detectable_fractional_offset: Floats
    detectable_uniform_fraction: float
    failing_bins: Ints
    noisy_bins: Ints
    real_small_bins: Ints
    cones_needed: int | None
    n_cones: int
    cones_independent: bool
    first_failing_rung: str | None = None
    largest_increment_rung: str | None = None

    # ----------------------------------------------------------------- edges
    def to_dict(self) -> dict[str, Any]:
        """The statistic's entry of results.json (JSON-safe; NaN and ±inf → None).

        The ladder's two annotations appear only once set, as before they existed.
        """
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        for key in _ANNOTATIONS:
            if out[key] is None:
                del out[key]
        return jsonable(out)

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Comparison:
        """Read a statistic's entry of results.json back (missing optional keys → None,
        missing numbers → NaN)."""
        kwargs = {}
        for f in dataclasses.fields(cls):
            raw = d.get(f.name)
            kind = _KIND.get(f.name, "raw")
            try:
                kwargs[f.name] = _READ[kind](raw)
            except (TypeError, ValueError):
                # a damaged entry (a ragged list, a string for a number): read as missing,
                # so a report of a damaged results.json says what is missing, not crashes
                kwargs[f.name] = _READ[kind](None)
        return cls(**kwargs)

    # ----------------------------------------------------------------- views
    @property
    def n_bins(self) -> int:
        """Number of bins p."""
        return int(np.size(self.box))


def comparison_keys() -> tuple[str, ...]:
    """The keys of a statistic's entry in results.json (without the ladder's annotations)."""
    return tuple(f.name for f in dataclasses.fields(Comparison) if f.name not in _ANNOTATIONS)


_ANNOTATIONS = ("first_failing_rung", "largest_increment_rung")

_FLOATS = ("bins", "box", "cone_mean", "cones", "offset", "fractional_offset", "sigma_box",
           "sigma_cone", "sigma_total", "correlation_box", "correlation_cone", "z",
           "sigma_offset", "sigma_offset_los", "offset_t", "significance", "detectable_offset",
           "detectable_fractional_offset")
_KIND = {
    **dict.fromkeys(_FLOATS, "floats"),
    **dict.fromkeys(("bin_edges", "cone_scatter", "cone_scatter_ratio",
                     "sigma_offset_independent"), "floats_or_none"),
    **dict.fromkeys(("chi2_bins", "failing_bins", "noisy_bins", "real_small_bins"), "ints"),
    **dict.fromkeys(("max_abs_z", "chi2", "chi2_per_dof", "p_value", "hartlap_factor",
                     "condition_number", "n_eff_cones", "detectable_uniform_fraction"),
                    "float"),
    **dict.fromkeys(("dof", "n_regions", "n_regions_box", "n_regions_cone", "n_cones"), "int"),
    **dict.fromkeys(("pseudo_inverse", "cones_independent"), "bool"),
    **dict.fromkeys(("name", "verdict", "bin_label", "value_label"), "str"),
    **dict.fromkeys(("reasons", "notes"), "strings"),
    "cones_needed": "int_or_none",
    "sigma_offset_dof": "list",
}


def _int(raw: Any) -> int:
    v = as_float(raw)
    return int(v) if math.isfinite(v) else 0


_READ = {
    "floats": as_float_array,
    "floats_or_none": lambda raw: None if raw is None else as_float_array(raw),
    "ints": lambda raw: np.asarray(raw if raw is not None else [], dtype=np.int64),
    "float": as_float,
    "int": _int,
    "int_or_none": lambda raw: None if raw is None else _int(raw),
    "bool": lambda raw: bool(raw),
    "str": lambda raw: "" if raw is None else str(raw),
    "strings": lambda raw: [str(x) for x in (raw or [])],
    "list": lambda raw: list(raw) if isinstance(raw, (list, tuple)) else raw,
    "raw": lambda raw: raw,
}


__all__ = ["Comparison", "comparison_keys"]
