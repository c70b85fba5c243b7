"""validation.html: the report as one self-contained web page (no server, no network).

Written from the results dictionary like the PDF, from the same planned pages: the verdict
table is HTML (sortable by any column, filterable by sample, cut, statistic and verdict),
each row opens its reasons and links to the figures of its sample and cut; the figures are
the PDF's pages as inline vector SVG; provenance and the configuration are collapsed at the
end. Everything — style, script, figures — is inside the one file.
"""

from __future__ import annotations

import html
import logging
import os
import re
from typing import Any

from ..atomic import write_text_atomic
from ..version import __version__
from . import access as ac
from . import style as st
from .pages_summary import overall_answer
from .pagespec import PageSpec
from .render import build_pages, draw_page, page_svg

log = logging.getLogger(__name__)

_CSS = f"""
body {{ font-family: "DejaVu Sans", Helvetica, Arial, sans-serif; color: {st.INK};
       margin: 0 auto; max-width: 62rem; padding: 1.5rem; line-height: 1.4; }}
h1 {{ font-size: 1.5rem; border-bottom: 2px solid {st.INK}; padding-bottom: .3rem; }}
h2 {{ font-size: 1.2rem; margin-top: 2rem; }}
.muted {{ color: {st.MUTED}; font-size: .9rem; }}
.overall {{ display: inline-block; padding: .3rem .9rem; font-weight: bold; font-size: 1.4rem;
           color: white; border-radius: 3px; }}
table {{ border-collapse: collapse; width: 100%; font-size: .92rem; }}
th, td {{ padding: .25rem .5rem; border-bottom: 1px solid {st.RULE}; text-align: left; }}
th {{ cursor: pointer; user-select: none; background: {st.BAND}; }}
th[aria-sort="ascending"]::after {{ content: " ▲"; }}
th[aria-sort="descending"]::after {{ content: " ▼"; }}
td.num {{ text-align: right; font-variant-numeric: tabular-nums; }}
td.verdict {{ font-weight: bold; text-align: center; }}
tr.reasons td {{ background: #fafafa; font-size: .88rem; }}
.filters label {{ margin-right: 1rem; }}
figure {{ margin: 1rem 0 2rem; border-top: 1px solid {st.RULE}; padding-top: .5rem; }}
figure svg {{ width: 100%; height: auto; }}
figcaption {{ font-weight: bold; margin-bottom: .3rem; }}
pre {{ font-size: .8rem; background: {st.BAND}; padding: .6rem; overflow-x: auto; }}
details {{ margin: 1rem 0; }}
summary {{ cursor: pointer; font-weight: bold; }}
"""

# Sorting compares numbers numerically (a missing value sorts last) and text otherwise;
# filters hide rows (and their reason rows) whose cells do not match every chosen value.
_SCRIPT = """
(function () {
  const table = document.getElementById("verdicts");
  const body = table.tBodies[0];
  const pairs = () => Array.from(body.querySelectorAll("tr.row")).map(
    r => [r, document.getElementById(r.dataset.reasons)]);
  table.querySelectorAll("th").forEach((th, col) => th.addEventListener("click", () => {
    const up = th.getAttribute("aria-sort") !== "ascending";
    table.querySelectorAll("th").forEach(h => h.removeAttribute("aria-sort"));
    th.setAttribute("aria-sort", up ? "ascending" : "descending");
    const key = r => r.cells[col].dataset.sort ?? r.cells[col].textContent;
    const items = pairs();
    items.sort((a, b) => {
      const x = key(a[0]), y = key(b[0]);
      const nx = parseFloat(x), ny = parseFloat(y);
      let c;
      if (!isNaN(nx) || !isNaN(ny)) {
        c = (isNaN(nx) ? Infinity : nx) - (isNaN(ny) ? Infinity : ny);
      } else { c = x.localeCompare(y); }
      return up ? c : -c;
    });
    items.forEach(([r, why]) => { body.appendChild(r); body.appendChild(why); });
  }));
  const selects = document.querySelectorAll("select.filter");
  const apply = () => {
    pairs().forEach(([r, why]) => {
      const show = Array.from(selects).every(
        s => s.value === "" || r.dataset[s.name] === s.value);
      r.hidden = !show;
      why.hidden = !show || !r.classList.contains("open");
    });
  };
  selects.forEach(s => s.addEventListener("change", apply));
  body.addEventListener("click", e => {
    const r = e.target.closest("tr.row");
    if (!r || e.target.closest("a")) { return; }
    r.classList.toggle("open");
    document.getElementById(r.dataset.reasons).hidden = !r.classList.contains("open");
  });
})();
"""


#: Sorting by verdict puts the failures first.
_VERDICT_ORDER = {"fail": 0, "warn": 1, "pass": 2}


def _e(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _anchor(text: str) -> str:
    """An HTML id from free text (stable: the same text gives the same id)."""
    return "p-" + re.sub(r"[^A-Za-z0-9_-]+", "-", text).strip("-").lower()


def _svg(results: dict[str, Any], spec: PageSpec, page_no: int, n_pages: int) -> str:
    """One planned page drawn and written as inline SVG."""
    fig = draw_page(results, spec, page_no, n_pages)
    try:
        return page_svg(fig)
    finally:
        fig.clear()


def _verdict_rows(results: dict[str, Any],
                  figure_ids: dict[tuple[str, str], list[tuple[str, str]]]) -> list[str]:
    rows = []
    for i, (sname, cname, stat, c) in enumerate(ac.iter_stats(results)):
        verdict = c.verdict or "none"
        colour = st.verdict_colour(c.verdict or None)
        tint = st.VERDICT_TINTS.get(verdict, st.UNKNOWN_TINT)
        cut = ac.cuts(ac.samples(results)[sname])[cname]
        z, chi, p = ac.max_abs_z(c), ac.chi2_per_dof(c), c.p_value
        det = ac.detectable_fraction(c)
        links = " · ".join(f'<a href="#{_e(a)}">{_e(label)}</a>'
                           for a, label in figure_ids.get((sname, cname), []))
        rid = f"why-{i}"
        cells = [
            f'<td>{_e(sname)}</td>',
            f'<td>{_e(cname)}{" ★" if cut.get("primary") else ""}</td>',
            f'<td>{_e(ac.stat_short(stat))}</td>',
            f'<td class="verdict" style="background:{tint};color:{colour}" '
            f'data-sort="{_VERDICT_ORDER.get(verdict, len(_VERDICT_ORDER))}">'
            f'{_e(verdict.upper())}</td>',
            f'<td class="num" data-sort="{z}">{_e(ac.fmt_fixed(z))}</td>',
            f'<td class="num" data-sort="{chi}">{_e(ac.fmt_fixed(chi))}</td>',
            f'<td class="num" data-sort="{p}">{_e(ac.fmt_p(p))}</td>',
            f'<td class="num" data-sort="{det}">{_e(ac.fmt_pct(det))}</td>',
            f'<td>{links}</td>']
        rows.append(f'<tr class="row" data-sample="{_e(sname)}" data-cut="{_e(cname)}" '
                    f'data-statistic="{_e(ac.stat_short(stat))}" data-verdict="{_e(verdict)}" '
                    f'data-reasons="{rid}">' + "".join(cells) + "</tr>")
        why = "".join(f"<li>{_e(r)}</li>" for r in c.reasons)
        why += "".join(f'<li class="muted">note: {_e(n)}</li>' for n in c.notes)
        rows.append(f'<tr class="reasons" id="{rid}" hidden><td colspan="9"><ul>{why}</ul>'
                    f"</td></tr>")
    return rows


def _filter(name: str, label: str, values: list[str]) -> str:
    opts = "".join(f'<option value="{_e(v)}">{_e(v)}</option>' for v in dict.fromkeys(values))
    return (f'<label>{_e(label)} <select class="filter" name="{name}">'
            f'<option value="">all</option>{opts}</select></label>')


def _provenance(results: dict[str, Any]) -> str:
    prov = results.get("provenance") if isinstance(results.get("provenance"), dict) else {}
    keep = {k: v for k, v in prov.items()
            if k not in ("config_text", "resolved_config", "independence_note")}
    lines = []
    for k, v in keep.items():
        if isinstance(v, dict):
            v = ", ".join(f"{kk}: {vv}" for kk, vv in v.items())
        lines.append(f"{k}: {v}")
    config = prov.get("resolved_config") or prov.get("config_text") or "not recorded"
    return ("<details><summary>Provenance</summary><pre>" + _e("\n".join(lines))
            + "</pre></details><details><summary>Configuration (every default filled in)"
              "</summary><pre>" + _e(config) + "</pre></details>")


def render_html(results: dict[str, Any], run_dir: str | os.PathLike[str] | None,
                out_html: str | os.PathLike[str], pages: list[PageSpec] | None = None,
                svgs: dict[int, str] | None = None) -> int:
    """Write validation.html atomically; returns the number of figures it holds.

    Parameters
    ----------
    results : dict
        The results dictionary (as written to results.json).
    run_dir : path or None
        Run directory the footprint files are resolved against.
    out_html : path
        Output HTML file.
    pages : list of PageSpec, optional
        The planned pages (planned here when omitted).
    svgs : dict, optional
        Figure pages already drawn as SVG by :func:`~conecheck.report.render.render_report`
        (page number → SVG) for the same ``pages``; the others are drawn here.
    """
    specs = pages if pages is not None else build_pages(results, run_dir)
    n = len(specs)
    svgs = svgs or {}
    figures, figure_ids = [], {}
    for i, spec in enumerate(specs, start=1):
        if not spec.is_figure:
            continue
        anchor = _anchor(f"{i}-{spec.title}")
        svg = svgs[i] if i in svgs else _svg(results, spec, i, n)
        figures.append(f'<figure id="{anchor}"><figcaption>{_e(spec.title)}</figcaption>'
                       f"{svg}</figure>")
        for sname, sample in ac.samples(results).items():
            for cname in ac.cuts(sample):
                if spec.title.startswith(f"{sname} · {cname}:"):
                    label = {"statistics": "offsets"}.get(spec.kind, spec.kind)
                    figure_ids.setdefault((sname, cname), []).append((anchor, label))
    stats = list(ac.iter_stats(results))
    overall = str(results.get("overall") or "unknown")
    head = ["sample", "cut", "statistic", "verdict", "max |z|", "χ²/dof", "p", "detectable",
            "figures"]
    doc = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>conecheck validation: {_e(overall.upper())}</title>",
        f"<style>{_CSS}</style></head><body>",
        "<h1>May I fit this? Box against light cones</h1>",
        f'<p><span class="overall" style="background:{st.verdict_colour(overall)}">'
        f"{_e(overall.upper())}</span></p>",
        f"<p>{_e(overall_answer(results))}</p>",
        f'<p class="muted">conecheck {_e(results.get("conecheck_version") or __version__)} · '
        f'configuration {_e(str(results.get("config_hash", ""))[:16])} · '
        f"click a row for its reasons, a header to sort; ★ marks a sample's primary cut</p>",
        '<div class="filters">',
        _filter("sample", "sample", [s for s, *_ in stats]),
        _filter("cut", "cut", [c for _, c, *_ in stats]),
        _filter("statistic", "statistic", [ac.stat_short(t) for _, _, t, _ in stats]),
        _filter("verdict", "verdict", [c.verdict or "none" for *_, c in stats]),
        "</div>",
        '<table id="verdicts"><thead><tr>' + "".join(f"<th>{_e(h)}</th>" for h in head)
        + "</tr></thead><tbody>", *_verdict_rows(results, figure_ids), "</tbody></table>",
        "<h2>Figures</h2>", *figures,
        "<h2>Provenance</h2>", _provenance(results),
        f"<script>{_SCRIPT}</script></body></html>"]
    write_text_atomic(out_html, "\n".join(doc))
    log.info("report: wrote %s (%d figures)", out_html, len(figures))
    return len(figures)


__all__ = ["render_html"]
