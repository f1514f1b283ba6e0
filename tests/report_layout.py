"""Watching reportlab lay out a report: every table it sets and how full each page ends.

Used by the layout tests: the checks measure words with reportlab's font metrics
(``stringWidth``), independently of the widths ``calibrate.report.layout`` chose.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.platypus import Paragraph, Table

from calibrate.report.styles import ReportDocument


@dataclass
class Layout:
    """What one build set: its tables (after layout) and, per page, the share of the frame filled."""

    tables: list = field(default_factory=list)
    page_fill: list[float] = field(default_factory=list)


def watch_build(build: Callable[[], bytes]) -> tuple[bytes, Layout]:
    """Run ``build`` (which makes one PDF) and record its tables and page fills."""
    seen = Layout()
    ids: set[int] = set()
    original_wrap = Table.wrap
    original_page_end = ReportDocument.handle_pageEnd

    def wrap(self, avail_width, avail_height):
        size = original_wrap(self, avail_width, avail_height)
        if id(self) not in ids:
            ids.add(id(self))
            seen.tables.append(self)
        return size

    def page_end(self):
        frame = self.frame
        top = frame._y1 + frame._height
        seen.page_fill.append((top - frame._y) / frame._height)
        return original_page_end(self)

    Table.wrap = wrap
    ReportDocument.handle_pageEnd = page_end
    try:
        pdf = build()
    finally:
        Table.wrap = original_wrap
        ReportDocument.handle_pageEnd = original_page_end
    return pdf, seen


def _paragraphs(cell) -> list[Paragraph]:
    """The paragraphs of a cell: reportlab keeps a cell's flowables as a tuple after layout."""
    if isinstance(cell, Paragraph):
        return [cell]
    if isinstance(cell, (list, tuple)):
        return [p for c in cell for p in _paragraphs(c)]
    return []


def _header(table) -> str:
    cells = table._cellvalues[0] if table._cellvalues else []
    return " | ".join(" ".join(p.getPlainText() for p in _paragraphs(c)) or str(c) for c in cells)


def split_words(table) -> list[str]:
    """Every word of ``table`` wider than the room its column leaves for text, as messages."""
    problems = []
    widths = table._colWidths
    for i, row in enumerate(table._cellvalues):
        for j, cell in enumerate(row):
            style = table._cellStyles[i][j]
            room = widths[j] - style.leftPadding - style.rightPadding
            for paragraph, word in ((p, w) for p in _paragraphs(cell) for w in p.getPlainText().split()):
                width = stringWidth(word, paragraph.style.fontName, paragraph.style.fontSize)
                if width > room + 0.01:
                    where = "header" if i == 0 else f"row {i}"
                    problems.append(f"'{word}' ({width:.1f} pt) is wider than its column ({room:.1f} pt "
                                    f"for text), {where}, column {j + 1}, in the table headed: {_header(table)}")
    return problems
