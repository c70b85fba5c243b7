"""What a report page is: a title, a kind, a drawing function and the axes it will hold."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from .layout import Page

#: Page kinds the HTML report writes as native HTML (table, reasons, collapsed provenance)
#: instead of as figures; every other page of the PDF is a figure there.
TEXT_KINDS = frozenset({"summary", "findings", "rules", "provenance", "appendix"})


@dataclass(frozen=True)
class PageSpec:
    """One page of the report, drawn later onto a blank page-sized figure.

    Attributes
    ----------
    title : str
        Header title.
    kind : str
        ``summary``, ``findings``, ``rules``, ``provenance``, ``footprint``, ``nz``,
        ``statistics``, ``fibres``, ``luminosity`` or ``cuts``.
    draw : callable
        ``draw(page)`` puts the content on a :class:`~conecheck.report.layout.Page`.
    axes : tuple of str
        Labels of the axes the page will carry (for checks).
    """

    title: str
    kind: str
    draw: Callable[[Page], None]
    axes: tuple[str, ...] = field(default=())

    @property
    def is_figure(self) -> bool:
        """Whether the page is a figure (the HTML report shows it as inline SVG)."""
        return self.kind not in TEXT_KINDS
