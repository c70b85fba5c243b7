"""Page 1: "may I fit this?" — the overall verdict and the verdict table."""

from __future__ import annotations

from typing import Any

from . import access as ac
from . import style as st
from .layout import Cell, Column, Page, draw_table, fit_columns, rows_that_fit, split_rows, wrap
from .pagespec import PageSpec

PRIMARY_MARK = " ★"

_COLUMNS = [Column("sample", 1.1), Column("redshift cut", 1.2), Column("statistic", 1.25),
            Column("verdict", 0.7, "center"), Column("max |z|", 0.62, "right"),
            Column("χ²/dof", 0.62, "right"), Column("p", 0.72, "right"),
            Column("detectable", 0.86, "right")]

_TABLE_TOP = 3.0
_LEGEND_H = 1.75
_CONT_TOP = 1.15


def _rows(results: dict[str, Any]) -> list[list[Cell]]:
    rows = []
    for sname, cname, stat, c in ac.iter_stats(results):
        cut = ac.cuts(ac.samples(results)[sname])[cname]
        verdict = c.verdict or None
        rows.append([Cell(sname, middle=True),
                     Cell(cname + (PRIMARY_MARK if cut.get("primary") else ""), middle=True),
                     Cell(ac.stat_short(stat)),
                     Cell(str(verdict or "—").upper(), verdict=verdict),
                     Cell(ac.fmt_fixed(ac.max_abs_z(c))),
                     Cell(ac.fmt_fixed(ac.chi2_per_dof(c))),
                     Cell(ac.fmt_p(c.p_value)),
                     Cell(ac.fmt_pct(ac.detectable_fraction(c)))])
    return rows


def overall_answer(results: dict[str, Any]) -> str:
    """The answer to "may I fit this?" in a sentence or two (PDF page 1 and the HTML)."""
    r = ac.verdicts(results)
    n = len(r.statistics)
    fails = [f"{t} ({s}, {c})" for s, c, t in r.with_verdict("fail")]
    warns = r.with_verdict("warn")
    overall = results.get("overall")
    if not n:
        return "No statistic was compared: the results hold no sample, cut or statistic."
    if overall == "fail" or fails:
        listed = "; ".join(fails[:4]) + (f"; and {len(fails) - 4} more" if len(fails) > 4
                                           else "")
        return (f"No. {len(fails)} of {n} comparisons show an offset between box and light "
                f"cones that lies outside the error bar and is significant: {listed}.")
    if overall == "warn" or warns:
        return (f"Not shown yet. No comparison fails, but {len(warns)} of {n} cannot be "
                f"decided by this run (an offset outside the error bar that the run cannot "
                f"call significant, or too few cones). The findings page lists why.")
    return (f"Yes. All {n} comparisons agree between the box and the light cones within the "
            f"error budget of a survey of this footprint.")


def _legend(results: dict[str, Any]) -> str:
    rules = results.get("verdict_rules") or {}
    n_sig, z_fail = rules.get("n_sigma_offset", 3.0), rules.get("z_fail", 1.0)
    return (
        f"Each row compares one statistic measured in the periodic box with the mean over the "
        f"light cones, for one sample and redshift cut ({PRIMARY_MARK.strip()} marks the "
        f"primary cut). max |z|: the largest offset over bins in units of the total error bar "
        f"σ_tot = √(σ_box² + σ_cone²). χ²/dof and p: the bias χ² over all bins with the "
        f"Hartlap-corrected inverse covariance, p from Hotelling's law; a small p means the "
        f"offsets are significant even against the data's own error. detectable: the smallest "
        f"fractional bias, common to every bin, that this run would fail (outside {z_fail:g} "
        f"σ_tot and beyond {n_sig:g} σ_Δ in some bin) — when it exceeds the biases that matter "
        f"for your fit, the run needs more cones. The rules behind "
        f"the verdicts are on the page \"How the verdicts are made\".")


def _counts(results: dict[str, Any]) -> str:
    return ac.verdicts(results).counts_text


def _draw_head(page: Page, results: dict[str, Any]) -> None:
    prov = results.get("provenance") or {}
    overall = results.get("overall")
    x0 = st.MARGIN_X
    bits = [f"run of {prov['date']}" if prov.get("date") else "run date not recorded",
            f"config {str(results.get('config_hash', '—'))[:12]}",
            f"{prov['n_cones']} light cones" if prov.get("n_cones") is not None else None,
            f"{len(ac.samples(results))} sample(s)"]
    page.text(x0, 1.15, " · ".join(b for b in bits if b), st.BODY, colour=st.MUTED)
    page.rect(x0, 1.35, 2.2, 1.3, st.verdict_colour(overall))
    page.text(x0 + 1.1, 2.0, str(overall or "unknown").upper(), st.VERDICT, bold=True,
              colour="white", ha="center", va="center")
    tx = x0 + 2.45
    width = page.w - st.MARGIN_X - tx
    page.text(tx, 1.55, "May I fit these statistics with the box?", st.H2, bold=True)
    y = 1.82
    for line in wrap(overall_answer(results), width, st.BODY)[:5]:
        page.text(tx, y, line, st.BODY)
        y += 0.17
    page.text(tx, 2.62, _counts(results), st.BODY, bold=True, colour=st.MUTED)


def _draw_legend(page: Page, results: dict[str, Any]) -> None:
    top = page.h - st.CONTENT_BOTTOM - _LEGEND_H
    page.hline(st.MARGIN_X, page.w - st.MARGIN_X, top)
    page.text(st.MARGIN_X, top + 0.25, "How to read this table", st.BODY + 0.5, bold=True)
    y = top + 0.45
    for line in wrap(_legend(results), page.content_width, st.SMALL)[:9]:
        page.text(st.MARGIN_X, y, line, st.SMALL, colour=st.MUTED)
        y += 0.14


def summary_pages(results: dict[str, Any]) -> list[PageSpec]:
    """The first page (and continuation pages when the verdict table is long)."""
    rows = _rows(results)
    width = st.PAGE_W - 2 * st.MARGIN_X
    cols = fit_columns(_COLUMNS, width)
    first_cap = rows_that_fit(st.PAGE_H - st.CONTENT_BOTTOM - _LEGEND_H - 0.15 - _TABLE_TOP)
    cont_cap = rows_that_fit(st.PAGE_H - st.CONTENT_BOTTOM - 0.1 - _CONT_TOP)
    chunks = split_rows(rows, first_cap, cont_cap)

    def first(page: Page, chunk=chunks[0]) -> None:
        _draw_head(page, results)
        if chunk:
            draw_table(page, st.MARGIN_X, _TABLE_TOP, cols, chunk)
        else:
            page.text(st.MARGIN_X, _TABLE_TOP + 0.2, "No statistics in these results.")
        if len(chunks) > 1:
            page.text(page.w - st.MARGIN_X, page.h - st.CONTENT_BOTTOM - _LEGEND_H - 0.08,
                      "table continues on the next page", st.SMALL, colour=st.MUTED,
                      ha="right")
        _draw_legend(page, results)

    pages = [PageSpec("May I fit this? Verdict summary", "summary", first)]
    for chunk in chunks[1:]:
        def more(page: Page, chunk=chunk) -> None:
            draw_table(page, st.MARGIN_X, _CONT_TOP, cols, chunk)
        pages.append(PageSpec("Verdict summary (continued)", "summary", more))
    return pages
