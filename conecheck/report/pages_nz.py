"""n(z) pages: galaxy counts per redshift bin in every cone against the expectation.

One block per sample and redshift cut. Bins where the cones' mean departs from the
expectation by more than its own error (the cone-to-cone scatter over √N, three times) and
by more than a per cent are named under the panel, with the likely cause at a cut's edge.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from . import access as ac
from . import style as st
from .layout import Page, shorten, wrap
from .pagespec import PageSpec

PER_PAGE = 3


#: A bin is named when the mean's departure exceeds this many errors of the mean ...
DEPARTURE_SIGMA = 3.0
#: ... and this fraction of the expectation.
DEPARTURE_FRACTION = 0.01


def _nz_of(sample: dict[str, Any], cname: str | None) -> dict[str, Any] | None:
    if cname is None:
        return None
    nz = ac.cuts(sample)[cname].get("nz")
    return nz if isinstance(nz, dict) else None


def departures(edges: np.ndarray, cones: np.ndarray, expected: np.ndarray) -> list[str]:
    """Sentences naming the bins whose mean over cones departs from the expectation.

    The error of the mean is the cone-to-cone scatter over √N (the cones are independent
    draws given the box, whose own density is the expectation's); a bin is named when the
    departure exceeds :data:`DEPARTURE_SIGMA` such errors and :data:`DEPARTURE_FRACTION`.
    """
    n = cones.shape[0]
    if n < 2:
        return []
    mean = cones.mean(axis=0)
    err = cones.std(axis=0, ddof=1) / np.sqrt(n)
    out = []
    last = edges.size - 2
    for j in range(edges.size - 1):
        e = expected[j]
        if not (np.isfinite(e) and e > 0 and err[j] > 0):
            continue
        rel, t = mean[j] / e - 1, (mean[j] - e) / err[j]
        if abs(t) > DEPARTURE_SIGMA and abs(rel) > DEPARTURE_FRACTION:
            where = ("the cut's near edge" if j == 0 else "the cut's far edge" if j == last
                     else "inside the cut")
            text = (f"z {edges[j]:.4g}–{edges[j + 1]:.4g}: mean {100 * rel:+.1f} % against "
                    f"the expectation ({abs(t):.1f} errors of the mean), at {where}")
            if j in (0, last):
                text += (": galaxies move across the cut's edge in redshift space (velocities"
                         ", redshift errors) and the flux limit acts on the observed "
                         "redshift, while the expectation counts the box's density in the "
                         "real-space shell")
            out.append(text + ".")
    return out


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


def _draw_sample(page: Page, top: float, height: float, sname: str, sample: dict[str, Any],
                 cname: str | None) -> None:
    x0, w = st.MARGIN_X, page.content_width
    nz = _nz_of(sample, cname)
    data = _valid(nz)
    label = f"{sname} · {cname}" if cname else sname
    if cname is not None and ac.cuts(sample)[cname].get("primary"):
        label += " ★"
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
    notes = departures(edges, cones, expected)
    if not notes and cones.shape[0] >= 2 and np.isfinite(expected).any():
        notes = [f"Every bin agrees with the expectation within {DEPARTURE_SIGMA:g} errors of "
                 f"the mean (cone-to-cone scatter/√{cones.shape[0]}) or "
                 f"{100 * DEPARTURE_FRACTION:g} %."]
    note_lines = [ln for t in notes for ln in wrap(t, w, st.SMALL)][:4]
    main_h = (height - 1.2 - 0.15 * len(note_lines)) * 0.66
    ax = page.axes(lx, top + 0.8, aw, main_h, f"nz:{sname}:{cname}:counts")
    for c in cones:
        ax.stairs(c, edges, color=st.CONE_FAINT, lw=0.6, baseline=None)
    handles = [ax.stairs(mean, edges, color=st.CONE, lw=1.8, baseline=None,
                          label="mean over cones")]
    handles += ax.plot([], [], color=st.CONE_FAINT, lw=1.0, label="single cones")
    if np.isfinite(expected).any():
        handles.append(ax.stairs(expected, edges, color=st.EXPECTED, lw=1.2, ls="--", baseline=None,
                                 label="expected: box density × shell volume"
                                 + (" (per snapshot)" if "snapshot_z_edges" in nz else "")))
    hand_overs = [z for z in ac.arr(nz, "snapshot_z_edges") if edges[0] < z < edges[-1]]
    for i, z in enumerate(hand_overs):
        # where the cones switch from one snapshot to the next (in true distance)
        line = ax.axvline(z, color=st.MUTED, lw=1.0, ls="-.",
                          label="snapshot hand-over" if i == 0 else None)
        if i == 0:
            handles.append(line)
    ax.set_ylabel("galaxies per bin")
    ax.set_xlim(edges[0], edges[-1])
    ax.set_ylim(0, None)
    ax.tick_params(labelbottom=False)
    ax.grid(True, axis="y")
    ratio_h = height - 1.25 - main_h - 0.15 * len(note_lines)
    rax = page.axes(lx, top + 0.85 + main_h, aw, ratio_h, f"nz:{sname}:{cname}:ratio")
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
    y = top + 0.85 + main_h + ratio_h + 0.55
    for line in note_lines:
        page.text(x0, y, line, st.SMALL, colour=st.MUTED)
        y += 0.15


def nz_pages(results: dict[str, Any]) -> list[PageSpec]:
    """n(z) of every sample and cut, up to three per page."""
    samples = ac.samples(results)
    if not samples:
        def empty(page: Page) -> None:
            page.text(st.MARGIN_X, 1.3, "No samples in these results.", st.BODY)
        return [PageSpec("Redshift distribution of the cones", "nz", empty)]
    blocks = [(s, c) for s in samples for c in (list(ac.cuts(samples[s])) or [None])]
    specs = []
    for i in range(0, len(blocks), PER_PAGE):
        chunk = blocks[i:i + PER_PAGE]
        axes = []
        for s, c in chunk:
            if _valid(_nz_of(samples[s], c)) is not None:
                axes += [f"nz:{s}:{c}:counts", f"nz:{s}:{c}:ratio"]

        def draw(page: Page, chunk=chunk) -> None:
            top = 1.0
            block = (page.h - st.CONTENT_BOTTOM - top) / max(len(chunk), 2)
            for j, (s, c) in enumerate(chunk):
                _draw_sample(page, top + j * block, block - 0.15, s, samples[s], c)

        specs.append(PageSpec("n(z) of the cones", "nz", draw, tuple(axes)))
    return specs
