"""Column widths measured from the text, so that no word in a table is ever cut in two.

reportlab splits a word that is wider than its column at any letter ("Repea/ts"). Every
report table is made with :func:`fitted_table`: each column is at least as wide as the
widest single word in it (measured in the cell's own font and size, plus the cell padding),
and the columns that have room to spare give it up. Only when even the widest words of
every column cannot sit side by side on the page are the table's fonts made smaller,
step by step, until they do.
"""

from __future__ import annotations

from collections.abc import Sequence

from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, Paragraph, Table

from .styles import BASE_FONT, CONTENT_WIDTH, MARGIN, PAGE_SIZE

# Left plus right padding of a cell in the one table style (styles.table_style).
CELL_PADDING = 8.0
# The table style's font for plain-string cells (which never wrap).
STRING_FONT_SIZE = 8.5
# How far the fonts of a table may shrink before a long word is allowed to break.
SMALLEST_FONT_FACTOR = 0.6


# Height of the text frame of a page (styles.ReportDocument: margins, header and footer room).
FRAME_HEIGHT = PAGE_SIZE[1] - 2 * MARGIN - 16 * mm
# A part that should start a page starts a new one only when less than this share of the
# frame is left: a first page that runs over by one caution box then continues on the next
# page instead of leaving that box alone on it.
FRESH_PAGE_ROOM = 0.7


def fresh_page() -> CondPageBreak:
    """Start the next part on a new page, unless the current page is still nearly empty."""
    return CondPageBreak(FRESH_PAGE_ROOM * FRAME_HEIGHT)


def cell_min_width(cell) -> float:
    """The narrowest a cell's content can be set without cutting a word (points, no padding)."""
    if isinstance(cell, Paragraph):
        return float(cell.minWidth())
    if isinstance(cell, str):
        return max((stringWidth(line, BASE_FONT, STRING_FONT_SIZE) for line in cell.split("\n")), default=0.0)
    if isinstance(cell, (list, tuple)):
        return max((cell_min_width(c) for c in cell), default=0.0)
    width = getattr(cell, "width", None) or getattr(cell, "drawWidth", None)
    return float(width) if width else 0.0


def _natural_width(cell) -> float:
    """The width a cell takes on one line (points, no padding): the preferred width of a free column."""
    if isinstance(cell, Paragraph):
        style = cell.style
        return stringWidth(cell.getPlainText(), style.fontName, style.fontSize)
    return cell_min_width(cell)


def fit_widths(rows: Sequence[Sequence], widths: Sequence[float | None] | None = None, *,
               total: float = CONTENT_WIDTH, padding: float = CELL_PADDING) -> list[float] | None:
    """Column widths that hold every word of ``rows``, or None when no width can (fonts must shrink).

    ``widths`` are the preferred widths (None: as wide as the column's text on one line, within
    ``total``). A column narrower than its widest word is widened; the room is taken from the
    columns that have more than they need, in proportion to their spare room, so that the table
    stays within ``total`` when its preferred widths did.
    """
    n_cols = max((len(r) for r in rows), default=0)
    need = [max((cell_min_width(r[j]) for r in rows if j < len(r)), default=0.0) + padding
            for j in range(n_cols)]
    if widths is None:
        widths = [None] * n_cols
    preferred = [float(w) if w is not None else
                 max((_natural_width(r[j]) for r in rows if j < len(r)), default=0.0) + padding
                 for j, w in enumerate(widths)]
    limit = max(total, sum(w for w in widths if w is not None))
    fitted = [max(p, n) for p, n in zip(preferred, need)]
    excess = sum(fitted) - limit
    if excess > 1e-6:
        spare = [f - n for f, n in zip(fitted, need)]
        room = sum(spare)
        if room < excess - 1e-6:
            return None
        fitted = [f - excess * s / room for f, s in zip(fitted, spare)]
    return fitted


def _scaled(cell, factor: float):
    if isinstance(cell, Paragraph):
        style = cell.style
        smaller = ParagraphStyle(f"{style.name}-x{factor:.2f}", parent=style, fontSize=style.fontSize * factor,
                                 leading=style.leading * factor)
        return Paragraph(cell.text, smaller)
    if isinstance(cell, list):
        return [_scaled(c, factor) for c in cell]
    return cell


def fitted_table(rows: Sequence[Sequence], widths: Sequence[float | None] | None = None, *,
                 total: float = CONTENT_WIDTH, **table_options) -> Table:
    """A reportlab Table whose columns hold their widest words (see the module's note).

    Parameters
    ----------
    rows : the header row and the body rows (Paragraphs, strings or drawings).
    widths : preferred column widths in points; None (or a None entry): from the text.
    total : the width the table may take (the page's frame by default).
    table_options : passed on to ``Table`` (``repeatRows``, ``hAlign``, ``style``).
    """
    rows = [list(r) for r in rows]
    fitted = fit_widths(rows, widths, total=total)
    factor = 1.0
    while fitted is None and factor > SMALLEST_FONT_FACTOR:
        factor = round(factor - 0.05, 2)
        rows = [[_scaled(c, factor / (factor + 0.05)) for c in r] for r in rows]
        fitted = fit_widths(rows, widths, total=total)
    if fitted is None:  # words longer than a page's width: the widest break, nothing else does
        fitted = fit_widths(rows, widths, total=float("inf"))
        fitted = [w * total / sum(fitted) for w in fitted]
    return Table(rows, colWidths=fitted, **table_options)


__all__ = ["cell_min_width", "fit_widths", "fitted_table", "fresh_page"]
