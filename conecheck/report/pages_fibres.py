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


def _same_fractions(fibs: list[Any]) -> bool:
    """True when every sample records the same per-cone fractions (collisions act on the
    whole target list, before any sample is selected, so they usually do)."""
    recs = [(tuple(ac.arr(f, "collided_fraction")), tuple(ac.arr(f, "recovered_fraction")))
            for f in fibs if _has_fractions(f)]
    return len(recs) == len(fibs) > 1 and all(r == recs[0] for r in recs)


def target_line(results: dict[str, Any]) -> str:
    """The box's target density against the luminosity function's (results ``targets``)."""
    t = results.get("targets")
    if not isinstance(t, dict) or t.get("box_fraction") is None:
        return ""
    lf = f"{ac.fmt(ac.num(t, 'lf_per_deg2'), 3)} per deg² a Schechter luminosity function predicts"
    if t.get("source") == "fill":
        return (f"targets: the box supplies {ac.fmt_pct(ac.num(t, 'box_fraction'))} and the "
                f"faint fill brings the list to {ac.fmt_pct(ac.num(t, 'list_fraction'))} of "
                f"the {lf}; collided fraction of the full list "
                f"{ac.fmt_pct(ac.num(t, 'collided_fraction_cones'))}")
    return (f"targets: the box supplies {ac.fmt_pct(ac.num(t, 'box_fraction'))} of the "
            f"{lf}; a full target list would collide about "
            f"{ac.fmt_pct(ac.num(t, 'collided_fraction_full_estimate'))} of targets (random-sky "
            f"scaling, a rough estimate; survey.targets.source = 'fill' measures it) against "
            f"the cones' "
            f"{ac.fmt_pct(ac.num(t, 'collided_fraction_cones'))}")


def budget_lines(fib: dict[str, Any]) -> list[str]:
    """The fibre budget's losses, overall and against the tile load (``fibres.budget``)."""
    b = fib.get("budget") if isinstance(fib, dict) else None
    if not isinstance(b, dict):
        return []
    lost = ac.arr(b, "lost_fraction")
    lines = [f"fibre budget: {b.get('n_tiles')} tiles of {b.get('fibres_per_tile')} fibres "
             f"(radius {ac.fmt(ac.as_float(b.get('radius_deg')), 3)}°, "
             f"{b.get('n_passes')} pass(es)); "
             f"{ac.fmt_pct(np.nanmean(lost)) if lost.size else '—'} of targets lost to it "
             "(mean over cones)"]
    edges = ac.arr(b, "load_lower_edges")
    count, gone = ac.arr(b, "load_count"), ac.arr(b, "load_lost")
    bits = [f"≥{e:g}: {ac.fmt_pct(g / c)}"
            for e, c, g in zip(edges, count, gone, strict=False) if c > 0]
    if bits:
        lines.append("lost against tile load (targets on the busiest tile / its fibres): "
                     + ", ".join(bits))
    return lines


def _draw_sample(page: Page, top: float, height: float, sname: str, sample: dict[str, Any],
                 others: tuple[tuple[str, dict[str, Any]], ...] = (), targets: str = ""
                 ) -> None:
    """One block: the per-cone fractions and the correction's record.

    ``others`` are further samples with the same fractions: one plot serves them all and
    each adds only its own lines (correction, effect without it).
    """
    x0, w = st.MARGIN_X, page.content_width
    title = sname if not others else f"all samples ({', '.join([sname, *(o for o, _ in others)])})"
    page.text(x0, top + 0.2, shorten(title, w, st.H2, bold=True), st.H2, bold=True)
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
    lines = []
    if others:
        lines.append("Collisions act on the whole target list, before samples are selected: "
                     "the fractions are the same for every sample.")
        lines.append("")
    lines.append(f"correction: {fib.get('correction', 'not recorded')}")
    if coll.size:
        lines.append(f"collided: {ac.fmt_pct(np.nanmean(coll))} mean, "
                     f"{ac.fmt_pct(np.nanmin(coll))}–{ac.fmt_pct(np.nanmax(coll))} over "
                     f"{coll.size} cones")
    if rec.size:
        lines.append(f"recovered in tile overlaps: {ac.fmt_pct(np.nanmean(rec))} of the "
                     f"collided targets (mean)")
    lines.extend(budget_lines(fib))
    if targets:
        lines.append(targets)
    for name, other in ((sname, fib), *((o, d.get("fibres") or {}) for o, d in others)):
        eff = _effect_lines(other.get("uncorrected_effect"))
        if eff:
            lines.append("")
            lines.append(f"{name} without the correction:" if others
                         else "without the correction:")
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
    samples = ac.samples(results)
    names = list(samples)
    if _same_fractions([samples[n].get("fibres") for n in names]):
        first, rest = names[0], tuple((n, samples[n]) for n in names[1:])

        def draw_shared(page: Page) -> None:
            _draw_sample(page, 1.0, (page.h - st.CONTENT_BOTTOM - 1.0) / PER_PAGE - 0.2,
                         first, samples[first], rest, target_line(results))

        return [PageSpec("Fibre collisions", "fibres", draw_shared, (f"fibres:{first}",))]
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
                _draw_sample(page, top + j * block, block - 0.2, s, ac.samples(results)[s],
                             targets=target_line(results))

        specs.append(PageSpec("Fibre collisions", "fibres", draw, axes))
    return specs
