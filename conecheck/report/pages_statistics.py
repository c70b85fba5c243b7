"""Per sample and cut: every statistic's offset between cones and box, with z-scores.

Each statistic gets a cell: the fractional offset (c_i − b)/b of every cone (faint), their
mean (bold) and the total error band ±σ_tot/|b| (shaded) around zero, and below it the
per-bin z-scores against the ±z_fail band. Number density, one number per cone, is a
histogram over cones against the box value and its error bands.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..compare.comparison import Comparison
from . import access as ac
from . import style as st
from .layout import Cell, Column, Page, draw_table, shorten, text_width, wrap
from .pagespec import PageSpec

PER_PAGE = 5
_CELL_W_GAP = 0.45
_TOP = 1.0


def _cell_geometry(page: Page, i: int) -> tuple[float, float, float, float]:
    cw = (page.content_width - _CELL_W_GAP) / 2
    ch = (page.h - st.CONTENT_BOTTOM - _TOP) / 3
    return st.MARGIN_X + (i % 2) * (cw + _CELL_W_GAP), _TOP + (i // 2) * ch, cw, ch


def _z_fail(results: dict[str, Any]) -> float:
    rules = results.get("verdict_rules") or {}
    v = ac.as_float(rules.get("z_fail", 1.0))
    return v if math.isfinite(v) and v > 0 else 1.0


def _title(page: Page, x: float, y: float, w: float, name: str, c: Comparison) -> None:
    v = c.verdict or None
    tag = str(v or "no verdict").upper()
    page.text(x + w, y, tag, st.BODY, bold=True, colour=st.verdict_colour(v), ha="right")

    room = w - text_width(tag, st.BODY, bold=True) - 0.15
    page.text(x, y, shorten(ac.stat_title(name), room, st.BODY + 1, bold=True), st.BODY + 1,
              bold=True)


def _robust_limit(values: np.ndarray, floor: float) -> float:
    v = np.abs(values[np.isfinite(values)])
    if not v.size:
        return floor
    return max(floor, 1.25 * float(np.quantile(v, 0.9)), 1.1 * float(np.median(v)))


def _z_axes(ax, x: np.ndarray, c: Comparison, z_fail: float, logx: bool,
            xlabel: str) -> None:
    z = c.z
    fail = set(c.failing_bins.tolist())
    noisy = set(c.noisy_bins.tolist())
    ax.axhspan(-z_fail, z_fail, color=st.BAND, lw=0)
    ax.axhline(0, color=st.INK, lw=0.6)
    if z.size == x.size and z.size:
        finite = np.isfinite(z)
        zc = np.where(finite, z, np.nan)
        ax.plot(*ac.with_breaks(x, zc), color=st.BOX, lw=0.8)
        colours = [st.VERDICT_COLOURS["fail"] if i in fail else
                   st.VERDICT_COLOURS["warn"] if i in noisy else st.BOX for i in range(z.size)]
        ax.scatter(x[finite], z[finite], c=[c for c, f in zip(colours, finite, strict=True)
                                            if f], s=14, zorder=3, lw=0)
        lim = max(2.0 * z_fail, 1.15 * float(np.nanmax(np.abs(zc), initial=0.0)))
        inf = ~finite & np.isinf(z)
        if inf.any():
            ax.scatter(x[inf], np.sign(z[inf]) * 0.95 * lim, marker="^", s=20,
                       color=st.VERDICT_COLOURS["fail"], zorder=3)
        ax.set_ylim(-lim, lim)
    ax.set_ylabel("z")
    ax.set_xlabel(xlabel)
    if logx:
        st.log_x(ax)
    ax.grid(True, axis="y")


def _curve_cell(page: Page, i: int, name: str, c: Comparison, z_fail: float) -> list[str]:
    x0, y0, cw, ch = _cell_geometry(page, i)
    _title(page, x0, y0 + 0.2, cw, name, c)
    x, b, cones, mean, tot = c.bins, c.box, c.cones, c.cone_mean, c.sigma_total
    ok = x.size and b.size == x.size and mean.size == x.size and tot.size == x.size
    if not ok:
        page.text(x0, y0 + 0.6, "record incomplete: bins, box, cone_mean or sigma_total "
                                "missing", st.SMALL, colour=st.MUTED)
        return []
    ax_x, ax_w = x0 + 0.62, cw - 0.68
    main_h = ch * 0.52
    ax = page.axes(ax_x, y0 + 0.35, ax_w, main_h, f"{name}:offset")
    logx = ac.wants_log_axis(x)
    with np.errstate(divide="ignore", invalid="ignore"):
        nz = b != 0
        frac_mean = np.where(nz, mean / np.where(nz, b, 1) - 1, np.nan)
        band = np.where(nz, tot / np.abs(np.where(nz, b, 1)), np.nan)
        if cones.ndim == 2 and cones.shape[1] == x.size:
            for one in cones:
                ax.plot(*ac.with_breaks(x, np.where(nz, one / np.where(nz, b, 1) - 1, np.nan)),
                        color=st.CONE_FAINT, lw=0.6)
    ax.fill_between(*ac.with_breaks(x, -band, band), color=st.TOTAL_BAND, lw=0,
                    label="±σ_tot/|b|")
    ax.axhline(0, color=st.INK, lw=0.6)
    sig_off = c.sigma_offset
    if sig_off.size == x.size:
        # the offset's own error: how well this run knows the mean (beside the data's error)
        with np.errstate(divide="ignore", invalid="ignore"):
            off_band = np.where(nz, sig_off / np.abs(np.where(nz, b, 1)), np.nan)
        ax.errorbar(x, frac_mean, yerr=off_band, fmt="none", ecolor=st.CONE, elinewidth=0.9,
                    capsize=2, label="±σ_Δ/|b| (offset's own error)")
    ax.plot(*ac.with_breaks(x, frac_mean), color=st.CONE, lw=1.8, label="mean of cones")
    ax.plot([], [], color=st.CONE_FAINT, lw=1.0, label="single cones")
    # The mean is always in view (up to ±500 %); the band only robustly (tails where b → 0
    # would otherwise flatten everything).
    fm = np.abs(frac_mean[np.isfinite(frac_mean)])
    lim = max(_robust_limit(band, 0.005), min(1.15 * fm.max(), 5.0) if fm.size else 0.0)
    ax.set_ylim(-lim, lim)
    ax.yaxis.set_major_formatter(lambda v, _p: f"{100 * v:.3g}%")
    ax.set_ylabel("Δ/b")
    if logx:
        st.log_x(ax)
    ax.tick_params(labelbottom=False)
    ax.grid(True, axis="y")
    zax = page.axes(ax_x, y0 + 0.4 + main_h, ax_w, ch * 0.2, f"{name}:z", sharex=ax)
    _z_axes(zax, x, c, z_fail, False, c.bin_label or "bin")
    if logx:
        st.log_x(zax)
    return [f"{name}:offset", f"{name}:z"]


def _density_cell(page: Page, i: int, name: str, c: Comparison, z_fail: float
                  ) -> list[str]:
    x0, y0, cw, ch = _cell_geometry(page, i)
    _title(page, x0, y0 + 0.2, cw, name, c)
    b = c.box
    cones = c.cones.ravel()
    if b.size != 1 or not cones.size or not np.isfinite(b[0]):
        page.text(x0, y0 + 0.6, "record incomplete: box value or cone values missing",
                  st.SMALL, colour=st.MUTED)
        return []
    b0 = float(b[0])
    scale = 10.0 ** math.floor(math.log10(abs(b0))) if b0 != 0 else 1.0
    sb, stot = c.sigma_box, c.sigma_total
    ax_x, ax_w = x0 + 0.62, cw - 0.68
    main_h = ch * 0.52
    ax = page.axes(ax_x, y0 + 0.35, ax_w, main_h, f"{name}:histogram")
    if stot.size == 1 and np.isfinite(stot[0]):
        ax.axvspan((b0 - stot[0]) / scale, (b0 + stot[0]) / scale, color=st.TOTAL_BAND, lw=0,
                   label="box ± σ_tot")
    if sb.size == 1 and np.isfinite(sb[0]):
        ax.axvspan((b0 - sb[0]) / scale, (b0 + sb[0]) / scale, color=st.BOX_BAND, lw=0,
                   label="box ± σ_box")
    nb = int(np.clip(cones.size // 2, 5, 15))
    ax.hist(cones / scale, bins=nb, color=st.CONE, alpha=0.55, label="cones", zorder=2)
    ax.axvline(b0 / scale, color=st.BOX, lw=1.8, label="box", zorder=3)
    ax.axvline(cones.mean() / scale, color=st.CONE, lw=1.5, ls="--", label="mean of cones",
               zorder=3)
    exp = int(round(math.log10(scale)))
    sup = str(exp).translate(str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹"))
    ax.set_xlabel(f"n [10{sup} (h/Mpc)³]" if exp else "n [(h/Mpc)³]")
    ax.set_ylabel("cones")
    ax.yaxis.get_major_locator().set_params(integer=True)
    top = ax.get_ylim()[1]
    ax.set_ylim(0, top * 1.75)  # room for the legend
    ax.legend(loc="upper left", fontsize=st.SMALL, ncol=2, handlelength=1.2,
              columnspacing=0.8, handletextpad=0.4, borderaxespad=0.3, frameon=True,
              facecolor="white", edgecolor="none", framealpha=0.9)
    zax = page.axes(ax_x, y0 + 0.62 + main_h + 0.15, ax_w, ch * 0.13, f"{name}:z")
    zax.set_xlim(-1, 1)
    _z_axes(zax, np.array([0.0]), c, z_fail, False, "")
    zax.set_xticks([])
    page.text(ax_x + ax_w, y0 + 0.62 + main_h + 0.15 + ch * 0.13 + 0.17,
              f"z = {ac.fmt_fixed(_first(c.z))}, offset Δ/b = "
              f"{ac.fmt_pct(_first(c.fractional_offset))}",
              st.SMALL, colour=st.MUTED, ha="right")
    return [f"{name}:histogram", f"{name}:z"]


def _first(v: np.ndarray) -> float:
    return float(v[0]) if v.size else math.nan


def _glance_cell(page: Page, i: int, results: dict[str, Any], sname: str, cname: str,
                 cut: dict[str, Any], names: list[str]) -> None:
    x0, y0, cw, ch = _cell_geometry(page, i)
    page.text(x0, y0 + 0.2, "This cut at a glance", st.BODY + 1, bold=True)
    stats = {n: ac.comparison(d) for n, d in ac.statistics(cut).items()}
    cols = [Column("statistic", cw * 0.38), Column("verdict", cw * 0.2, "center"),
            Column("max |z|", cw * 0.2, "right"), Column("χ²/dof", cw * 0.22, "right")]
    rows = [[Cell(ac.stat_short(n)),
             Cell((stats[n].verdict or "—").upper(), stats[n].verdict or None),
             Cell(ac.fmt_fixed(ac.max_abs_z(stats[n]))),
             Cell(ac.fmt_fixed(ac.chi2_per_dof(stats[n])))] for n in names]
    y = draw_table(page, x0, y0 + 0.32, cols, rows, size=st.SMALL, row_h=0.2)
    first = stats[names[0]] if names else None
    lines = []
    if cut.get("z_min") is not None and cut.get("z_max") is not None:
        lines.append(f"{ac.fmt(ac.num(cut, 'z_min'))} < z < {ac.fmt(ac.num(cut, 'z_max'))}"
                     + (", primary cut" if cut.get("primary") else ", alternative cut"))
    if first is not None:
        lines.append(f"{first.n_cones or '—'} cones, {first.n_regions or '—'} "
                     f"jackknife regions (Hartlap n)")
        if first.sigma_offset_method:
            lines.append(f"σ_Δ: {first.sigma_offset_method}")
    y += 0.08
    for text in lines:
        for line in wrap(text, cw, st.SMALL):
            y += 0.15
            page.text(x0, y, line, st.SMALL, colour=st.MUTED)
    # A key to the curves.
    y += 0.15
    for colour, lw, text in ((st.CONE_FAINT, 1.0, "single cones (c_i − b)/b"),
                             (st.CONE, 2.0, "mean over cones (c̄ − b)/b"),
                             (st.CONE, 0.9, "bars: the offset's own error ±σ_Δ/|b|"),
                             (st.TOTAL_BAND, 7.0, "total error ±σ_tot/|b|"),
                             (st.BAND, 7.0, "z within ±z_fail")):
        y += 0.17
        if y > y0 + ch - 0.1:
            break
        page.hline(x0, x0 + 0.35, y - 0.04, colour, lw)
        page.text(x0 + 0.45, y, text, st.SMALL)


def statistics_pages(results: dict[str, Any]) -> list[PageSpec]:
    """One page per sample and cut (more when a cut holds over five statistics)."""
    z_fail = _z_fail(results)
    specs = []
    for sname, sample in ac.samples(results).items():
        for cname, cut in ac.cuts(sample).items():
            stats = ac.statistics(cut)
            names = ac.ordered_stats(stats)
            chunks = [names[i:i + PER_PAGE] for i in range(0, len(names), PER_PAGE)] or [[]]
            for k, chunk in enumerate(chunks):
                axes = []
                for n in chunk:
                    if ac.single_bin(stats[n]):
                        axes += [f"{n}:histogram", f"{n}:z"]
                    else:
                        axes += [f"{n}:offset", f"{n}:z"]

                def draw(page: Page, chunk=chunk, sname=sname, cname=cname, cut=cut,
                         stats=stats) -> None:
                    for i, n in enumerate(chunk):
                        if ac.single_bin(stats[n]):
                            _density_cell(page, i, n, ac.comparison(stats[n]), z_fail)
                        else:
                            _curve_cell(page, i, n, ac.comparison(stats[n]), z_fail)
                    if not chunk:
                        page.text(st.MARGIN_X, 1.3, "No statistics measured for this cut.")
                    _glance_cell(page, 5, results, sname, cname, cut, ac.ordered_stats(stats))

                title = f"{sname} · {cname}: box against cones"
                if len(chunks) > 1:
                    title += f" ({k + 1}/{len(chunks)})"
                specs.append(PageSpec(title, "statistics", draw, tuple(axes)))
    return specs
