"""The layout rules on hand-made stories: measured column widths, headings kept with their
section, and a part that starts a page not leaving the page before it nearly empty."""

from __future__ import annotations

import io

from reportlab.platypus import Spacer

from calibrate.report.layout import FRAME_HEIGHT, fit_widths, fitted_table, fresh_page
from calibrate.report.styles import (BODY, CELL, CELL_BOLD, CONTENT_WIDTH, HEADING, NOTE, ReportDocument,
                                     table_style, text)
from tests.report_layout import split_words, watch_build


def _build(story) -> bytes:
    buf = io.BytesIO()
    ReportDocument(buf, study_name="Invented study", title="Layout check", caution="caution").build(story)
    return buf.getvalue()


def test_narrow_preferred_columns_are_widened_and_the_table_stays_on_the_page():
    head = ["Rater", "Repeats", "Misallocation", "Notes"]
    rows = [[text(h, CELL_BOLD) for h in head],
            [text("Quentin-Montgomery-Achterberg", CELL), text("15", CELL), text("0.41", CELL),
             text("a long note that may wrap at its spaces as often as it needs to", CELL)]]
    table = fitted_table(rows, [40, 20, 20, CONTENT_WIDTH - 80], style=table_style())
    _, layout = watch_build(lambda: _build([table]))
    assert not [p for t in layout.tables for p in split_words(t)]
    assert abs(sum(table._argW) - CONTENT_WIDTH) < 1e-6


def test_fonts_shrink_only_when_the_widest_words_cannot_sit_side_by_side():
    words = ["Representativeness"] * 5
    rows = [[text(w, CELL_BOLD) for w in words], [text("0.5", CELL)] * 5]
    assert fit_widths(rows, None) is None  # five such words do not fit side by side at 8.5 pt
    _, layout = watch_build(lambda: _build([fitted_table(rows, style=table_style())]))
    table = layout.tables[0]
    assert not split_words(table)
    assert sum(table._colWidths) <= CONTENT_WIDTH + 1e-6


def test_a_heading_moves_to_the_next_page_with_its_section():
    story = [Spacer(1, FRAME_HEIGHT - 40), text("A section", HEADING),
             fitted_table([[text("a", CELL_BOLD), text("b", CELL_BOLD)]] + [[text("1", CELL), text("2", CELL)]] * 30)]
    _, layout = watch_build(lambda: _build(story))
    assert layout.page_fill[0] < (FRAME_HEIGHT - 30) / FRAME_HEIGHT  # the heading left page 1


def test_a_caution_box_that_runs_over_is_not_left_alone_on_a_page():
    story = [Spacer(1, FRAME_HEIGHT - 20), text("A caution box of two lines that does not fit on the "
                                                "first page any more and runs over to the next one.", NOTE),
             fresh_page(), text("The next part", HEADING)] + [text("Body text of the next part.", BODY)] * 50
    _, layout = watch_build(lambda: _build(story))
    assert layout.page_fill[1] > 0.5  # the next part continued below the box


def test_a_heading_over_a_long_table_stays_where_there_is_room():
    """Keeping a heading with the whole of a long table would send both to the next page and
    leave most of this one empty."""
    body = [[text("a", CELL_BOLD), text("b", CELL_BOLD)]] + [[text("1", CELL), text("2", CELL)]] * 120
    story = [Spacer(1, FRAME_HEIGHT * 0.4), text("A section", HEADING), fitted_table(body, style=table_style())]
    _, layout = watch_build(lambda: _build(story))
    assert layout.page_fill[0] > 0.9
