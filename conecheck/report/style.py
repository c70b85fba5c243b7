"""The report's look, defined once: page geometry, fonts, palette, matplotlib settings.

The palette is a quiet ink-on-paper scheme: a deep harbour blue for the box, a rust tone
for the light cones, sand for the total error band, and three verdict colours (moss, amber,
brick) that stay distinct in greyscale print by lightness.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import matplotlib

matplotlib.use("Agg")

from matplotlib import rc_context  # noqa: E402
from matplotlib.colors import LinearSegmentedColormap, to_rgba  # noqa: E402
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter  # noqa: E402

#: A4 portrait [inch].
PAGE_W, PAGE_H = 8.27, 11.69
#: Page margins [inch]: left/right, top of the content (below the header), bottom.
MARGIN_X, CONTENT_TOP, CONTENT_BOTTOM = 0.6, 0.95, 0.6
#: The header rule [inch from the top] and the footer rule [inch from the bottom]: nothing
#: but the header and footer lies outside them.
HEADER_RULE, FOOTER_RULE = 0.68, 0.42

FONT = "DejaVu Sans"
MONO = "DejaVu Sans Mono"

#: Font sizes [pt]; nothing in the report is smaller than SMALL.
SMALL, BODY, TABLE, H2, H1, TITLE, VERDICT = 8.0, 9.0, 8.5, 11.0, 13.0, 18.0, 40.0

INK = "#1d2430"
MUTED = "#5d6573"
RULE = "#c3c9d2"
BAND = "#eef1f5"
BOX = "#1b4965"
BOX_BAND = "#a9c1d9"
CONE = "#b5532f"
CONE_FAINT = to_rgba(CONE, 0.22)
TOTAL_BAND = "#e4d3b0"
EXPECTED = "#2b2b2b"
EMPTY_SKY = "#eceae4"

VERDICT_COLOURS = {"pass": "#3d7a4a", "warn": "#c0841a", "fail": "#a8322d"}
VERDICT_TINTS = {"pass": "#dcebdc", "warn": "#f7e6c4", "fail": "#f2d3cf"}
UNKNOWN_COLOUR, UNKNOWN_TINT = "#7a7f87", "#e6e7ea"

#: Completeness 0 → 1 from paper to harbour blue.
COMPLETENESS_CMAP = LinearSegmentedColormap.from_list(
    "conecheck_completeness", ["#f6f1e7", "#9cc0c9", "#3f7f98", BOX])
#: Correlation −1 → 0 → 1 from harbour blue through paper to rust.
CORRELATION_CMAP = LinearSegmentedColormap.from_list(
    "conecheck_correlation", [BOX, "#f6f1e7", CONE])
#: Qualitative cycle for jackknife regions (muted, mutually distinct).
REGION_CYCLE = ("#5b8bb2", "#d08c60", "#7fa672", "#b46f8f", "#c9b458", "#6aa3a0",
                "#9d7fba", "#c46a5a", "#8c9a5b", "#5f7fa8", "#d3a06a", "#7c8f99")
#: Line styles distinguishing redshift cuts on the comparison page.
CUT_MARKERS = ("o", "s", "D", "^", "v", "P", "X", "<", ">")

RC = {
    "font.family": FONT,
    "font.size": BODY,
    "axes.titlesize": BODY + 1,
    "axes.labelsize": BODY,
    "axes.edgecolor": MUTED,
    "axes.labelcolor": INK,
    "axes.linewidth": 0.7,
    "xtick.labelsize": SMALL,
    "ytick.labelsize": SMALL,
    "xtick.color": MUTED,
    "ytick.color": MUTED,
    "xtick.labelcolor": INK,
    "ytick.labelcolor": INK,
    "legend.fontsize": SMALL,
    "legend.frameon": False,
    "text.color": INK,
    "grid.color": RULE,
    "grid.linewidth": 0.5,
    "pdf.fonttype": 42,
    "figure.dpi": 100,
}


def verdict_colour(verdict: str | None) -> str:
    """Strong colour of a verdict (grey when unknown)."""
    return VERDICT_COLOURS.get(verdict or "", UNKNOWN_COLOUR)


def verdict_tint(verdict: str | None) -> str:
    """Light background colour of a verdict (grey when unknown)."""
    return VERDICT_TINTS.get(verdict or "", UNKNOWN_TINT)


def log_x(ax) -> None:
    """A logarithmic x axis labelled in plain numbers at 1, 2 and 5 × 10ⁿ, minor ticks bare:
    matplotlib's default labels every minor tick of an axis spanning about one decade, and
    those labels run into each other."""
    ax.set_xscale("log")
    ax.xaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())


@contextmanager
def report_style() -> Iterator[None]:
    """matplotlib settings of the report, restored on exit."""
    with rc_context(RC):
        yield
