"""Text pages: findings (why each verdict), the verdict rules, and provenance."""

from __future__ import annotations

import re
from dataclasses import fields
from typing import Any

from ..compare.rules import VERDICT_RULES_TEXT, VerdictRules
from . import access as ac
from . import style as st
from .layout import FlowLine, Page, draw_flow, flow_lines, paginate_flow
from .pagespec import PageSpec

_TOP = 1.0  # first line of flowing text [inch from the top]


_COLUMN_GAP = 0.3  # between the columns of a two-column text page [inch]


def _flow_pages(title: str, kind: str, blocks: list[tuple[str, ...]],
                columns: int = 1) -> list[PageSpec]:
    """Pages of flowing text, in one column or in ``columns`` side by side."""
    full = st.PAGE_W - 2 * st.MARGIN_X
    width = (full - (columns - 1) * _COLUMN_GAP) / columns
    height = st.PAGE_H - st.CONTENT_BOTTOM - _TOP - 0.1
    lines = flow_lines(blocks, width)
    chunks = paginate_flow(lines, height)
    pages = [chunks[i:i + columns] for i in range(0, len(chunks), columns)]
    specs = []
    for i, group in enumerate(pages):
        def draw(page: Page, group: list[list[FlowLine]] = group) -> None:
            for j, chunk in enumerate(group):
                draw_flow(page, chunk, _TOP, left=st.MARGIN_X + j * (width + _COLUMN_GAP))
        specs.append(PageSpec(title if i == 0 else f"{title} (continued)", kind, draw))
    return specs


# --------------------------------------------------------------------------- findings
def findings_pages(results: dict[str, Any]) -> list[PageSpec]:
    """Why every statistic got its verdict, with the comparison's notes."""
    blocks: list[tuple[str, ...]] = [
        ("muted", "For every sample, redshift cut and statistic: the verdict, the reasons the "
                  "rules gave, and notes from the comparison (dropped bins, fall-backs).")]
    last = None
    for sname, cname, stat, c in ac.iter_stats(results):
        if (sname, cname) != last:
            cut = ac.cuts(ac.samples(results)[sname])[cname]
            zr = ""
            if cut.get("z_min") is not None and cut.get("z_max") is not None:
                zr = f" ({ac.fmt(ac.num(cut, 'z_min'))} < z < {ac.fmt(ac.num(cut, 'z_max'))})"
            blocks.append(("h2", f"{sname} · {cname}{zr}" + (" · primary cut"
                                                              if cut.get("primary") else "")))
            method = c.sigma_offset_method
            if method:
                blocks.append(("muted", f"{c.n_cones or '—'} cones, "
                                        f"{c.n_regions or '—'} jackknife regions; "
                                        f"σ_Δ = √({str(method).split(': ', 1)[-1]})"))
            last = (sname, cname)
        v = c.verdict or None
        blocks.append(("h3", f"{ac.stat_title(stat)}: {str(v or 'no verdict').upper()}",
                       st.verdict_colour(v)))
        for r in c.reasons:
            blocks.append(("body", f"• {r}"))
        for n in c.notes:
            blocks.append(("muted", f"note: {n}"))
    if last is None:
        blocks.append(("body", "No statistics in these results."))
    return _flow_pages("Findings: why each verdict", "findings", blocks)


# --------------------------------------------------------------------------- rules
def _rst_blocks(text: str) -> list[tuple[str, str]]:
    """Turn the rules text (reST-like, hard-wrapped) into flow blocks."""
    text = text.replace("``", "")
    paras = re.split(r"\n\s*\n", text.strip())
    blocks: list[tuple[str, str]] = []
    for para in paras:
        lines = para.split("\n")
        if len(lines) >= 2 and set(lines[1].strip()) == {"-"}:
            lines = lines[2:]
            if not lines:
                continue
        items: list[str] = []
        for line in lines:
            s = line.strip()
            if re.match(r"^[*-] ", s):
                items.append(("• " if s[0] == "*" else "  – ") + s[2:])
            elif items:
                items[-1] += " " + s
            else:
                items.append(s)
        for it in items:
            if len(items) == 1 and len(it) < 40 and not it.startswith(("•", "  –")):
                blocks.append(("h3", it))
            else:
                blocks.append(("body", it))
    return blocks


def rules_pages(results: dict[str, Any]) -> list[PageSpec]:
    """The verdict rules as configured for this run, and how they work."""
    rules = results.get("verdict_rules")
    recorded = isinstance(rules, dict) and bool(rules)
    rules = rules if recorded else VerdictRules().to_dict()
    blocks: list[tuple[str, ...]] = [("h2", "Thresholds in force")]
    if not recorded:
        blocks.append(("muted", "results.json records no verdict rules; the defaults are "
                                "shown."))
    names = [f.name for f in fields(VerdictRules)]
    for k in names + sorted(set(rules) - set(names)):
        if k in rules:
            blocks.append(("mono", f"{k} = {rules[k]}"))
    blocks.append(("h2", "The rules"))
    blocks.extend(_rst_blocks(VERDICT_RULES_TEXT))
    return _flow_pages("How the verdicts are made", "rules", blocks)


# --------------------------------------------------------------------------- provenance
def _kv(d: dict[str, Any], unit: str = "") -> list[tuple[str, str]]:
    out = []
    for k, v in d.items():
        if isinstance(v, float):
            v = f"{v:.4g}"
        out.append(("mono", f"{k}: {v}{unit}"))
    return out


def _duration(seconds: Any) -> str:
    s = ac.as_float(seconds) if not isinstance(seconds, (int, float)) else float(seconds)
    if s != s:
        return str(seconds)
    if s < 120:
        return f"{s:.1f} s"
    if s < 7200:
        return f"{s / 60:.1f} min"
    return f"{s / 3600:.2f} h"


def _replicas(reps: list[Any]) -> str:
    nums = [int(r) for r in reps if isinstance(r, (int, float))]
    if not nums:
        return "not recorded"
    return (f"{min(nums)}–{max(nums)} per cone (mean {sum(nums) / len(nums):.1f}, "
            f"{len(nums)} cones)")


def provenance_pages(results: dict[str, Any]) -> list[PageSpec]:
    """What a referee needs to repeat the run, on one page; the configuration is appended.

    Command, output directory, extensions, versions, input hashes, seeds, cones, replicas
    and timings; the resolved configuration is the report's last pages
    (:func:`config_appendix_pages`).
    """
    prov = results.get("provenance")
    blocks: list[tuple[str, ...]] = []
    if not isinstance(prov, dict) or not prov:
        blocks.append(("body", "results.json records no provenance section: the "
                               "configuration, input files, versions and seeds of this run "
                               "are unknown."))
        return _flow_pages("Provenance", "provenance", blocks)
    blocks.append(("h2", "Run"))
    ext = prov.get("extensions")
    run = {"command": prov.get("command") or "not recorded",
           "output directory": prov.get("output_dir", "not recorded"),
           "date": prov.get("date", "not recorded"),
           "conecheck version": results.get("conecheck_version", "not recorded"),
           "configuration": f"{prov.get('config_path', 'not recorded')} (hash "
                            f"{str(results.get('config_hash', 'not recorded'))[:16]}; resolved "
                            f"in the appendix and in config.resolved.toml)",
           "extensions run": (", ".join(ext) or "none") if isinstance(ext, list)
           else "not recorded",
           "light cones": prov.get("n_cones", "not recorded")}
    reps = prov.get("replicas_per_cone")
    if isinstance(reps, list) and reps:
        run["box replicas"] = _replicas(reps)
    run["cones independent"] = ("yes (stated by the user)" if prov.get("cones_independent")
                                else "no (cut from one box; they share its structure)")
    blocks.extend(_kv(run))
    if isinstance(prov.get("box"), dict) and prov["box"]:
        blocks.append(("h2", "The box"))
        blocks.append(("mono", " · ".join(f"{k} {_short(v)}" for k, v in prov["box"].items())))
    if isinstance(prov.get("seeds"), dict) and prov["seeds"]:
        blocks.append(("h2", "Random seeds"))
        blocks.append(("mono", " · ".join(f"{k} {v}" for k, v in prov["seeds"].items())))
    timings = prov.get("timings")
    if isinstance(timings, dict) and timings:
        blocks.append(("h2", "Stage timings"))
        parts = [f"{k} {_duration(v)}" for k, v in timings.items()]
        if not any(str(k).startswith("total") for k in timings):  # a run records its own
            try:
                parts.append(f"total {_duration(sum(float(v) for v in timings.values()))}")
            except (TypeError, ValueError):
                pass
        blocks.append(("mono", " · ".join(parts)))
    files = prov.get("input_files")
    blocks.append(("h2", "Input files (SHA-256)"))
    if isinstance(files, dict) and files:
        for path, digest in files.items():
            blocks.append(("mono", f"{digest}  {path}"))
    else:
        blocks.append(("muted", "none recorded"))
    versions = prov.get("versions")
    blocks.append(("h2", "Package versions"))
    if isinstance(versions, dict) and versions:
        blocks.append(("mono", " · ".join(f"{k} {v}" for k, v in versions.items())))
    else:
        blocks.append(("muted", "none recorded"))
    if prov.get("independence_note"):
        blocks.append(("h2", "Independence of the cones"))
        blocks.append(("muted", str(prov["independence_note"])))
    return _flow_pages("Provenance", "provenance", blocks)


def _short(v: Any) -> str:
    return f"{v:.4g}" if isinstance(v, float) else str(v)


def config_appendix_pages(results: dict[str, Any]) -> list[PageSpec]:
    """Appendix: the run's resolved configuration (every default filled in), two columns."""
    prov = results.get("provenance") if isinstance(results.get("provenance"), dict) else {}
    text = prov.get("resolved_config") or prov.get("config_text")
    if not text:
        return []
    label = ("every default filled in" if prov.get("resolved_config")
             else "the configuration file as given")
    blocks: list[tuple[str, ...]] = [("muted", f"The configuration of this run, {label}.")]
    blocks += [("mono", line) for line in str(text).rstrip("\n").splitlines()]
    return _flow_pages("Appendix: configuration", "appendix", blocks, columns=2)
