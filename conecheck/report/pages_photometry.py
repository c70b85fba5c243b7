"""Luminosities as the analyst infers them: scatter from velocities and sample membership.

With physical fluxes (:mod:`conecheck.cone.photometry`) a galaxy's apparent magnitude follows
its true distance and Doppler shift while the analyst's absolute magnitude uses the measured
redshift, so peculiar velocities (and redshift errors) scatter the inferred luminosity,
most at low redshift. The page shows, for each luminosity-threshold sample's primary cut,
the rms of M_inferred − M_true against redshift (all cones together), the fraction of
galaxies whose membership of the sample changes, and the net change in their number.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from . import access as ac
from . import style as st
from .layout import Page, wrap
from .pagespec import PageSpec


def _records(results: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {name: s["luminosity"] for name, s in ac.samples(results).items()
            if isinstance(s, dict) and isinstance(s.get("luminosity"), dict)}


def luminosity_pages(results: dict[str, Any]) -> list[PageSpec]:
    """One page when any sample has a magnitude threshold; none otherwise."""
    recs = _records(results)
    if not recs:
        return []

    def draw(page: Page) -> None:
        x0, w = st.MARGIN_X, page.content_width
        top = 1.0
        ax = page.axes(x0 + 0.6, top + 0.3, w * 0.58 - 0.7, 3.2, "luminosity:rms")
        for k, (name, rec) in enumerate(recs.items()):
            edges = ac.arr(rec, "z_edges")
            rms = ac.arr(rec, "rms_mag")
            if edges.size < 2 or rms.size != edges.size - 1:
                continue
            mid = 0.5 * (edges[1:] + edges[:-1])
            ax.plot(mid, rms, marker=st.CUT_MARKERS[k % len(st.CUT_MARKERS)], ms=4,
                    color=st.REGION_CYCLE[k % len(st.REGION_CYCLE)], label=name)
        ax.set_xlabel("observed redshift")
        ax.set_ylabel("rms of M_inferred − M_true [mag]\n(own redshifts)")
        ax.set_ylim(bottom=0)
        ax.grid(True, axis="y")
        ax.legend(loc="upper right", fontsize=st.SMALL)
        text_x = x0 + w * 0.6
        tw = page.w - st.MARGIN_X - text_x
        physical = any(bool(r.get("physical_fluxes")) for r in recs.values())
        lines = [("Fluxes follow each galaxy's true distance and Doppler shift; the analyst "
                  "infers M from the measured redshift, and sample cuts use that M."
                  if physical else
                  "survey.effects.physical_fluxes is off: fluxes come from the observed "
                  "redshift, so inferred and true magnitudes agree and nothing scatters."), ""]
        for name, rec in recs.items():
            changed = ac.arr(rec, "membership_changed_fraction")
            net = ac.arr(rec, "count_change_fraction")
            lines.append(f"{name} ({rec.get('cut', 'primary')} cut):")
            if changed.size:
                lines.append(f"  membership changed: {ac.fmt_pct(np.nanmean(changed))} of the "
                             f"true members (mean of {changed.size} cones)")
            if net.size:
                lines.append(f"  net change in number: {100 * np.nanmean(net):+.2f} % "
                             f"(cone range {100 * np.nanmin(net):+.2f} to "
                             f"{100 * np.nanmax(net):+.2f} %)")
        y = top + 0.4
        for text in lines:
            for line in wrap(text, tw, st.SMALL, indent="  ") or [""]:
                page.text(text_x, y, line, st.SMALL)
                y += 0.15
        note = ("The rms covers galaxies with their own redshift (the scatter from velocities "
                "and redshift errors, about (5/ln 10) σ_v/(cz)); galaxies that took a "
                "neighbour's redshift from the collision correction count in the membership "
                "changes. A threshold on a steep luminosity function gains more galaxies "
                "scattered in than it loses: the net change is what the number density of the "
                "cones feels, and the box (true magnitudes) does not.")
        y = top + 4.3
        for line in wrap(note, w, st.SMALL):
            page.text(x0, y, line, st.SMALL, colour=st.MUTED)
            y += 0.15

    return [PageSpec("Inferred luminosities", "luminosity", draw, ("luminosity:rms",))]
