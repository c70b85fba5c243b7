"""Fibre-collision diagnostics per sample: collided and recovered fractions per cone."""

from __future__ import annotations

from typing import Any

import numpy as np

from . import access as ac
from . import style as st
from .layout import Page, shorten, wrap
from .pagespec import PageSpec

PER_PAGE = 3


def _effect_lines(effect: Any) -> list[str]:
    """Readable lines of the optional ``uncorrected_effect`` record."""
    if not isinstance(effect, dict) or not effect:
        return []
    lines = []
    for k, v in effect.items():
        if isinstance(v, dict):
            bits = []
            if "verdict" in v:
                bits.append(str(v["verdict"]).upper())
            if "max_abs_z" in v:
                bits.append(f"max |z| {ac.fmt_fixed(ac.num(v, 'max_abs_z'))}")
            if "chi2" in v and "dof" in v:
                bits.append(f"χ²/dof {ac.fmt_fixed(ac.chi2_per_dof(v))}")
            if "max_abs_fractional_offset" in v:
                bits.append(f"max |Δ/b| {ac.fmt_pct(ac.num(v, 'max_abs_fractional_offset'))}")
            rest = [f"{kk} {ac.fmt(ac.as_float(vv))}" for kk, vv in v.items()
                    if kk not in ("verdict", "max_abs_z", "chi2", "dof",
                                  "max_abs_fractional_offset")
                    and isinstance(vv, (int, float)) and not isinstance(vv, bool)]
            lines.append(f"{ac.stat_short(k)}: " + ", ".join(bits + rest[:3]))
        elif isinstance(v, float):
            lines.append(f"{k}: {ac.fmt(v, 4)}")
        elif isinstance(v, (str, int, bool)):
            lines.append(f"{k}: {v}")
        else:
            lines.append(f"{k}: {str(v)[:80]}")
    return lines


def _has_fractions(fib: Any) -> bool:
    if not isinstance(fib, dict):
        return False
    return ac.arr(fib, "collided_fraction").size > 0 or ac.arr(fib, "recovered_fraction").size > 0


def _draw_sample(page: Page, top: float, height: float, sname: str, sample: dict[str, Any]
                 ) -> None:
    x0, w = st.MARGIN_X, page.content_width
    page.text(x0, top + 0.2, shorten(sname, w, st.H2, bold=True), st.H2, bold=True)
    fib = sample.get("fibres")
    if not isinstance(fib, dict) or not fib:
        page.text(x0, top + 0.5, "No fibre-collision emulation recorded for this sample.",
                  st.BODY, colour=st.MUTED)
        return
    coll, rec = ac.arr(fib, "collided_fraction"), ac.arr(fib, "recovered_fraction")
    text_x = x0 + w * 0.62
    if _has_fractions(fib):
        ax = page.axes(x0 + 0.6, top + 0.45, w * 0.62 - 0.85, height - 0.95,
                       f"fibres:{sname}")
        for vals, colour, marker, label in ((coll, st.CONE, "o", "collided (of targets)"),
                                            (rec, st.BOX, "s", "recovered (of collided)")):
            if vals.size:
                idx = np.arange(vals.size)
                ax.plot(idx, 100 * vals, marker=marker, ls="none", ms=4, color=colour,
                        label=label)
                ax.axhline(100 * np.nanmean(vals), color=colour, lw=0.8, ls="--")
        ax.set_xlabel("cone")
        ax.set_ylabel("fraction [%]")
        ax.set_ylim(bottom=0)
        ymax = ax.get_ylim()[1]
        ax.set_ylim(0, ymax * 1.3)
        ax.legend(loc="upper right", ncol=2, fontsize=st.SMALL)
        ax.grid(True, axis="y")
        ax.xaxis.get_major_locator().set_params(integer=True)
    else:
        text_x = x0
    tw = page.w - st.MARGIN_X - text_x
    lines = [f"correction: {fib.get('correction', 'not recorded')}"]
    if coll.size:
        lines.append(f"collided: {ac.fmt_pct(np.nanmean(coll))} mean, "
                     f"{ac.fmt_pct(np.nanmin(coll))}–{ac.fmt_pct(np.nanmax(coll))} over "
                     f"{coll.size} cones")
    if rec.size:
        lines.append(f"recovered in tile overlaps: {ac.fmt_pct(np.nanmean(rec))} of the "
                     f"collided targets (mean)")
    eff = _effect_lines(fib.get("uncorrected_effect"))
    if eff:
        lines.append("")
        lines.append("without the correction:")
        lines.extend(f"  {e}" for e in eff)
    y = top + 0.55
    bottom = top + height - 0.1
    for text in lines:
        for line in wrap(text, tw, st.SMALL, indent="  ") or [""]:
            if y > bottom:
                page.text(text_x, bottom, "…", st.SMALL, colour=st.MUTED)
                return
            page.text(text_x, y, line, st.SMALL)
            y += 0.15


def fibre_pages(results: dict[str, Any]) -> list[PageSpec]:
    """Fibre-collision diagnostics, up to three samples per page."""
    names = list(ac.samples(results))
    specs = []
    for i in range(0, max(len(names), 1), PER_PAGE):
        chunk = names[i:i + PER_PAGE]
        axes = tuple(f"fibres:{s}" for s in chunk
                     if _has_fractions(ac.samples(results)[s].get("fibres")))

        def draw(page: Page, chunk=chunk) -> None:
            if not chunk:
                page.text(st.MARGIN_X, 1.3, "No samples in these results.", st.BODY)
            top = 1.0
            block = (page.h - st.CONTENT_BOTTOM - top) / PER_PAGE
            for j, s in enumerate(chunk):
                _draw_sample(page, top + j * block, block - 0.2, s, ac.samples(results)[s])

        specs.append(PageSpec("Fibre collisions", "fibres", draw, axes))
    return specs
