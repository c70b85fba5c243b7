"""A plain-text account of the attribution sections for the end of a run."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

from . import access as ac
from .attribution_tables import write_attribution_tables


def _ladder_lines(ladder: dict[str, Any]) -> list[str]:
    rungs = {r["name"]: r.get("short", r["name"]) for r in ladder.get("rungs", [])}
    lines = ["effect ladder: " + " -> ".join(rungs.values())]
    failing = []
    for sname, cuts in (ladder.get("attribution") or {}).items():
        for cname, stats in cuts.items():
            for stat in ac.ordered_stats(stats):
                a = stats[stat]
                if a.get("first_failing_rung"):
                    failing.append(f"  {sname} {cname} {stat}: fails from "
                                   f"{rungs.get(a['first_failing_rung'], '?')} on (largest "
                                   f"increment: {rungs.get(a.get('largest_increment_rung'), '-')})")
    lines += failing or ["  no laddered statistic fails on the full survey"]
    for s in ladder.get("skipped", []):
        lines.append(f"  (step {s['step']} skipped: {s['reason']})")
    return lines


def _correction_lines(section: dict[str, Any]) -> list[str]:
    if section.get("skipped"):
        return [f"corrections: not compared ({section['skipped']})"]
    lines = ["corrections closest to the uncollided truth (max |offset| / sigma_tot):"]
    for sname, cuts in (section.get("against_truth") or {}).items():
        for cname, stats in cuts.items():
            for stat in ac.ordered_stats(stats):
                e = stats[stat]
                parts = [f"{n} {ac.fmt_fixed(ac.num(d, 'max_abs_in_total_sigma'))}"
                         for n, d in e["corrections"].items()]
                lines.append(f"  {sname} {cname} {stat}: {e.get('closest_to_truth')} "
                             f"({', '.join(parts)})".replace("—", "-"))
    return lines


def _cut_lines(section: dict[str, Any]) -> list[str]:
    lines = ["redshift-cut sweep:"]
    for sname, s in (section.get("samples") or {}).items():
        cuts = s.get("cuts", {})

        def rng(label: str | None, cuts: dict[str, Any] = cuts) -> str:
            c = cuts.get(label or "", {})
            return f"{label} ({ac.fmt(ac.num(c, 'z_min'))}-{ac.fmt(ac.num(c, 'z_max'))})"
        n_pass = sum(c.get("verdict") == "pass" for c in cuts.values())
        if s.get("widest_passing"):
            lines.append(f"  {sname}: widest passing cut {rng(s['widest_passing'])}; "
                         f"{n_pass} of {len(cuts)} cuts pass")
        elif s.get("widest_not_failing"):
            lines.append(f"  {sname}: no cut passes; widest cut not failing "
                         f"{rng(s['widest_not_failing'])}")
        elif cuts:
            lines.append(f"  {sname}: every cut fails")
        for label, reason in (s.get("skipped") or {}).items():
            lines.append(f"  {sname}: cut {label} skipped ({reason})")
    return lines


def attribution_summary(results: dict[str, Any]) -> str:
    """The ladder, correction and cut-sweep findings as text ("" when none ran)."""
    out: list[str] = []
    for key, what in (("ladder", "effect ladder"), ("corrections", "corrections"),
                      ("cuts", "redshift-cut sweep")):
        if isinstance(results.get(key), dict) and results[key].get("error"):
            out.append(f"{what}: not completed ({results[key]['error']})")
    results = {k: v for k, v in results.items()
               if not (isinstance(v, dict) and v.get("error"))}
    if isinstance(results.get("ladder"), dict):
        out += _ladder_lines(results["ladder"])
    if isinstance(results.get("corrections"), dict):
        out += _correction_lines(results["corrections"])
    if isinstance(results.get("cuts"), dict):
        out += _cut_lines(results["cuts"])
    return "\n".join(out)


__all__ = ["attribution_summary", "finish_attribution"]


def finish_attribution(results: dict[str, Any], run_dir: str | Path, stream: Any = None) -> None:
    """After a run: write the attribution tables and print their summary (if any ran)."""
    text = attribution_summary(results)
    if not text:
        return
    write_attribution_tables(results, Path(run_dir) / "tables")
    print("\n" + text, file=stream or sys.stdout)
