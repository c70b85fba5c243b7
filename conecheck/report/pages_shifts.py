"""Parameter shifts: how far each cut's cone–box offset would move the fitted HOD parameters."""

from __future__ import annotations

import math
from typing import Any

from . import access as ac
from . import style as st
from .layout import Cell, Column, Page, draw_table, fit_columns, rows_that_fit, split_rows, wrap
from .pagespec import PageSpec

_TOP = 1.15
_SIZE = st.TABLE - 1.0  # eleven columns: one point smaller than the other tables
_NOTE_H = 1.35
#: Short column headers for the HOD parameters (the full names are in the legend).
_SHORT = {"log_mmin": "M_min", "sigma_logm": "σ_logM", "log_m0": "M_0",
          "log_m1": "M_1", "alpha": "α", "a_cen": "A_cen", "a_sat": "A_sat"}


def _fmt(x: Any) -> str:
    return "—" if x is None or not math.isfinite(float(x)) else f"{float(x):+.2f}"


def _rows(results: dict[str, Any], params: list[str]) -> list[list[Cell]]:
    rows = []
    for sname, sample in ac.samples(results).items():
        for cname, cut in ac.cuts(sample).items():
            ps = cut.get("parameter_shifts") or {}
            for combo, rec in (ps.get("combinations") or {}).items():
                shifts = rec.get("shift_in_sigma")
                alone = shifts is None or not any(
                    x is not None and math.isfinite(float(x)) for x in shifts)
                if alone:
                    shifts = rec.get("conditional_shift_in_sigma")
                cells = [Cell(sname, middle=True), Cell(cname, middle=True),
                         Cell("+".join(ac.stat_symbol(p) for p in combo.split("+")), middle=True),
                         Cell("alone" if alone and shifts else
                              ("joint" if shifts else "—"))]
                vals = list(shifts or [])
                own = ps.get("parameters") or []
                for p in params:
                    cells.append(Cell(_fmt(vals[own.index(p)]) if p in own and vals
                                      else "—"))
                cells.append(Cell(_fmt(rec.get("chi2_bound")).lstrip("+")))
                verdict = ps.get("verdict")
                cells.append(Cell(str(verdict).upper() if verdict else "report",
                                  verdict=verdict))
                rows.append(cells)
    return rows


def _notes(results: dict[str, Any]) -> list[str]:
    out = []
    for sname, sample in ac.samples(results).items():
        for cname, cut in ac.cuts(sample).items():
            ps = cut.get("parameter_shifts") or {}
            for combo, rec in (ps.get("combinations") or {}).items():
                if rec.get("note"):
                    out.append(f"{sname} / {cname} / {combo}: {rec['note']}")
            for n in ps.get("notes") or []:
                out.append(f"{sname} / {cname}: {n}")
    return out


def shift_pages(results: dict[str, Any]) -> list[PageSpec]:
    """One table (continued as needed): shift of each parameter in units of its error."""
    params: list[str] = []
    method = ""
    for sample in ac.samples(results).values():
        for cut in ac.cuts(sample).values():
            ps = cut.get("parameter_shifts") or {}
            method = method or ps.get("method", "")
            for p in ps.get("parameters") or []:
                if p not in params:
                    params.append(p)
    rows = _rows(results, params)
    if not rows:
        return []
    cols = [Column("sample", 0.7), Column("cut", 0.62), Column("fitted together", 0.92),
            Column("fit", 0.48)]
    cols += [Column(_SHORT.get(p, p), 0.5, "right") for p in params]
    cols += [Column("√χ²", 0.42, "right"), Column("rule", 0.5, "center")]
    width = st.PAGE_W - 2 * st.MARGIN_X
    cols = fit_columns(cols, width)
    cap = rows_that_fit(st.PAGE_H - st.CONTENT_BOTTOM - _NOTE_H - _TOP - 0.2)
    chunks = split_rows(rows, cap, cap)
    legend = (
        "Each entry is δθ/σ: how far fitting the box prediction to survey data with this "
        "offset would move the parameter, in units of its forecast error (Fisher matrix of "
        "the combination with the data-like covariance C_box + C_cone). Parameters: log10 "
        "M_min, σ_logM, log10 M_0, log10 M_1 and α of the sample's threshold (Zheng et al. "
        "2007), decoration strengths A_cen, A_sat (Hearin et al. 2016); n = number density. "
        "'joint': all "
        "parameters fitted together; 'alone': the bins cannot constrain them all together, "
        "so each is fitted with the others held fixed. √χ² bounds the shift of any "
        "parameter combination. Method: " + method)
    notes = _notes(results)
    pages = []
    for i, chunk in enumerate(chunks):
        def draw(page: Page, chunk=chunk, first=(i == 0)) -> None:
            y = draw_table(page, st.MARGIN_X, _TOP, cols, chunk, size=_SIZE)
            if first:
                y += 0.3
                room = int((page.h - st.CONTENT_BOTTOM - y) // 0.14)
                lines = wrap(legend, page.content_width, st.SMALL) + [""]
                lines += [ln for n in notes for ln in wrap(n, page.content_width, st.SMALL)]
                if len(lines) > room:
                    lines = lines[:room - 1] + ["… more notes in results.json "
                                                "(parameter_shifts)"]
                for line in lines:
                    page.text(st.MARGIN_X, y, line, st.SMALL, colour=st.MUTED)
                    y += 0.14
        title = "Offsets in units of the HOD parameters" + ("" if i == 0 else " (continued)")
        pages.append(PageSpec(title, "shifts", draw))
    return pages


__all__ = ["shift_pages"]
