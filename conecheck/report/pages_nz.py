"""n(z) page: galaxy counts per redshift bin in every cone against the expectation."""

from __future__ import annotations

from typing import Any

import numpy as np

from . import access as ac
from . import style as st
from .layout import Page, shorten
from .pagespec import PageSpec

PER_PAGE = 3


def _nz_of(sample: dict[str, Any]) -> tuple[str | None, dict[str, Any] | None]:
    cname = ac.primary_cut(sample)
    if cname is None:
        return None, None
    nz = ac.cuts(sample)[cname].get("nz")
    return cname, nz if isinstance(nz, dict) else None


def _valid(nz: dict[str, Any] | None) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    if nz is None:
        return None
    edges, expected = ac.arr(nz, "edges"), ac.arr(nz, "expected")
    try:
        cones = ac.as_float_array(nz.get("cones") or [])
    except (TypeError, ValueError):
        return None
    nb = edges.size - 1
    if nb < 1 or cones.ndim != 2 or cones.shape[1] != nb:
        return None
    if expected.size != nb:
        expected = np.full(nb, np.nan)
    return edges, cones, expected


def _draw_sample(page: Page, top: float, height: float, sname: str, sample: dict[str, Any]
                 ) -> None:
    x0, w = st.MARGIN_X, page.content_width
    cname, nz = _nz_of(sample)
    data = _valid(nz)
    label = f"{sname} · {cname}" if cname else sname
    page.text(x0, top + 0.2, shorten(label, w, st.H2, bold=True), st.H2, bold=True)
    if data is None:
        why = "no redshift cut" if cname is None else (
            "no n(z) recorded" if nz is None else "n(z) record incomplete (edges, cones)")
        page.text(x0, top + 0.5, f"{why} for this sample.", st.BODY, colour=st.MUTED)
        return
    edges, cones, expected = data
    mean = cones.mean(axis=0)
    tot = cones.sum(axis=1)
    summary = (f"{cones.shape[0]} cones: {tot.mean():.0f} ± {tot.std():.0f} galaxies per cone"
               + (f", expected {np.nansum(expected):.0f}" if np.isfinite(expected).any()
                  else ", no expectation recorded"))
    page.text(x0, top + 0.4, shorten(summary, w, st.BODY), st.BODY, colour=st.MUTED)
    lx = x0 + 0.65
    aw = w - 0.75
    main_h = (height - 1.2) * 0.66
    ax = page.axes(lx, top + 0.8, aw, main_h, f"nz:{sname}:counts")
    for c in cones:
        ax.stairs(c, edges, color=st.CONE_FAINT, lw=0.6, baseline=None)
    handles = [ax.stairs(mean, edges, color=st.CONE, lw=1.8, baseline=None,
                          label="mean over cones")]
    handles += ax.plot([], [], color=st.CONE_FAINT, lw=1.0, label="single cones")
    if np.isfinite(expected).any():
        handles.append(ax.stairs(expected, edges, color=st.EXPECTED, lw=1.2, ls="--", baseline=None,
                                 label="expected: box density × shell volume"))
    ax.set_ylabel("galaxies per bin")
    ax.set_xlim(edges[0], edges[-1])
    ax.set_ylim(0, None)
    ax.tick_params(labelbottom=False)
    ax.grid(True, axis="y")
    rax = page.axes(lx, top + 0.85 + main_h, aw, height - 1.25 - main_h,
                    f"nz:{sname}:ratio")
    with np.errstate(divide="ignore", invalid="ignore"):
        ok = np.isfinite(expected) & (expected > 0)
        safe = np.where(ok, expected, 1.0)
        rel = np.where(ok, mean / safe - 1, np.nan)
        scat = np.where(ok, cones.std(axis=0) / safe, np.nan)
        pois = np.where(ok, 1 / np.sqrt(safe), np.nan)
    if ok.any():
        handles.append(rax.stairs(scat, edges, baseline=-scat, fill=True,
                                  color=st.TOTAL_BAND, label="cone-to-cone scatter (lower)"))
        handles.append(rax.stairs(pois, edges, color=st.MUTED, lw=0.8, ls=":", baseline=None,
                                  label="Poisson, one cone (lower)"))
        rax.stairs(-pois, edges, color=st.MUTED, lw=0.8, ls=":", baseline=None)
        rax.stairs(rel, edges, color=st.CONE, lw=1.5, baseline=None)
        both = np.concatenate([rel, scat, pois])
        lim = min(float(np.nanmax(np.abs(both[np.isfinite(both)]), initial=0.01)), 2.0)
        rax.set_ylim(-1.25 * lim, 1.25 * lim)
    else:
        rax.text(0.5, 0.5, "no expectation to compare with", transform=rax.transAxes,
                 ha="center", va="center", color=st.MUTED, fontsize=st.SMALL)
    ax.legend(handles=handles, loc="lower left", bbox_to_anchor=(0.0, 1.01), ncol=3,
              fontsize=st.SMALL, borderaxespad=0.0, handlelength=1.6, columnspacing=1.0)
    rax.axhline(0, color=st.INK, lw=0.6)
    rax.set_xlim(edges[0], edges[-1])
    rax.set_xlabel("observed redshift z")
    rax.set_ylabel("ratio − 1", fontsize=st.SMALL)


def nz_pages(results: dict[str, Any]) -> list[PageSpec]:
    """n(z) of the primary cut of each sample, up to three samples per page."""
    names = list(ac.samples(results))
    if not names:
        def empty(page: Page) -> None:
            page.text(st.MARGIN_X, 1.3, "No samples in these results.", st.BODY)
        return [PageSpec("Redshift distribution of the cones", "nz", empty)]
    specs = []
    for i in range(0, len(names), PER_PAGE):
        chunk = names[i:i + PER_PAGE]
        axes = []
        for s in chunk:
            if _valid(_nz_of(ac.samples(results)[s])[1]) is not None:
                axes += [f"nz:{s}:counts", f"nz:{s}:ratio"]

        def draw(page: Page, chunk=chunk) -> None:
            top = 1.0
            block = (page.h - st.CONTENT_BOTTOM - top) / max(len(chunk), 2)
            for j, s in enumerate(chunk):
                _draw_sample(page, top + j * block, block - 0.15, s, ac.samples(results)[s])

        specs.append(PageSpec("n(z) of the cones (primary cuts)", "nz", draw,
                              tuple(axes)))
    return specs
