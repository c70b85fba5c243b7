"""Alternative redshift cuts against the primary one, per sample."""

from __future__ import annotations

from typing import Any

import numpy as np

from . import access as ac
from . import style as st
from .layout import Cell, Column, Page, draw_table, fit_columns, shorten
from .pagespec import PageSpec

PER_PAGE = 2


def _cut_label(cname: str, cut: dict[str, Any]) -> str:
    zr = ""
    if cut.get("z_min") is not None and cut.get("z_max") is not None:
        zr = f" ({ac.fmt(ac.num(cut, 'z_min'))}–{ac.fmt(ac.num(cut, 'z_max'))})"
    return cname + zr + (" ★" if cut.get("primary") else "")


def _stat_names(sample: dict[str, Any]) -> list[str]:
    merged: dict[str, Any] = {}
    for cut in ac.cuts(sample).values():
        merged.update(ac.statistics(cut))
    return ac.ordered_stats(merged)


def _draw_sample(page: Page, top: float, height: float, sname: str, sample: dict[str, Any],
                 z_fail: float) -> None:
    x0, w = st.MARGIN_X, page.content_width
    page.text(x0, top + 0.2, shorten(sname, w, st.H2, bold=True), st.H2, bold=True)
    cuts = ac.cuts(sample)
    if len(cuts) < 2:
        page.text(x0, top + 0.5, "Only one redshift cut for this sample: nothing to compare."
                  if cuts else "No redshift cuts for this sample.", st.BODY, colour=st.MUTED)
        return
    names = _stat_names(sample)
    n_rows = len(cuts)
    table_h = 0.22 * (n_rows + 1) + 0.35
    ax_h = max(1.2, height - table_h - 0.75)
    ax = page.axes(x0 + 0.55, top + 0.4, w - 0.6, ax_h, f"cuts:{sname}")
    xs = np.arange(len(names))
    width = 0.6
    for j, (cname, cut) in enumerate(cuts.items()):
        off = (j - (n_rows - 1) / 2) * width / max(n_rows, 1)
        stats = ac.statistics(cut)
        marker = st.CUT_MARKERS[j % len(st.CUT_MARKERS)]
        for k, n in enumerate(names):
            if n not in stats:
                continue
            c = ac.comparison(stats[n])
            v = c.verdict or None
            z = ac.max_abs_z(c)
            if not np.isfinite(z):
                continue
            face = st.verdict_colour(v) if cut.get("primary") else "white"
            ax.plot(xs[k] + off, z, marker=marker, ms=7, mfc=face,
                    mec=st.verdict_colour(v), mew=1.4, ls="none", zorder=3)
        ax.plot([], [], marker=marker, ms=6, ls="none", mec=st.INK,
                mfc=st.INK if cut.get("primary") else "white",
                label=shorten(_cut_label(cname, cut), 2.3, st.SMALL))
    ax.axhline(z_fail, color=st.VERDICT_COLOURS["fail"], lw=0.8, ls="--")
    ax.text(1.0, z_fail, " z_fail", transform=ax.get_yaxis_transform(), fontsize=st.SMALL,
            color=st.VERDICT_COLOURS["fail"], va="bottom", ha="right", parse_math=False)
    ax.set_xticks(xs, [ac.stat_short(n) for n in names])
    ax.set_xlim(-0.6, len(names) - 0.4)
    ax.set_ylim(0, max(2.0 * z_fail, 1.2 * ax.get_ylim()[1]))
    ax.set_ylabel("max |z| over bins")
    ax.grid(True, axis="y")
    ax.legend(loc="upper left", ncol=min(n_rows, 3), fontsize=st.SMALL)
    heads = [ac.stat_short(n) for n in names]
    cols = [Column("cut", 1.6)] + [Column(h, 1.0, "center") for h in heads]
    cols = fit_columns(cols, w)
    rows = []
    for cname, cut in cuts.items():
        stats = ac.statistics(cut)
        row = [Cell(_cut_label(cname, cut), bold=bool(cut.get("primary")), middle=True)]
        for n in names:
            if n not in stats:
                row.append(Cell("not measured"))
                continue
            c = ac.comparison(stats[n])
            row.append(Cell(f"{ac.fmt_fixed(ac.max_abs_z(c))} / "
                            f"{ac.fmt_fixed(ac.chi2_per_dof(c))}", c.verdict or None))
        rows.append(row)
    ty = top + 0.4 + ax_h + 0.45
    page.text(x0, ty - 0.06, "cells: max |z| / χ²/dof, coloured by verdict; ★ primary cut; "
              "filled markers: primary cut", st.SMALL, colour=st.MUTED)
    draw_table(page, x0, ty, cols, rows, size=st.SMALL, row_h=0.22)


def cut_pages(results: dict[str, Any]) -> list[PageSpec]:
    """Comparison of redshift cuts, two samples per page."""
    rules = results.get("verdict_rules") or {}
    z_fail = ac.as_float(rules.get("z_fail", 1.0))
    z_fail = z_fail if np.isfinite(z_fail) and z_fail > 0 else 1.0
    samples = ac.samples(results)
    # A sample with one cut has nothing to compare: one line, not a block of the page.
    single = [s for s in samples if len(ac.cuts(samples[s])) < 2]
    names = [s for s in samples if s not in single]
    if not names:
        if not samples:
            return [PageSpec("Redshift cuts compared", "cuts",
                             lambda page: page.text(st.MARGIN_X, 1.3,
                                                    "No samples in these results.", st.BODY))]
        return []  # nothing to compare anywhere: no page at all
    note = (f"One redshift cut only, nothing to compare: {', '.join(single)}."
            if single else "")
    specs = []
    for i in range(0, len(names), PER_PAGE):
        chunk = names[i:i + PER_PAGE]
        axes = tuple(f"cuts:{s}" for s in chunk)

        def draw(page: Page, chunk=chunk, note=note if i == 0 else "") -> None:
            top = 1.0
            if note:
                page.text(st.MARGIN_X, top, note, st.SMALL, colour=st.MUTED)
                top += 0.2
            block = (page.h - st.CONTENT_BOTTOM - top) / PER_PAGE
            for j, s in enumerate(chunk):
                _draw_sample(page, top + j * block, block - 0.25, s, samples[s], z_fail)

        specs.append(PageSpec("Redshift cuts compared", "cuts", draw, axes))
    return specs
