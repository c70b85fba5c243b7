"""The PDF report, built from the results dictionary alone (docs/design.md §9).

Page order: the verdict summary ("may I fit this?"), findings, how the verdicts are made,
provenance, footprint with jackknife regions, n(z) of the cones, one page per sample and
redshift cut with every statistic, fibre collisions, inferred luminosities, the comparison
of redshift cuts, and (when the run made them) the effect ladder, the correction
comparison and the cut sweep.
Because only ``results.json`` (plus the mask and region files it names) is read,
``conecheck report RUN_DIR`` re-renders a report without recomputing anything.
"""

from __future__ import annotations

import io
import logging
import os
from pathlib import Path
from typing import Any

import matplotlib
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from ..atomic import atomic_path
from ..version import __version__
from .layout import Page, decorate, new_figure
from .pages_attribution import attribution_pages
from .pages_cuts import cut_pages
from .pages_fibres import fibre_pages
from .pages_footprint import footprint_pages
from .pages_nz import nz_pages
from .pages_photometry import luminosity_pages
from .pages_shifts import shift_pages
from .pages_statistics import statistics_pages
from .pages_summary import summary_pages
from .pages_text import config_appendix_pages, findings_pages, provenance_pages, rules_pages
from .pages_values import values_pages
from .pagespec import PageSpec
from .results_io import load_results
from .style import report_style

log = logging.getLogger(__name__)


def build_pages(results: dict[str, Any], run_dir: str | os.PathLike[str] | None = None
                ) -> list[PageSpec]:
    """Plan every page of the report (nothing is drawn yet).

    Parameters
    ----------
    results : dict
        The results dictionary (the content of results.json).
    run_dir : path, optional
        Directory that relative mask and region paths are resolved against.
    """
    with report_style():
        return (summary_pages(results) + findings_pages(results) + rules_pages(results)
                + provenance_pages(results) + footprint_pages(results, run_dir)
                + nz_pages(results) + statistics_pages(results) + values_pages(results)
                + shift_pages(results)
                + fibre_pages(results) + luminosity_pages(results)
                + cut_pages(results) + attribution_pages(results)
                + config_appendix_pages(results))


def _run_label(results: dict[str, Any]) -> str:
    prov = results.get("provenance") if isinstance(results.get("provenance"), dict) else {}
    bits = [str(prov.get("date", ""))[:19].replace("T", " "),
            f"config {str(results.get('config_hash', ''))[:10]}" if results.get("config_hash")
            else ""]
    return " · ".join(b for b in bits if b) or "conecheck run"


def draw_page(results: dict[str, Any], spec: PageSpec, page_no: int, n_pages: int) -> Figure:
    """Draw one planned page onto a new A4 figure (header and footer included)."""
    with report_style():
        fig = new_figure()
        spec.draw(Page(fig))
        decorate(fig, spec.title, page_no, n_pages, _run_label(results),
                 str(results.get("conecheck_version") or __version__))
    return fig


def page_svg(fig: Figure) -> str:
    """A drawn page as inline SVG (text kept as text, so it stays searchable)."""
    buf = io.StringIO()
    # text stays <text> (searchable, smaller) rather than glyph outlines
    with report_style(), matplotlib.rc_context({"svg.fonttype": "none"}):
        fig.savefig(buf, format="svg")
    text = buf.getvalue()
    return text[text.index("<svg"):]  # drop the XML prologue and doctype: inline SVG


def render_report(results: dict[str, Any], run_dir: str | os.PathLike[str] | None,
                  out_pdf: str | os.PathLike[str], pages: list[PageSpec] | None = None,
                  svgs: dict[int, str] | None = None) -> int:
    """Write the PDF report atomically; returns the number of pages.

    Parameters
    ----------
    results : dict
        The results dictionary (as written to results.json).
    run_dir : path or None
        Run directory; relative ``footprint.mask_path`` / ``regions_path`` are resolved
        against it.
    out_pdf : path
        Output PDF file.
    pages : list of PageSpec, optional
        The planned pages (planned here when omitted).
    svgs : dict, optional
        When given, every figure page is also written into it as inline SVG, keyed by page
        number, for the HTML report (each page is then drawn once for both).
    """
    specs = pages if pages is not None else build_pages(results, run_dir)
    n = len(specs)
    with atomic_path(out_pdf) as tmp, PdfPages(tmp, metadata={
            "Title": "conecheck validation report",
            "Creator": f"conecheck {results.get('conecheck_version') or __version__}",
            "Subject": f"overall verdict: {results.get('overall', 'unknown')}"}) as pdf:
        for i, spec in enumerate(specs, start=1):
            fig = draw_page(results, spec, i, n)
            pdf.savefig(fig)
            if svgs is not None and spec.is_figure:
                svgs[i] = page_svg(fig)
            fig.clear()
    log.info("report: wrote %s (%d pages)", out_pdf, n)
    return n


def rerender(run_dir: str | os.PathLike[str], out_pdf: str | os.PathLike[str] | None = None,
             results_name: str = "results.json", svgs: dict[int, str] | None = None
             ) -> tuple[dict[str, Any], int]:
    """Re-render the report of a finished run from its results file alone.

    Parameters
    ----------
    run_dir : path
        Run directory holding ``results_name`` (and the footprint files it names).
    out_pdf : path, optional
        Output PDF (default ``run_dir/validation.pdf``).
    results_name : str
        Name of the results file inside ``run_dir``.
    svgs : dict, optional
        Filled with every figure page as SVG (see :func:`render_report`).

    Returns
    -------
    (results, page count)
    """
    run_dir = Path(run_dir)
    results = load_results(run_dir / results_name)
    n = render_report(results, run_dir, out_pdf if out_pdf is not None
                      else run_dir / "validation.pdf", svgs=svgs)
    return results, n
