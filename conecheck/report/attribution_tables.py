"""ECSV tables of the attribution sections (beside the main run's tables).

Layout under the run's ``tables/`` directory:

* ``ladder/<rung>/<sample>__<cut>__<statistic>.ecsv`` — every rung compared with the box
  (the columns of the main tables);
* ``ladder/increments/<sample>__<cut>__<statistic>.ecsv`` — per bin the total offset, the
  sum of increments and, per rung, ``increment_<rung>`` and ``sigma_<rung>``;
* ``corrections/<variant>/…`` — every correction and the uncollided truth against the box;
* ``corrections/vs_truth/<sample>__<cut>__<statistic>.ecsv`` — per correction
  ``offset_<name>`` (against the truth of the same cones) and ``sigma_<name>``;
* ``cuts/<sample>/…`` — every swept cut against the box, and ``cuts/<sample>__summary.ecsv``
  with one row per cut.
"""

from __future__ import annotations

import math
import os
import re
from pathlib import Path
from typing import Any

import numpy as np
from astropy.table import Table

from ..atomic import atomic_path
from ..compare.jsonsafe import as_float_array
from .access import comparison, ordered_stats
from .tables import table_name, write_statistic_tables


def _safe(name: str) -> str:
    """A directory-name-safe version of a rung, variant or sample name."""
    return re.sub(r"[^A-Za-z0-9._+-]+", "_", str(name)).strip("_") or "unnamed"


def _write(t: Table, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp:
        t.write(tmp, format="ascii.ecsv", overwrite=True)
    return path


def _column(values: Any, p: int) -> np.ndarray:
    v = as_float_array(values)
    return v if v.size == p else np.full(p, np.nan)


def _ladder(ladder: dict[str, Any], out: Path) -> list[Path]:
    written = []
    for rung in ladder.get("rungs", []):
        written += write_statistic_tables({"samples": rung.get("samples", {})},
                                          out / _safe(rung["name"]))
    for sname, cuts in (ladder.get("attribution") or {}).items():
        for cname, stats in cuts.items():
            for stat, a in stats.items():
                bins = as_float_array(a.get("bins"))
                p = bins.size
                t = Table()
                t["bin"] = bins
                for key in ("box", "total_offset", "sum_of_increments"):
                    t[key] = _column(a.get(key), p)
                for name, inc in a.get("increments", {}).items():
                    t[f"increment_{name}"] = _column(inc.get("increment"), p)
                    t[f"sigma_{name}"] = _column(inc.get("sigma_increment"), p)
                t.meta.update({"sample": sname, "cut": cname, "statistic": stat,
                               "rungs": list(a.get("rungs", [])),
                               "first_failing_rung": a.get("first_failing_rung") or "",
                               "largest_increment_rung": a.get("largest_increment_rung") or "",
                               "bin_label": a.get("bin_label", "")})
                written.append(_write(t, out / "increments" / table_name(sname, cname, stat)))
    return written


def _corrections(section: dict[str, Any], out: Path) -> list[Path]:
    written = []
    for name, v in (section.get("variants") or {}).items():
        written += write_statistic_tables({"samples": v.get("samples", {})}, out / _safe(name))
    for sname, cuts in (section.get("against_truth") or {}).items():
        for cname, stats in cuts.items():
            for stat, entry in stats.items():
                per = entry.get("corrections", {})
                ref = section["variants"][section.get("truth", "uncollided")]["samples"]
                bins = comparison(ref[sname]["cuts"][cname]["statistics"][stat]).bins
                p = bins.size
                t = Table()
                t["bin"] = bins
                for name, d in per.items():
                    t[f"offset_{name}"] = _column(d.get("increment"), p)
                    t[f"sigma_{name}"] = _column(d.get("sigma_increment"), p)
                t.meta.update({"sample": sname, "cut": cname, "statistic": stat,
                               "reference": "uncollided truth of the same cones",
                               "closest_to_truth": entry.get("closest_to_truth") or ""})
                written.append(_write(t, out / "vs_truth" / table_name(sname, cname, stat)))
    return written


def _cuts(section: dict[str, Any], out: Path) -> list[Path]:
    written = []
    for sname, s in (section.get("samples") or {}).items():
        written += write_statistic_tables({"samples": {sname: s}}, out / _safe(sname))
        cuts = s.get("cuts", {})
        labels = s.get("order") or list(cuts)
        stats = ordered_stats(next(iter(cuts.values()), {}).get("statistics", {}))
        t = Table()
        t["label"] = labels
        for key in ("z_min", "z_max", "volume_per_sr", "max_abs_z"):
            t[key] = [np.nan if cuts[c].get(key) is None else float(cuts[c][key])
                      for c in labels]
        t["source"] = [str(cuts[c].get("source", "")) for c in labels]
        t["verdict"] = [str(cuts[c].get("verdict", "")) for c in labels]
        for stat in stats:
            recs = [comparison(cuts[c]["statistics"].get(stat, {})) for c in labels]
            t[f"verdict_{stat}"] = [r.verdict for r in recs]
            t[f"max_abs_z_{stat}"] = [r.max_abs_z if math.isfinite(r.max_abs_z) else np.nan
                                      for r in recs]
            t[f"chi2_{stat}"] = [r.chi2 for r in recs]
        t.meta.update({"sample": sname, "widest_passing": s.get("widest_passing") or "",
                       "widest_not_failing": s.get("widest_not_failing") or ""})
        written.append(_write(t, out / f"{_safe(sname)}__summary.ecsv"))
    return written


def write_attribution_tables(results: dict[str, Any], outdir: str | os.PathLike[str]
                             ) -> list[Path]:
    """Write the tables of whichever attribution sections ``results`` holds.

    Returns
    -------
    list of Path
        The files written (none when no attribution section is present).
    """
    out = Path(outdir)
    written: list[Path] = []
    if isinstance(results.get("ladder"), dict):
        written += _ladder(results["ladder"], out / "ladder")
    if isinstance(results.get("corrections"), dict):
        written += _corrections(results["corrections"], out / "corrections")
    if isinstance(results.get("cuts"), dict):
        written += _cuts(results["cuts"], out / "cuts")
    return written


__all__ = ["write_attribution_tables"]
