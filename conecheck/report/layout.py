"""Page furniture: figures of page size, measured text wrapping, flowing text, tables.

Positions are in inches from the top-left corner of the page, which keeps page code readable;
every text is measured before it is placed, so long text wraps or is shortened with "…"
instead of running off the page.
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle

from . import style as st

# Measured at 720 dpi (a tenth of a point), where glyph hinting no longer distorts widths.
_MEASURE = _FINE = RendererAgg(10, 10, 720)


@functools.lru_cache(maxsize=64)
def _props(size: float, mono: bool, bold: bool) -> FontProperties:
    return FontProperties(family=st.MONO if mono else st.FONT, size=size,
                          weight="bold" if bold else "normal")


@functools.lru_cache(maxsize=20000)
def text_width(text: str, size: float, mono: bool = False, bold: bool = False) -> float:
    """Rendered width of one line of ``text`` [inch] (mathtext off)."""
    w, _, _ = _MEASURE.get_text_width_height_descent(text, _props(size, mono, bold),
                                                     ismath=False)
    return w / 720.0 + 1.0 / 72.0


@functools.lru_cache(maxsize=4096)
def _char_width(ch: str, size: float, mono: bool, bold: bool) -> float:
    # Advance width: eight copies between bars, minus the bars (spaces have no ink).
    prop = _props(size, mono, bold)
    w8, _, _ = _FINE.get_text_width_height_descent("|" + ch * 8 + "|", prop, ismath=False)
    w0, _, _ = _FINE.get_text_width_height_descent("||", prop, ismath=False)
    return (w8 - w0) / 8 / 720.0


def _fast_width(text: str, size: float, mono: bool, bold: bool) -> float:
    """Sum of single-character widths [inch]: close to the exact width, much cheaper."""
    return sum(_char_width(c, size, mono, bold) for c in text) + 1.0 / 72.0


def _split_long(word: str, width: float, size: float, mono: bool, bold: bool) -> list[str]:
    parts = []
    while word:
        lo, hi = 1, len(word)
        while lo < hi:  # longest prefix that fits
            mid = (lo + hi + 1) // 2
            if _fast_width(word[:mid], size, mono, bold) <= width:
                lo = mid
            else:
                hi = mid - 1
        parts.append(word[:lo])
        word = word[lo:]
    return parts


def wrap(text: str, width: float, size: float, mono: bool = False, bold: bool = False,
         indent: str = "") -> list[str]:
    """Wrap ``text`` to lines of at most ``width`` inches (explicit newlines kept).

    Leading spaces of a paragraph are kept and continuation lines start with them plus
    ``indent``; runs of spaces inside a line are kept (aligned config text). Words wider
    than a line (paths, hashes) are broken between characters.
    """
    # Lay out with the cheap per-character widths and a safety margin, then check every
    # line exactly; tighten the margin in the rare case a line still runs over.
    for margin in (0.97, 0.9, 0.8):
        lines = _wrap(text, width * margin, size, mono, bold, indent)
        if all(text_width(ln, size, mono, bold) <= width for ln in lines):
            break
    return lines


def _wrap(text: str, width: float, size: float, mono: bool, bold: bool, indent: str
          ) -> list[str]:
    def fits(s: str) -> bool:
        return _fast_width(s, size, mono, bold) <= width

    lines: list[str] = []
    for para in text.expandtabs(4).split("\n"):
        if not para.strip():
            lines.append("")
            continue
        lead = para[:len(para) - len(para.lstrip(" "))]
        if _fast_width(lead + indent, size, mono, bold) > width / 2:
            lead = ""
        cont = lead + indent
        cur, empty = lead, True
        for word in para.strip(" ").split(" "):
            trial = cur + word if empty else cur + " " + word
            if fits(trial):
                cur, empty = trial, False
                continue
            if not empty:
                lines.append(cur)
                cur, empty = cont, True
            if fits(cur + word):
                cur, empty = cur + word, False
                continue
            pieces = _split_long(word, width - _fast_width(cont, size, mono, bold), size,
                                 mono, bold)
            for piece in pieces[:-1]:
                lines.append(cur + piece)
                cur = cont
            cur, empty = cur + pieces[-1], False
        if cur.strip():
            lines.append(cur)
    return lines


def shorten(text: str, width: float, size: float, mono: bool = False,
             bold: bool = False, middle: bool = False) -> str:
    """``text`` cut with "…" so that it fits ``width`` inches.

    ``middle``: keep the start and the end (names that differ only at the end stay
    distinguishable).
    """
    if text_width(text, size, mono, bold) <= width:
        return text

    def cut(n: int) -> str:
        if not middle:
            return text[:n] + "…"
        tail = n // 2
        return text[:n - tail] + "…" + (text[-tail:] if tail else "")

    lo, hi = 0, len(text)
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if text_width(cut(mid), size, mono, bold) <= width:
            lo = mid
        else:
            hi = mid - 1
    return cut(lo)


# --------------------------------------------------------------------------- pages
def new_figure(width: float = st.PAGE_W, height: float = st.PAGE_H) -> Figure:
    """A page-sized figure with its own Agg canvas (no pyplot state)."""
    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig


class Page:
    """A figure addressed in inches from the top-left corner."""

    def __init__(self, fig: Figure):
        self.fig = fig
        self.w, self.h = fig.get_size_inches()

    def fx(self, x: float) -> float:
        return x / self.w

    def fy(self, y: float) -> float:
        return 1.0 - y / self.h

    def text(self, x: float, y: float, s: str, size: float = st.BODY, *, mono: bool = False,
             bold: bool = False, colour: str = st.INK, ha: str = "left", va: str = "baseline",
             **kw):
        """Place literal text (no mathtext) at (x, y) inches from the top-left."""
        return self.fig.text(self.fx(x), self.fy(y), s, fontsize=size,
                             family=st.MONO if mono else st.FONT,
                             weight="bold" if bold else "normal", color=colour, ha=ha, va=va,
                             parse_math=False, **kw)

    def rect(self, x: float, y: float, w: float, h: float, colour: str, **kw) -> Rectangle:
        """Filled rectangle with top-left corner (x, y) [inch]."""
        r = Rectangle((self.fx(x), self.fy(y + h)), w / self.w, h / self.h,
                      transform=self.fig.transFigure, facecolor=colour, edgecolor="none",
                      **kw)
        self.fig.add_artist(r)
        return r

    def hline(self, x0: float, x1: float, y: float, colour: str = st.RULE, lw: float = 0.6):
        ln = Line2D([self.fx(x0), self.fx(x1)], [self.fy(y), self.fy(y)],
                    transform=self.fig.transFigure, color=colour, lw=lw)
        self.fig.add_artist(ln)
        return ln

    def axes(self, x: float, y: float, w: float, h: float, label: str, **kw):
        """Axes with top-left corner (x, y) and size (w, h) [inch], named ``label``."""
        ax = self.fig.add_axes((self.fx(x), self.fy(y + h), w / self.w, h / self.h), **kw)
        ax.set_label(label)
        return ax

    @property
    def content_width(self) -> float:
        return self.w - 2 * st.MARGIN_X

    @property
    def content_height(self) -> float:
        return self.h - st.CONTENT_TOP - st.CONTENT_BOTTOM


def decorate(fig: Figure, title: str, page_no: int, n_pages: int, run_label: str,
             version: str) -> None:
    """Header (section title, run label) and footer (version, page i of N) of a page."""
    pg = Page(fig)
    x0, x1 = st.MARGIN_X, pg.w - st.MARGIN_X
    right = shorten(run_label, 3.2, st.SMALL)
    pg.text(x1, 0.55, right, st.SMALL, colour=st.MUTED, ha="right")
    pg.text(x0, 0.55, shorten(title, pg.content_width - text_width(right, st.SMALL) - 0.3,
                              st.H1, bold=True), st.H1, bold=True)
    pg.hline(x0, x1, st.HEADER_RULE, st.INK, 0.8)
    pg.hline(x0, x1, pg.h - st.FOOTER_RULE)
    pg.text(x0, pg.h - 0.25, f"conecheck {version} · box versus light-cone validation",
            st.SMALL, colour=st.MUTED)
    pg.text(x1, pg.h - 0.25, f"page {page_no} of {n_pages}", st.SMALL, colour=st.MUTED,
            ha="right")


# --------------------------------------------------------------------------- flowing text
#: Flow styles: (font size [pt], mono, bold, line height [inch], space before [inch]).
FLOW_STYLES = {
    "h2": (st.H2, False, True, 0.24, 0.14),
    "h3": (st.BODY + 0.5, False, True, 0.19, 0.06),
    "body": (st.BODY, False, False, 0.165, 0.0),
    "mono": (st.SMALL, True, False, 0.14, 0.0),
    "muted": (st.SMALL, False, False, 0.15, 0.0),
}


@dataclass(frozen=True)
class FlowLine:
    style: str
    text: str
    colour: str = st.INK


def flow_lines(blocks: Sequence[tuple[str, str] | tuple[str, str, str]], width: float
               ) -> list[FlowLine]:
    """Wrap (style, text[, colour]) blocks to lines of ``width`` inches."""
    out: list[FlowLine] = []
    for block in blocks:
        sty, text = block[0], block[1]
        colour = block[2] if len(block) > 2 else st.INK
        size, mono, bold, _, _ = FLOW_STYLES[sty]
        indent = "    " if sty == "mono" else "  "
        for i, line in enumerate(wrap(text, width, size, mono, bold, indent=indent)):
            # Space before a heading only on its first line.
            out.append(FlowLine(sty if i == 0 or sty not in ("h2", "h3") else "body", line,
                                colour))
    return out


def _line_height(line: FlowLine, first: bool) -> float:
    _, _, _, lh, before = FLOW_STYLES[line.style]
    return lh + (0.0 if first else before)


def paginate_flow(lines: Sequence[FlowLine], height: float, first_height: float | None = None
                  ) -> list[list[FlowLine]]:
    """Split lines into pages of at most ``height`` inches (``first_height`` for page 1).

    A heading never ends a page: it moves to the next page with the line that follows it.
    """
    pages: list[list[FlowLine]] = []
    cur: list[FlowLine] = []
    used = 0.0
    room = height if first_height is None else first_height
    for i, line in enumerate(lines):
        need = _line_height(line, not cur)
        is_head = line.style in ("h2", "h3")
        nxt = lines[i + 1] if i + 1 < len(lines) else None
        if is_head and nxt is not None:
            need_pair = need + _line_height(nxt, False)
        else:
            need_pair = need
        if cur and used + need_pair > room:
            pages.append(cur)
            cur, used, room = [], 0.0, height
            need = _line_height(line, True)
        if not cur and not line.text.strip():
            continue  # no blank line at the top of a page
        cur.append(line)
        used += need
    if cur:
        pages.append(cur)
    return pages or [[]]


def draw_flow(page: Page, lines: Sequence[FlowLine], top: float, left: float = st.MARGIN_X
              ) -> float:
    """Draw lines from ``top`` [inch]; returns the y of the last baseline."""
    y = top
    for i, line in enumerate(lines):
        size, mono, bold, lh, before = FLOW_STYLES[line.style]
        y += lh + (before if i else 0.0)
        if line.text:
            page.text(left, y - 0.04, line.text, size, mono=mono, bold=bold,
                      colour=st.MUTED if line.style == "muted" else line.colour)
    return y


# --------------------------------------------------------------------------- tables
@dataclass(frozen=True)
class Column:
    """A table column: header, width [inch], alignment."""

    header: str
    width: float
    align: str = "left"


@dataclass(frozen=True)
class Cell:
    """A table cell; ``verdict`` colours its background and text."""

    text: str
    verdict: str | None = None
    bold: bool = False
    middle: bool = False  # shorten in the middle rather than at the end


ROW_H = 0.22  # inch


def split_rows(rows: Sequence[Any], first_cap: int, cont_cap: int) -> list[Sequence[Any]]:
    """Table rows split into pages: ``first_cap`` rows on the first, ``cont_cap`` after."""
    chunks = [rows[:first_cap]]
    rest = rows[first_cap:]
    while rest:
        chunks.append(rest[:max(1, cont_cap)])
        rest = rest[max(1, cont_cap):]
    return chunks


def rows_that_fit(height: float, row_h: float = ROW_H) -> int:
    """Number of body rows (besides the header row) that fit ``height`` inches."""
    return max(0, int((height - row_h) // row_h))


def draw_table(page: Page, x: float, y: float, columns: Sequence[Column],
               rows: Sequence[Sequence[Cell | str]], size: float = st.TABLE,
               row_h: float = ROW_H) -> float:
    """Draw a header row and ``rows`` from (x, y) [inch]; returns the y below the table.

    Cell text is shortened with "…" to its column width; verdict cells get a tinted
    background and the verdict's colour.
    """
    total = sum(c.width for c in columns)
    page.rect(x, y, total, row_h, st.BAND)
    cx = x
    pad = 0.06
    for col in columns:
        tx = cx + (col.width - pad if col.align == "right" else pad)
        if col.align == "center":
            tx = cx + col.width / 2
        page.text(tx, y + row_h - 0.065, shorten(col.header, col.width - 2 * pad, size,
                                                 bold=True), size, bold=True, ha=col.align)
        cx += col.width
    yy = y + row_h
    for r, row in enumerate(rows):
        if r % 2:
            page.rect(x, yy, total, row_h, "#f7f8fa")
        cx = x
        for col, cell in zip(columns, row, strict=True):
            c = cell if isinstance(cell, Cell) else Cell(str(cell))
            colour = st.INK
            if c.verdict is not None:
                page.rect(cx + 0.02, yy + 0.025, col.width - 0.04, row_h - 0.05,
                          st.verdict_tint(c.verdict))
                colour = st.verdict_colour(c.verdict)
            bold = c.bold or c.verdict is not None
            tx = cx + (col.width - pad if col.align == "right" else pad)
            if col.align == "center":
                tx = cx + col.width / 2
            page.text(tx, yy + row_h - 0.065, shorten(c.text, col.width - 2 * pad, size,
                                                      bold=bold, middle=c.middle),
                      size, bold=bold, colour=colour, ha=col.align)
            cx += col.width
        yy += row_h
    page.hline(x, x + total, yy, st.RULE)
    return yy


def fit_columns(columns: Sequence[Column], width: float) -> list[Column]:
    """Scale column widths so that they add up to ``width`` inches."""
    total = sum(c.width for c in columns)
    return [Column(c.header, c.width * width / total, c.align) for c in columns]
