"""Comparison stage: offsets, error budgets, χ² and verdicts (docs/design.md §8).

Everything here works from :class:`~conecheck.stats.base.Measurement` objects (one
statistic) and from the results dictionary (roll-up), never from catalogues. The verdict
rules are documented in :mod:`conecheck.compare.rules` (:data:`VERDICT_RULES_TEXT`).
"""

from .chi2 import MAX_CONDITION, Chi2Result, bias_chi2, hartlap_factor, min_regions_needed
from .comparison import Comparison, comparison_keys
from .jsonsafe import as_float, as_float_array, jsonable
from .offset_error import (
    SIGMA_OFFSET_INDEPENDENT,
    SIGMA_OFFSET_SCATTER,
    SIGMA_OFFSET_SHARED,
    OffsetError,
    cones_needed,
    critical_t,
    gaussian_equivalent,
    offset_error,
)
from .rollup import Rollup, rollup, rollup_verdicts
from .rules import (
    FAIL,
    PASS,
    VERDICT_RULES_TEXT,
    VERDICTS,
    WARN,
    VerdictRules,
    check_verdict,
    exit_code,
    worst_verdict,
)
from .statistic import Decision, ErrorBudget, compare_statistic, decide, error_budget

__all__ = [
    "Comparison", "Decision", "ErrorBudget", "Rollup", "comparison_keys", "decide",
    "error_budget", "rollup",
    "FAIL", "MAX_CONDITION", "PASS", "SIGMA_OFFSET_INDEPENDENT", "SIGMA_OFFSET_SCATTER",
    "SIGMA_OFFSET_SHARED", "OffsetError", "cones_needed", "critical_t", "gaussian_equivalent",
    "offset_error",
    "VERDICTS", "VERDICT_RULES_TEXT", "WARN", "Chi2Result", "VerdictRules", "as_float",
    "as_float_array", "bias_chi2", "check_verdict", "compare_statistic", "exit_code",
    "hartlap_factor", "jsonable", "min_regions_needed", "rollup_verdicts", "worst_verdict",
]
