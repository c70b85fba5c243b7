"""Per sample and cut: the statistics themselves, and the correlations of their errors.

The offset pages show differences; a referee also wants to see what was measured. Each
statistic gets a panel of its values: the box (line, ±σ_box band), every cone (faint) and
the cones' mean with the error of one cone (±σ_cone) — wp as r_p·w_p, count distributions
and the VPF on a logarithmic axis when they span decades. Below, the correlation matrices
C_ij/√(C_ii C_jj) of the box and the cone jackknife covariances, one column per statistic,
on a diverging scale from −1 to 1.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..compare.comparison import Comparison
from . import access as ac
from . import style as st
from .layout import Page, shorten
from .pagespec import PageSpec

#: Statistics per page (a 2 × 2 grid of value panels, four correlation columns).
PER_PAGE = 4
_TOP = 1.05
_GAP_X = 0.55
_PANEL_H = 2.2
_ROW_GAP = 0.6
_MATRIX_TOP_GAP = 0.6
_MATRIX_SIZE = 1.3


def _panel_geometry(page: Page, i: int) -> tuple[float, float, float, float]:
    """(x, y, w, h) [inch] of value panel ``i`` of the 2 × 2 grid, axes area only."""
    cw = (page.content_width - _GAP_X) / 2
    x = st.MARGIN_X + (i % 2) * (cw + _GAP_X) + 0.55
    y = _TOP + (i // 2) * (_PANEL_H + _ROW_GAP) + 0.25
    return x, y, cw - 0.6, _PANEL_H - 0.35


def _values(name: str, c: Comparison) -> tuple[np.ndarray, ...] | None:
    """(x, box, σ_box, cones (N × p), mean, σ_cone, y label) scaled for display."""
    x, b, sb, mean, sc, cones = c.bins, c.box, c.sigma_box, c.cone_mean, c.sigma_cone, c.cones
    if not (x.size and b.size == x.size == mean.size == sb.size == sc.size):
        return None
    if cones.ndim != 2 or cones.shape[1] != x.size:
        cones = np.empty((0, x.size))
    # e.g. r_p·w_p, which flattens the power law
    shown = ac.display(name)
    scale = x ** shown.scale_power if shown.scale_by_bins else np.ones_like(x)
    return x, b * scale, sb * scale, cones * scale, mean * scale, sc * scale


def _y_label(name: str, c: Comparison) -> str:
    shown = ac.display(name)
    if shown.scale_by_bins and shown.scaled_label:
        return shown.scaled_label
    return c.value_label or "value"


def _value_panel(page: Page, i: int, name: str, d: dict[str, Any], legend: bool) -> None:
    c = ac.comparison(d)
    x0, y0, w, h = _panel_geometry(page, i)
    page.text(x0 - 0.55, y0 - 0.12, shorten(ac.stat_title(name), w + 0.5, st.BODY + 1,
                                            bold=True), st.BODY + 1, bold=True)
    vals = _values(name, c)
    if vals is None:
        page.text(x0 - 0.55, y0 + 0.3, "record incomplete: bins, box, cone_mean or the "
                                       "errors missing", st.SMALL, colour=st.MUTED)
        return
    x, b, sb, cones, mean, sc = vals
    ax = page.axes(x0, y0, w, h, f"{name}:values")
    if x.size == 1:  # one number (the number density): box and cones side by side
        ax.errorbar([0.0], b, yerr=sb, fmt="s", color=st.BOX, capsize=3, label="box ±σ_box")
        if cones.size:
            ax.plot(np.linspace(0.85, 1.15, cones.shape[0]), cones[:, 0], "o",
                    color=st.CONE_FAINT, ms=4, label="single cones")
        ax.errorbar([1.0], mean, yerr=sc, fmt="o", color=st.CONE, capsize=3,
                    label="cone mean ±σ of one cone")
        ax.set_xlim(-0.6, 1.6)
        ax.set_xticks([0.0, 1.0], ["box", "cones"])
    else:
        xl, cl, bl, sbl = ac.with_breaks(x, cones, b, sb)  # lines: one per piece
        for k, one in enumerate(cl):
            ax.plot(xl, one, color=st.CONE_FAINT, lw=0.6,
                    label="single cones" if k == 0 else None)
        ax.fill_between(xl, bl - sbl, bl + sbl, color=st.BOX_BAND, lw=0, label="box ±σ_box")
        ax.plot(xl, bl, color=st.BOX, lw=1.6, label="box")
        ax.errorbar(x, mean, yerr=sc, fmt="o", ms=3, color=st.CONE, capsize=2, elinewidth=0.8,
                    label="cone mean ±σ of one cone")
        if ac.wants_log_axis(np.concatenate([b, mean])):
            ax.set_yscale("log")
        if ac.wants_log_axis(x):
            st.log_x(ax)
        ax.set_xlabel(shorten(c.bin_label or "bin", w, st.BODY))
    ax.set_ylabel(shorten(_y_label(name, c), h, st.BODY))
    ax.grid(True, alpha=0.4)
    if legend and x.size > 1:
        ax.legend(loc="best", fontsize=st.SMALL, frameon=False)


def _matrix_geometry(page: Page, j: int, row: int, top: float) -> tuple[float, float, float]:
    size = min(_MATRIX_SIZE, (page.content_width - 0.5) / PER_PAGE - 0.25)
    x = st.MARGIN_X + 0.5 + j * (page.content_width - 0.5) / PER_PAGE
    return x, top + 0.15 + row * (size + 0.3), size


def _matrix(d: dict[str, Any], key: str) -> np.ndarray | None:
    m = getattr(ac.comparison(d), key)
    return m if m.ndim == 2 and m.shape[0] == m.shape[1] and m.shape[0] > 1 else None


def _correlations(page: Page, names: list[str], stats: dict[str, Any], top: float) -> list:
    """Box (upper row) and cone (lower row) correlation matrices, one column per statistic."""
    page.text(st.MARGIN_X, top - 0.3, "Correlation of the errors between bins",
              st.BODY + 1, bold=True)
    page.text(st.MARGIN_X, top - 0.12, "C_ij/√(C_ii C_jj): box jackknife (upper row), a "
                                       "cone's jackknife averaged over cones (lower row); "
                                       "bins as in the panels above",
              st.SMALL, colour=st.MUTED)
    names = [n for n in names if not ac.single_bin(stats[n])]  # nothing to correlate
    if not names:
        page.text(st.MARGIN_X, top + 0.3, "No statistic on this page has more than one bin.",
                  st.SMALL, colour=st.MUTED)
        return []
    image = None
    for row, (key, label) in enumerate((("correlation_box", "box"),
                                        ("correlation_cone", "cones"))):
        x_lab, y_lab, size = _matrix_geometry(page, 0, row, top)
        page.text(st.MARGIN_X, y_lab + size / 2, label, st.SMALL, colour=st.MUTED)
        for j, name in enumerate(names):
            x, y, size = _matrix_geometry(page, j, row, top)
            m = _matrix(stats[name], key)
            if row == 0:
                page.text(x, y - 0.05, shorten(ac.stat_short(name), size, st.SMALL),
                          st.SMALL)
            if m is None:
                page.text(x, y + size / 2, "not recorded", st.SMALL, colour=st.MUTED)
                continue
            ax = page.axes(x, y + 0.05, size, size, f"{name}:{key}")
            image = ax.imshow(m, vmin=-1, vmax=1, cmap=st.CORRELATION_CMAP,
                              interpolation="nearest", origin="lower")
            ax.set_xticks([])
            ax.set_yticks([])
    if image is not None:
        _, y, size = _matrix_geometry(page, 0, 1, top)
        cax = page.axes(st.MARGIN_X + 0.5, y + size + 0.2, 2.2, 0.1, "correlation:colourbar")
        bar = page.fig.colorbar(image, cax=cax, orientation="horizontal")
        bar.set_ticks([-1, 0, 1])
        bar.ax.tick_params(labelsize=st.SMALL)
    return []


def values_pages(results: dict[str, Any]) -> list[PageSpec]:
    """One page per sample and cut (more when a cut holds over four statistics)."""
    specs = []
    for sname, sample in ac.samples(results).items():
        for cname, cut in ac.cuts(sample).items():
            stats = ac.statistics(cut)
            names = ac.ordered_stats(stats)
            chunks = [names[i:i + PER_PAGE] for i in range(0, len(names), PER_PAGE)]
            for k, chunk in enumerate(chunks):
                axes = tuple(f"{n}:values" for n in chunk)

                def draw(page: Page, chunk: list[str] = chunk,
                         stats: dict[str, Any] = stats) -> None:
                    multi = [n for n in chunk if not ac.single_bin(stats[n])]
                    for i, n in enumerate(chunk):
                        _value_panel(page, i, n, stats[n], legend=bool(multi) and n == multi[0])
                    rows = (len(chunk) + 1) // 2
                    _correlations(page, chunk, stats,
                                  _TOP + rows * (_PANEL_H + _ROW_GAP) + _MATRIX_TOP_GAP)

                title = f"{sname} · {cname}: the statistics"
                if len(chunks) > 1:
                    title += f" ({k + 1}/{len(chunks)})"
                specs.append(PageSpec(title, "values", draw, axes))
    return specs


__all__ = ["values_pages"]
