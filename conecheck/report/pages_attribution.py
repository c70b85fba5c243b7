"""Attribution pages: the effect ladder, the correction comparison and the redshift-cut sweep.

Drawn from the ``ladder``, ``corrections`` and ``cuts`` sections of the results (see
:mod:`conecheck.attribution`); a section that is absent adds no page.

* Ladder overview: the rungs, the steps skipped, and a verdict table naming, per
  statistic, the first failing rung, the rung that adds most and every rung's max |z|.
* Ladder per sample and cut: per statistic, the cumulative offset Δ/|b| after every rung
  (upper panel) and each rung's increment per bin (lower panel: the increment as a
  per cent of |b|, coloured by its significance increment/σ).
* Corrections per sample and cut: per statistic, every correction's offset from the
  uncollided truth of the same cones (with its error band) and the box's, and a table of
  the offsets from the truth in units of σ_tot, coloured by the verdict against the box.
* Cut sweep per sample: max |z| and χ²/dof of every statistic against the cut, passing
  cuts marked, the widest passing cut stated.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from matplotlib.colors import LinearSegmentedColormap, TwoSlopeNorm
from matplotlib.ticker import MaxNLocator

from . import access as ac
from . import style as st
from .layout import (
    Cell,
    Column,
    Page,
    draw_table,
    fit_columns,
    rows_that_fit,
    shorten,
    split_rows,
    text_width,
    wrap,
)
from .pagespec import PageSpec

_TOP = 1.0
_GAP = 0.45
#: Increment significance: paper at zero, harbour blue below, rust above.
SIGNIFICANCE_CMAP = LinearSegmentedColormap.from_list(
    "conecheck_significance", [st.BOX, "#a9c1d9", "#ffffff", "#e3b49f", st.CONE])
#: Rungs from first (light) to last (dark).
RUNG_CMAP = LinearSegmentedColormap.from_list(
    "conecheck_rungs", ["#9cc0c9", "#3f7f98", st.BOX, "#6b3f5e", st.CONE])
SIG_CLIP = 5.0


def _cell(page: Page, i: int, span: int = 1) -> tuple[float, float, float, float]:
    """Geometry (x, y, w, h) [inch] of slot ``i`` of the 2 × 3 grid; ``span`` 2: the row."""
    cw = (page.content_width - _GAP) / 2
    ch = (page.h - st.CONTENT_BOTTOM - _TOP) / 3
    if span == 2:
        return st.MARGIN_X, _TOP + (i // 2) * ch, page.content_width, ch
    return st.MARGIN_X + (i % 2) * (cw + _GAP), _TOP + (i // 2) * ch, cw, ch


#: A statistic with more bins than this gets a whole row, so each bin keeps room for its
#: number (8-pt text needs about 0.3 inch).
WIDE_BINS = 7
#: Slots 0-4 of a page hold statistics; slot 5 holds the key or the side-by-side table.
_STAT_SLOTS = 5


def _pack(order: list[str], n_bins: dict[str, int]) -> list[list[tuple[str, int, int]]]:
    """Pages of (statistic, slot, span): wide statistics take a whole row (two slots)."""
    pages: list[list[tuple[str, int, int]]] = []
    free: list[int] = []
    for name in order:
        span = 2 if n_bins.get(name, 0) > WIDE_BINS else 1
        while True:
            if not free:
                pages.append([])
                free = list(range(_STAT_SLOTS))
            if span == 1:
                slot = free.pop(0)
                break
            pair = next((f for f in free if f % 2 == 0 and f + 1 in free), None)
            if pair is not None:
                free.remove(pair)
                free.remove(pair + 1)
                slot = pair
                break
            free = []  # no whole row left on this page
        pages[-1].append((name, slot, span))
    return pages or [[]]


def _title(page: Page, x: float, y: float, w: float, title: str, tag: str,
           colour: str) -> None:
    """Cell title on the left, a bold tag on the right; the title yields room to the tag."""
    tag = shorten(tag, w * 0.6, st.SMALL, bold=True)
    page.text(x + w, y, tag, st.SMALL, bold=True, colour=colour, ha="right")
    room = w - text_width(tag, st.SMALL, bold=True) - 0.15
    page.text(x, y, shorten(title, room, st.BODY + 1, bold=True), st.BODY + 1, bold=True)


def _rung_colours(n: int) -> list[Any]:
    return [RUNG_CMAP(x) for x in (np.linspace(0, 1, n) if n > 1 else [1.0])]


def _fmt_bin(x: float) -> str:
    return "—" if not math.isfinite(x) else f"{x:.2g}" if abs(x) < 100 else f"{x:.0f}"


def _flow(page: Page, x: float, y: float, width: float, text: str, size: float = st.SMALL,
          colour: str = st.MUTED, line: float = 0.15, max_lines: int = 40) -> float:
    for ln in wrap(text, width, size)[:max_lines]:
        y += line
        page.text(x, y, ln, size, colour=colour)
    return y


# --------------------------------------------------------------------------- ladder
def _rung_meta(ladder: dict[str, Any]) -> list[dict[str, Any]]:
    return [r for r in ladder.get("rungs", []) if isinstance(r, dict) and "name" in r]


def _short(ladder: dict[str, Any]) -> dict[str, str]:
    return {r["name"]: str(r.get("short") or r["name"]) for r in _rung_meta(ladder)}


def _overview_rows(results: dict[str, Any], ladder: dict[str, Any]) -> list[list[Cell]]:
    names = [r["name"] for r in _rung_meta(ladder)]
    short = _short(ladder)
    rows = []
    for sname, cuts in (ladder.get("attribution") or {}).items():
        for cname, stats in cuts.items():
            main = (ac.samples(results).get(sname, {}).get("cuts", {}).get(cname, {})
                    .get("statistics", {}))
            for stat in ac.ordered_stats(stats):
                a = stats[stat]
                v = (main.get(stat) or {}).get("verdict") or a.get("verdicts", {}).get(
                    names[-1] if names else "")
                row = [Cell(sname, middle=True), Cell(cname, middle=True),
                       Cell(ac.stat_short(stat)), Cell(str(v or "—").upper(), verdict=v),
                       Cell(short.get(a.get("first_failing_rung") or "", "—"), bold=True),
                       Cell(short.get(a.get("largest_increment_rung") or "", "—"))]
                for n in names:
                    z = ac.as_float((a.get("max_abs_z") or {}).get(n))
                    row.append(Cell(ac.fmt_fixed(z), (a.get("verdicts") or {}).get(n)))
                rows.append(row)
    return rows


def _overview_text(ladder: dict[str, Any]) -> list[str]:
    rungs = _rung_meta(ladder)
    def corr(r: dict[str, Any]) -> str:
        c = r.get("correction")
        return f", correction {c}" if c not in (None, "none") else ""

    steps = "; ".join(f"#{i} {r.get('label', r['name'])} ({r.get('sky', '')}{corr(r)})"
                      for i, r in enumerate(rungs))
    out = [f"The same cones are rebuilt with the survey's effects switched on one at a time, "
           f"cumulatively, and every rung is compared with the same box measurements. Rungs: "
           f"{steps}. The last rung is the configured survey (the main run's cones)."]
    for s in ladder.get("skipped", []) or []:
        out.append(f"Step '{s.get('step')}' skipped: {s.get('reason')}.")
    out.append("Columns: verdict of the full survey; first failing rung — the rung from which "
               "the statistic fails on every rung up to the full survey (— when it does not "
               "fail); largest increment — the rung whose increment is largest in units of "
               "the total error bar; #0 … #{n}: each rung's max |z| against the box, coloured "
               "by that rung's verdict.".replace("{n}", str(max(len(rungs) - 1, 0))))
    return out


def _ladder_overview(results: dict[str, Any], ladder: dict[str, Any]) -> list[PageSpec]:
    rungs = _rung_meta(ladder)
    short = _short(ladder)
    w = st.PAGE_W - 2 * st.MARGIN_X
    del short
    cols = [Column("sample", 0.75), Column("cut", 0.7), Column("statistic", 1.05),
            Column("verdict", 0.62, "center"), Column("first failing", 0.92, "center"),
            Column("largest Δ", 0.9, "center")]
    cols += [Column(f"#{i}", 0.45, "right") for i in range(len(rungs))]
    cols = fit_columns(cols, w)
    rows = _overview_rows(results, ladder)
    lines = []
    for para in _overview_text(ladder):
        lines += wrap(para, w, st.SMALL) + [""]
    text_h = 0.15 * len(lines) + 0.2
    first_cap = max(1, rows_that_fit(st.PAGE_H - st.CONTENT_BOTTOM - 1.2 - text_h - 0.3))
    cont_cap = rows_that_fit(st.PAGE_H - st.CONTENT_BOTTOM - 1.3)
    chunks = split_rows(rows, first_cap, cont_cap)

    def first(page: Page, chunk=chunks[0]) -> None:
        page.text(st.MARGIN_X, 1.2, "Which effect causes the offset?", st.H2, bold=True)
        y = 1.3
        for ln in lines:
            y += 0.15
            if ln:
                page.text(st.MARGIN_X, y, ln, st.SMALL, colour=st.MUTED)
        if chunk:
            draw_table(page, st.MARGIN_X, y + 0.25, cols, chunk, size=st.SMALL)
        else:
            page.text(st.MARGIN_X, y + 0.4, "No statistic was laddered.", st.BODY)

    specs = [PageSpec("Effect ladder: verdict per rung", "ladder", first)]
    for chunk in chunks[1:]:
        def more(page: Page, chunk=chunk) -> None:
            draw_table(page, st.MARGIN_X, 1.2, cols, chunk, size=st.SMALL)
        specs.append(PageSpec("Effect ladder: verdict per rung (continued)", "ladder", more))
    return specs


def _ladder_cell(page: Page, i: int, stat: str, a: dict[str, Any], short: dict[str, str],
                 z_fail: float, span: int = 1) -> list[str]:
    x0, y0, cw, ch = _cell(page, i, span)
    first = a.get("first_failing_rung")
    v = (a.get("verdicts") or {}).get((a.get("rungs") or [""])[-1])
    tag = str(v or "—").upper() + (f" from {short.get(first, first)}" if first else "")
    _title(page, x0, y0 + 0.2, cw, ac.stat_title(stat), tag, st.verdict_colour(v))
    x = ac.arr(a, "bins")
    b = ac.arr(a, "box")
    names = [n for n in (a.get("rungs") or []) if n in (a.get("increments") or {})]
    if not x.size or b.size != x.size or not names:
        page.text(x0, y0 + 0.6, "record incomplete", st.SMALL, colour=st.MUTED)
        return []
    inc = np.array([ac.arr(a["increments"][n], "increment") for n in names])
    sig = np.array([ac.arr(a["increments"][n], "significance") for n in names])
    if inc.shape != (len(names), x.size) or sig.shape != inc.shape:
        page.text(x0, y0 + 0.6, "record incomplete", st.SMALL, colour=st.MUTED)
        return []
    with np.errstate(divide="ignore", invalid="ignore"):
        absb = np.where(b != 0, np.abs(b), np.nan)
        cum = np.cumsum(inc, axis=0) / absb
        band = ac.arr(a, "sigma_total") / absb
    ax_x, ax_w = x0 + 0.62, cw - 0.68
    top_h = ch * 0.36
    ax = page.axes(ax_x, y0 + 0.32, ax_w, top_h, f"{stat}:ladder")
    pos = np.arange(x.size)
    if band.size == x.size:
        ax.fill_between(pos, -band, band, color=st.TOTAL_BAND, lw=0, step=None)
    ax.axhline(0, color=st.INK, lw=0.6)
    for k, (n, c) in enumerate(zip(names, _rung_colours(len(names)), strict=True)):
        ax.plot(pos, cum[k], "o-", color=c, lw=1.3 if k == len(names) - 1 else 0.9, ms=2.5,
                label=short.get(n, n))
    fin = np.abs(cum[np.isfinite(cum)])
    lim = max(0.005, 1.15 * float(fin.max()) if fin.size else 0.01,
              1.05 * float(np.nanmax(band)) if band.size and np.isfinite(band).any() else 0)
    ax.set_ylim(-min(lim, 5.0), min(lim, 5.0))
    ax.yaxis.set_major_formatter(lambda val, _p: f"{100 * val:.3g}%")
    ax.set_ylabel("Δ/|b| after rung")
    ax.set_xlim(-0.5, x.size - 0.5)
    ax.tick_params(labelbottom=False)
    ax.grid(True, axis="y")
    hm_h = ch - top_h - 0.85
    hax = page.axes(ax_x, y0 + 0.4 + top_h, ax_w, hm_h, f"{stat}:increments")
    shown = np.clip(np.nan_to_num(sig, nan=0.0, posinf=SIG_CLIP, neginf=-SIG_CLIP),
                    -SIG_CLIP, SIG_CLIP)
    hax.imshow(shown, cmap=SIGNIFICANCE_CMAP, norm=TwoSlopeNorm(0.0, -SIG_CLIP, SIG_CLIP),
               aspect="auto", interpolation="nearest")
    if ax_w / x.size >= 0.3:  # room for a number in every cell
        with np.errstate(divide="ignore", invalid="ignore"):
            pct = inc / absb
        for r in range(len(names)):
            for j in range(x.size):
                if np.isfinite(pct[r, j]):
                    text = f"{100 * pct[r, j]:+.2g}"
                    hax.text(j, r, text, ha="center", va="center", fontsize=st.SMALL,
                             color="white" if abs(shown[r, j]) > 3.5 else st.INK,
                             parse_math=False)
    hax.set_yticks(range(len(names)), [short.get(n, n) for n in names])
    ticks = range(0, x.size, max(1, math.ceil(x.size / 8)))
    hax.set_xticks(list(ticks), [_fmt_bin(x[j]) for j in ticks])
    hax.set_xlabel(a.get("bin_label") or "bin")
    hax.tick_params(length=0)
    return [f"{stat}:ladder", f"{stat}:increments"]


def _ladder_key(page: Page, i: int, ladder: dict[str, Any], names: list[str],
                short: dict[str, str], cname: str, cut_stats: dict[str, Any]) -> None:
    x0, y0, cw, ch = _cell(page, i)
    page.text(x0, y0 + 0.2, "How to read the ladder", st.BODY + 1, bold=True)
    y = y0 + 0.28
    for n, c in zip(names, _rung_colours(len(names)), strict=True):
        y += 0.17
        page.hline(x0, x0 + 0.35, y - 0.04, c, 2.0)
        page.text(x0 + 0.45, y, short.get(n, n), st.SMALL)
    text = ("Upper panel: the offset from the box after each rung, as a fraction of |b| "
            "(rungs from light to dark; shaded: ±σ_tot/|b| of the full survey). Lower panel: "
            "the increment each rung adds in each bin, in per cent of |b| (rung 0: its offset "
            "from the box); colour: increment/σ of the increment, clipped at ±5 (blue "
            "negative, rust positive). Increments add up to the full survey's offset.")
    _flow(page, x0, y + 0.05, cw, text, max_lines=int((y0 + ch - y - 0.1) / 0.15))


def _ladder_pages(results: dict[str, Any], ladder: dict[str, Any]) -> list[PageSpec]:
    short = _short(ladder)
    names = [r["name"] for r in _rung_meta(ladder)]
    z_fail = ac.as_float((results.get("verdict_rules") or {}).get("z_fail", 1.0))
    specs = _ladder_overview(results, ladder)
    for sname, cuts in (ladder.get("attribution") or {}).items():
        for cname, stats in cuts.items():
            order = ac.ordered_stats(stats)
            chunks = _pack(order, {n: ac.arr(stats[n], "bins").size for n in order})
            for k, chunk in enumerate(chunks):
                axes = tuple(f"{n}:{p}" for n, *_ in chunk for p in ("ladder", "increments"))

                def draw(page: Page, chunk=chunk, stats=stats, cname=cname) -> None:
                    for n, slot, span in chunk:
                        _ladder_cell(page, slot, n, stats[n], short, z_fail, span)
                    _ladder_key(page, 5, ladder, names, short, cname, stats)

                title = f"{sname} · {cname}: effect ladder"
                if len(chunks) > 1:
                    title += f" ({k + 1}/{len(chunks)})"
                specs.append(PageSpec(title, "ladder", draw, axes))
    return specs


# --------------------------------------------------------------------------- corrections
_CORR_COLOURS = (st.CONE, "#7fa672", "#9d7fba", "#c9b458", "#6aa3a0", "#c46a5a")


def _corrections_cell(page: Page, i: int, stat: str, entry: dict[str, Any],
                      truth: dict[str, Any], names: list[str], span: int = 1) -> list[str]:
    x0, y0, cw, ch = _cell(page, i, span)
    best = entry.get("closest_to_truth")
    _title(page, x0, y0 + 0.2, cw, ac.stat_title(stat), "", st.MUTED)
    x = ac.arr(truth, "bins")
    t = ac.arr(truth, "cone_mean")
    b = ac.arr(truth, "box")
    if not x.size or t.size != x.size:
        page.text(x0, y0 + 0.6, "record incomplete", st.SMALL, colour=st.MUTED)
        return []
    ax_x, ax_w = x0 + 0.62, cw - 0.68
    ax = page.axes(ax_x, y0 + 0.35, ax_w, ch * 0.62, f"{stat}:corrections")
    pos = np.arange(x.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        abst = np.where(t != 0, np.abs(t), np.nan)
        ax.axhline(0, color=st.INK, lw=0.8, label="uncollided truth")
        if b.size == x.size:
            ax.plot(pos, (b - t) / abst, color=st.BOX, lw=1.2, ls="--", label="box",
                    marker="x" if x.size == 1 else None)
        vals = []
        for n, c in zip(names, _CORR_COLOURS * 3, strict=False):
            d = entry.get("corrections", {}).get(n, {})
            f, s = ac.arr(d, "increment"), ac.arr(d, "sigma_increment")
            if f.size != x.size:
                continue
            ax.plot(pos, f / abst, "o-", color=c, lw=1.1, ms=2.5, label=n)
            if s.size == x.size:
                ax.fill_between(pos, (f - s) / abst, (f + s) / abst, color=c, alpha=0.15,
                                lw=0)
            vals.append(f / abst)
    fin = np.abs(np.concatenate(vals))[np.isfinite(np.concatenate(vals))] if vals else []
    lim = max(0.01, 1.2 * float(np.max(fin)) if len(fin) else 0.01)
    ax.set_ylim(-min(lim, 2.0), min(lim, 2.0))
    ax.yaxis.set_major_formatter(lambda v, _p: f"{100 * v:.3g}%")
    ax.set_ylabel("(c − truth)/|truth|")
    if best:  # inside the panel: the title row keeps its room for the statistic's name
        ax.text(0.01, 0.97, f"closest to truth: {best}", transform=ax.transAxes, ha="left",
                va="top", fontsize=st.SMALL, color=st.MUTED, parse_math=False,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1})
    ticks = range(0, x.size, max(1, math.ceil(x.size / 8)))
    ax.set_xticks(list(ticks), [_fmt_bin(x[j]) for j in ticks])
    ax.set_xlim(-0.5, x.size - 0.5)
    ax.set_xlabel(truth.get("bin_label") or "bin")
    ax.grid(True, axis="y")
    return [f"{stat}:corrections"]


def _corrections_table(page: Page, i: int, section: dict[str, Any], stats: dict[str, Any],
                       order: list[str]) -> None:
    x0, y0, cw, ch = _cell(page, i)
    page.text(x0, y0 + 0.2, "Side by side", st.BODY + 1, bold=True)
    names = list(section.get("names") or [])
    cols = fit_columns([Column("correction", 1.3)]
                       + [Column(ac.stat_symbol(s), 0.5, "right") for s in order], cw)
    rows = []
    for n in names:
        row = [Cell(n + (" ★" if n == section.get("configured") else ""), middle=True)]
        for s in order:
            d = (stats.get(s) or {}).get("corrections", {}).get(n, {})
            row.append(Cell(ac.fmt_fixed(ac.num(d, "max_abs_in_total_sigma")),
                            d.get("verdict_vs_box")))
        rows.append(row)
    y = draw_table(page, x0, y0 + 0.32, cols, rows, size=st.SMALL, row_h=0.2)
    key = [(st.INK, "-", "uncollided truth"), (st.BOX, "--", "box")]
    key += [(c, "-", n) for n, c in zip(names, _CORR_COLOURS * 3, strict=False)]
    for j, (colour, ls, text) in enumerate(key):
        kx = x0 + (j % 2) * cw / 2
        ky = y + 0.2 + (j // 2) * 0.17
        for a, b in ((0.0, 0.12), (0.18, 0.3)) if ls == "--" else ((0.0, 0.3),):
            page.hline(kx + a, kx + b, ky - 0.04, colour, 1.4)
        page.text(kx + 0.38, ky, shorten(text, cw / 2 - 0.45, st.SMALL), st.SMALL)
    y += 0.2 + 0.17 * ((len(key) + 1) // 2)
    cf = ac.arr(section.get("variants", {}).get(names[0] if names else "", {}),
                "collided_fraction")
    text = ("Cells: largest offset from the uncollided truth of the same cones, in units of "
            "the total error bar σ_tot; colour: verdict of that correction against the box. "
            "★ the configured correction. Truth: the same cones with fibre collisions off and "
            "every other effect and random draw unchanged. Panels: offset from the truth as a "
            "fraction of it, with the error of the paired difference (band), and the box "
            "(dashed).")
    if cf.size:
        text += (f" Collided targets: {ac.fmt_pct(float(np.mean(cf)))} on average over "
                 f"{cf.size} cones (the same collisions for every correction).")
    _flow(page, x0, y + 0.05, cw, text, max_lines=int((y0 + ch - y - 0.1) / 0.15))


def _correction_pages(section: dict[str, Any]) -> list[PageSpec]:
    if section.get("skipped"):
        def draw(page: Page) -> None:
            page.text(st.MARGIN_X, 1.3, "Fibre-collision corrections were not compared:",
                      st.BODY, bold=True)
            _flow(page, st.MARGIN_X, 1.35, page.content_width, str(section["skipped"]),
                  st.BODY, st.INK, 0.17)
        return [PageSpec("Fibre-collision corrections compared", "corrections", draw)]
    specs = []
    truth_name = section.get("truth", "uncollided")
    truth = (section.get("variants") or {}).get(truth_name, {}).get("samples", {})
    names = list(section.get("names") or [])
    for sname, cuts in (section.get("against_truth") or {}).items():
        for cname, stats in cuts.items():
            order = ac.ordered_stats(stats)
            tstats = (truth.get(sname, {}).get("cuts", {}).get(cname, {})
                      .get("statistics", {}))
            chunks = _pack(order, {n: ac.arr(tstats.get(n, {}), "bins").size for n in order})
            for k, chunk in enumerate(chunks):
                axes = tuple(f"{n}:corrections" for n, *_ in chunk)

                def draw(page: Page, chunk=chunk, stats=stats, order=order,
                         tstats=tstats) -> None:
                    for n, slot, span in chunk:
                        _corrections_cell(page, slot, n, stats[n], tstats.get(n, {}), names,
                                          span)
                    _corrections_table(page, 5, section, stats, order)

                title = f"{sname} · {cname}: fibre corrections"
                if len(chunks) > 1:
                    title += f" ({k + 1}/{len(chunks)})"
                specs.append(PageSpec(title, "corrections", draw, axes))
    return specs


# --------------------------------------------------------------------------- cut sweep
def _sweep_sample(page: Page, top: float, height: float, sname: str, s: dict[str, Any],
                  z_fail: float) -> list[str]:
    x0, w = st.MARGIN_X, page.content_width
    page.text(x0, top + 0.2, shorten(sname, w, st.H2, bold=True), st.H2, bold=True)
    cuts = s.get("cuts") or {}
    labels = [c for c in (s.get("order") or list(cuts)) if c in cuts]
    if not labels:
        why = "; ".join(f"{c}: {r}" for c, r in (s.get("skipped") or {}).items())
        _flow(page, x0, top + 0.35, w, "No cut of this sample could be measured" +
              (f" ({why})" if why else "") + ".", st.BODY, st.MUTED, 0.17)
        return []
    zmin = {ac.num(cuts[c], "z_min") for c in labels}
    numeric = len(zmin) == 1
    xs = (np.array([ac.num(cuts[c], "z_max") for c in labels]) if numeric
          else np.arange(len(labels), dtype=float))
    wide, none_pass = s.get("widest_passing"), not s.get("widest_passing")
    head = (f"widest passing cut: {wide} ({ac.fmt(ac.num(cuts[wide], 'z_min'))}–"
            f"{ac.fmt(ac.num(cuts[wide], 'z_max'))})" if wide else "no cut passes")
    if none_pass and s.get("widest_not_failing"):
        nf = s["widest_not_failing"]
        head += (f"; widest cut that does not fail: {nf} ({ac.fmt(ac.num(cuts[nf], 'z_min'))}–"
                 f"{ac.fmt(ac.num(cuts[nf], 'z_max'))})")
    page.text(x0 + w, top + 0.2, shorten(head, w * 0.72, st.BODY, bold=True), st.BODY,
              bold=True, colour=st.verdict_colour("pass" if wide else "warn"), ha="right")
    stats = ac.ordered_stats(cuts[labels[0]].get("statistics") or {})
    ax_h = (height - 0.95) / 2
    axz = page.axes(x0 + 0.62, top + 0.4, w * 0.62 - 0.62, ax_h, f"cut_sweep:{sname}:z")
    axc = page.axes(x0 + 0.62, top + 0.55 + ax_h, w * 0.62 - 0.62, ax_h,
                    f"cut_sweep:{sname}:chi2", sharex=axz)
    for j, c in enumerate(labels):
        if cuts[c].get("verdict") == "pass":
            for ax in (axz, axc):
                half = (np.min(np.diff(xs)) / 2 if xs.size > 1 else 0.5) * 0.8
                ax.axvspan(xs[j] - half, xs[j] + half, color=st.verdict_tint("pass"), lw=0)
    for k, name in enumerate(stats):
        recs = [(cuts[c].get("statistics") or {}).get(name, {}) for c in labels]
        z = np.array([ac.max_abs_z(r) if r else np.nan for r in recs])
        chi = np.array([ac.chi2_per_dof(r) if r else np.nan for r in recs])
        colour = st.REGION_CYCLE[k % len(st.REGION_CYCLE)]
        marker = st.CUT_MARKERS[k % len(st.CUT_MARKERS)]
        for ax, y in ((axz, z), (axc, chi)):
            yy = np.where(np.isfinite(y), y, np.nan)
            ax.plot(xs, yy, "-", color=colour, lw=1.0)
            for j, r in enumerate(recs):
                if np.isfinite(yy[j]):
                    ok = r.get("verdict") == "pass"
                    ax.plot(xs[j], yy[j], marker=marker, ms=5, mec=colour,
                            mfc=colour if ok else "white", ls="none")
        axz.plot([], [], marker=marker, color=colour, label=ac.stat_short(name), ms=5)
    axz.axhline(z_fail, color=st.VERDICT_COLOURS["fail"], lw=0.8, ls="--")
    axz.set_ylabel("max |z|")
    axz.set_ylim(0, max(2 * z_fail, 1.15 * axz.get_ylim()[1]))
    axz.grid(True, axis="y")
    axz.tick_params(labelbottom=False)
    axc.set_ylabel("χ²/dof")
    axc.set_ylim(bottom=0)
    axc.grid(True, axis="y")
    axc.xaxis.set_major_locator(MaxNLocator(6))
    vlim = ac.num(s, "volume_limit_zmax")
    if numeric:
        axc.set_xlabel(f"z_max (z_min = {ac.fmt(next(iter(zmin)))})")
        span = float(xs.max() - xs.min()) if xs.size > 1 else 0.01
        if math.isfinite(vlim) and xs.min() - 0.1 * span <= vlim <= xs.max() + 0.1 * span:
            for ax in (axz, axc):
                ax.axvline(vlim, color=st.MUTED, lw=0.8, ls=":")
            axz.text(vlim, axz.get_ylim()[1] * 0.97, " volume limit", fontsize=st.SMALL,
                     color=st.MUTED, va="top", parse_math=False)
    else:
        axc.set_xticks(xs, [shorten(c, 0.8, st.SMALL) for c in labels], rotation=30,
                       ha="right")
        axc.set_xlabel("cut (by z_min, z_max)")
    tx = x0 + w * 0.62 + 0.15
    tw = w - (tx - x0)
    cols = fit_columns([Column("cut", 1.0), Column("z range", 0.85), Column("verdict", 0.62,
                                                                            "center")], tw)
    rows = [[Cell(c + (" ★" if cuts[c].get("source") == "primary" else ""), middle=True),
             Cell(f"{ac.num(cuts[c], 'z_min'):.3f}–{ac.num(cuts[c], 'z_max'):.3f}"),
             Cell(str(cuts[c].get("verdict") or "—").upper(), cuts[c].get("verdict"))]
            for c in labels]
    cap = rows_that_fit(height - 0.9, 0.2)
    y = draw_table(page, tx, top + 0.4, cols, rows[:cap], size=st.SMALL, row_h=0.2)
    for k, name in enumerate(stats):
        y += 0.18
        colour = st.REGION_CYCLE[k % len(st.REGION_CYCLE)]
        page.hline(tx, tx + 0.3, y - 0.04, colour, 1.2)
        page.text(tx + 0.38, y, shorten(ac.stat_short(name), tw - 0.4, st.SMALL), st.SMALL)
    y += 0.05
    note = ("Filled markers: the statistic passes at that cut; shaded: the cut passes (every "
            "statistic passes); dashed: z_fail; ★ primary cut.")
    for label, reason in (s.get("skipped") or {}).items():
        note += f" Cut {label} skipped, not measurable: {reason}."
    _flow(page, tx, y + 0.02, tw, note, max_lines=max(0, int((top + height - y) / 0.15) - 1))
    return [f"cut_sweep:{sname}:z", f"cut_sweep:{sname}:chi2"]


def _sweep_pages(results: dict[str, Any], section: dict[str, Any]) -> list[PageSpec]:
    z_fail = ac.as_float((results.get("verdict_rules") or {}).get("z_fail", 1.0))
    z_fail = z_fail if math.isfinite(z_fail) and z_fail > 0 else 1.0
    samples = section.get("samples") or {}
    names = list(samples)
    specs = []
    for i in range(0, max(len(names), 1), 2):
        chunk = names[i:i + 2]
        axes = tuple(f"cut_sweep:{s}:{p}" for s in chunk for p in ("z", "chi2")
                     if (samples[s].get("cuts") or {}))

        def draw(page: Page, chunk=chunk) -> None:
            if not chunk:
                page.text(st.MARGIN_X, 1.3, "No samples in the cut sweep.", st.BODY)
            block = (page.h - st.CONTENT_BOTTOM - _TOP) / 2
            for j, s in enumerate(chunk):
                _sweep_sample(page, _TOP + j * block, block - 0.25, s, samples[s], z_fail)

        specs.append(PageSpec("Which redshift cut is safe? Cut sweep", "cut_sweep", draw,
                              axes))
    return specs


# --------------------------------------------------------------------------- entry point
def _error_page(title: str, key: str, message: str) -> PageSpec:
    kind = {"cuts": "cut_sweep"}.get(key, key)

    def draw(page: Page) -> None:
        page.text(st.MARGIN_X, 1.3, "This part of the run stopped with an error; the rest of "
                  "the report is complete:", st.BODY, bold=True)
        _flow(page, st.MARGIN_X, 1.35, page.content_width, message, st.BODY, st.INK, 0.17)
    return PageSpec(title, kind, draw)


def attribution_pages(results: dict[str, Any]) -> list[PageSpec]:
    """Ladder, correction and cut-sweep pages for whichever sections the results hold."""
    specs: list[PageSpec] = []
    for key, title in (("ladder", "Effect ladder"), ("corrections",
                       "Fibre-collision corrections compared"), ("cuts", "Cut sweep")):
        section = results.get(key)
        if isinstance(section, dict) and section.get("error"):
            specs.append(_error_page(f"{title}: not completed", key, str(section["error"])))
    results = {k: v for k, v in results.items()
               if not (isinstance(v, dict) and v.get("error"))}
    if isinstance(results.get("ladder"), dict):
        specs += _ladder_pages(results, results["ladder"])
    if isinstance(results.get("corrections"), dict):
        specs += _correction_pages(results["corrections"])
    if isinstance(results.get("cuts"), dict):
        specs += _sweep_pages(results, results["cuts"])
    return specs


__all__ = ["attribution_pages"]
