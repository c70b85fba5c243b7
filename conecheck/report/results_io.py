"""results.json: writing (atomic, NaN → null) and reading with schema checks.

Schema (the lead's pipeline fills the top levels; see docs/design.md §8–9)::

    {"conecheck_version", "config_hash", "overall",
     "samples": {SAMPLE: {"mag_max", "volume_limit_zmax", "verdict", "fibres": {...},
         "cuts": {CUT: {"z_min", "z_max", "primary", "verdict", "nz": {...},
             "statistics": {STAT: <compare_statistic output>}}}}},
     "provenance": {...}, "footprint": {...}, "verdict_rules": {...}}

Only what the report cannot do without is required: ``conecheck_version``, ``overall``,
``samples`` and, per statistic, the keys of :data:`REQUIRED_STATISTIC_KEYS`. Other sections
are optional; the report says what is missing.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from ..atomic import write_text_atomic
from ..compare.jsonsafe import jsonable
from ..compare.rules import VERDICTS
from ..errors import InputError

REQUIRED_TOP_KEYS = ("conecheck_version", "overall", "samples")
REQUIRED_STATISTIC_KEYS = ("verdict", "bins", "box", "cone_mean", "cones", "sigma_box",
                           "sigma_cone", "sigma_total", "z", "max_abs_z", "chi2", "dof",
                           "p_value", "detectable_offset")


def results_to_json(results: dict[str, Any], path: str | os.PathLike[str]) -> None:
    """Write ``results`` to ``path`` atomically: NaN/±inf → null, keys unsorted, indent 1."""
    text = json.dumps(jsonable(results), indent=1, sort_keys=False, allow_nan=False,
                      ensure_ascii=False)
    write_text_atomic(path, text + "\n")


def check_results(results: Any, source: str = "results") -> list[str]:
    """Problems with the structure of a results dictionary (empty when usable)."""
    problems: list[str] = []
    if not isinstance(results, dict):
        return [f"{source}: expected a JSON object at the top level, got "
                f"{type(results).__name__}"]
    missing = [k for k in REQUIRED_TOP_KEYS if k not in results]
    if missing:
        problems.append(f"{source}: missing top-level key(s) {', '.join(missing)}")
    if "overall" in results and results["overall"] not in VERDICTS:
        problems.append(f"{source}: 'overall' must be one of {', '.join(VERDICTS)}, got "
                        f"{results['overall']!r}")
    samples = results.get("samples", {})
    if not isinstance(samples, dict):
        problems.append(f"{source}: 'samples' must be an object (sample name → results)")
        return problems
    for sname, sample in samples.items():
        where = f"{source}: samples.{sname}"
        if not isinstance(sample, dict):
            problems.append(f"{where}: expected an object")
            continue
        cuts = sample.get("cuts")
        if not isinstance(cuts, dict):
            problems.append(f"{where}: missing 'cuts' (redshift cut name → results)")
            continue
        for cname, cut in cuts.items():
            cw = f"{where}.cuts.{cname}"
            if not isinstance(cut, dict) or not isinstance(cut.get("statistics"), dict):
                problems.append(f"{cw}: missing 'statistics' (statistic name → results)")
                continue
            for stat, d in cut["statistics"].items():
                sw = f"{cw}.statistics.{stat}"
                if not isinstance(d, dict):
                    problems.append(f"{sw}: expected an object")
                    continue
                miss = [k for k in REQUIRED_STATISTIC_KEYS if k not in d]
                if miss:
                    problems.append(f"{sw}: missing key(s) {', '.join(miss)}")
                elif d["verdict"] not in VERDICTS:
                    problems.append(f"{sw}: verdict must be one of {', '.join(VERDICTS)}, "
                                    f"got {d['verdict']!r}")
                else:
                    problems += _statistic_type_problems(d, sw)
    for key in OPTIONAL_SECTIONS:
        if key in results and not isinstance(results[key], dict):
            problems.append(f"{source}: '{key}' must be an object, got "
                            f"{type(results[key]).__name__}")
    return problems


#: Top-level sections the report reads when present; each is a JSON object.
OPTIONAL_SECTIONS = ("provenance", "footprint", "verdict_rules", "ladder", "corrections",
                     "cuts", "targets")
#: Per-bin arrays of a statistic (numbers, or null for a missing value), one per bin.
_BIN_ARRAYS = ("box", "cone_mean", "sigma_box", "sigma_cone", "sigma_total", "z")
#: Bin-by-bin matrices of a statistic (optional).
_MATRICES = ("correlation_box", "correlation_cone")
#: Scalars of a statistic (a number or null).
_SCALARS = ("max_abs_z", "chi2", "dof", "p_value")


def _is_number(x: Any) -> bool:
    return x is None or (isinstance(x, (int, float)) and not isinstance(x, bool))


def _statistic_type_problems(d: dict[str, Any], where: str) -> list[str]:
    """Type problems of one statistic's entry: what an edit by hand can break."""
    out = []
    bins = d["bins"]
    n = len(bins) if isinstance(bins, list) else None
    if n is None:
        out.append(f"{where}.bins: expected a list, got {type(bins).__name__}")
    for k in _BIN_ARRAYS:
        v = d[k]
        if not (isinstance(v, list) and all(_is_number(x) for x in v)):
            out.append(f"{where}.{k}: expected a list of numbers (null for none), got "
                       f"{str(v)[:40]!r}")
        elif n is not None and len(v) != n:
            out.append(f"{where}.{k}: {len(v)} values for {n} bins")
    cones = d["cones"]
    if not (isinstance(cones, list) and all(
            isinstance(c, list) and all(_is_number(x) for x in c) for c in cones)):
        out.append(f"{where}.cones: expected a list of lists of numbers (one per cone)")
    elif n is not None and any(len(c) != n for c in cones):
        out.append(f"{where}.cones: every cone needs {n} values, one per bin")
    for k in _MATRICES:  # optional: older results carry none
        m = d.get(k)
        if m is None:
            continue
        if not (isinstance(m, list) and all(isinstance(r, list) and all(_is_number(x) for x in r)
                                            for r in m)):
            out.append(f"{where}.{k}: expected a matrix (list of lists of numbers)")
        elif n is not None and (len(m) != n or any(len(r) != n for r in m)):
            out.append(f"{where}.{k}: expected {n} × {n} values, one row per bin")
    for k in _SCALARS:
        if not _is_number(d[k]):
            out.append(f"{where}.{k}: expected a number or null, got {d[k]!r}")
    return out


def load_results(path: str | os.PathLike[str]) -> dict[str, Any]:
    """Read results.json and check its structure.

    Raises
    ------
    InputError
        File missing or not JSON, or required keys missing (every problem is named).
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: results file not found (is this a conecheck run "
                         f"directory?)") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read results file ({exc})") from None
    try:
        results = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: "
                         f"{exc.msg})") from None
    problems = check_results(results, str(path))
    if problems:
        raise InputError("; ".join(problems), problems=problems)
    return results
