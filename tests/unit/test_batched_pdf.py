"""The reports' cheap paths draw what the shape-by-shape paths drew.

A strip chart's panel dots and the reading-order dots are one ``DotLayer`` (a run of PDF
operators) instead of one reportlab ``Circle`` each: the dots, their order, size and colours
must be those of the plain loop kept here as the reference; the chart's number of shapes must
not grow with the panel; a large grouping tree is drawn at a page's height, unnamed; and a
large group's members are listed over several rows of the groups table.
"""

from __future__ import annotations

import io
import re

import pytest
from reportlab.graphics.shapes import Circle, Drawing
from reportlab.pdfgen.canvas import Canvas

from calibrate.report import charts
from calibrate.report.styles import PALE, PANEL


def _reference_strip_dots(values, mine, *, low, high, width):
    """The strip chart's panel dots as the shape-by-shape code drew them: (x, y, r)."""
    lo, hi = min([low, mine, *values]), max([high, mine, *values])
    x0, x1 = 34.0, width - 36.0

    def x_of(v):
        return x0 + (v - lo) / (hi - lo) * (x1 - x0) if hi > lo else (x0 + x1) / 2

    return [(x_of(v), 10.0 + (k % 3 - 1) * 2.5, 2.2) for k, v in enumerate(sorted(values))]


def _flat(dots) -> list[float]:
    return [v for dot in dots for v in dot]


def _layer(drawing) -> charts.DotLayer:
    (layer,) = [s for s in drawing.contents if isinstance(s, charts.DotLayer)]
    return layer


def _operator_centres(operators: str) -> list[tuple[float, float]]:
    return [(float(x), float(y)) for x, y in re.findall(r"q 1 0 0 1 (\S+) (\S+) cm", operators)]


@pytest.mark.parametrize("values", [[0.4], [0.1, 0.5, 0.5, 0.9, 0.2], [k / 997 for k in range(0, 2000, 7)]])
def test_strip_chart_dots_equal_the_shape_by_shape_dots(values):
    drawing = charts.strip_chart(values, 0.3, low=0.0, high=1.0, width=120.0)
    layer = _layer(drawing)
    reference = _reference_strip_dots(values, 0.3, low=0.0, high=1.0, width=120.0)
    assert _flat(layer.dots()) == pytest.approx(_flat(reference), rel=1e-12)
    assert (layer.fill, layer.stroke, layer.stroke_width) == (PALE, PANEL, 0.6)
    # the operators place every dot where it is, to the 0.001 point they are written with
    centres = _operator_centres(layer.operators())
    assert len(centres) == len(reference)
    for (x, y), (rx, ry, _) in zip(centres, reference):
        assert abs(x - rx) <= 6e-4 and abs(y - ry) <= 6e-4
    # the reader's own dot is still drawn last, on top of the panel's
    assert isinstance(drawing.contents[-1], Circle) and drawing.contents[-1].r == 4.2


def test_shapes_of_a_strip_chart_do_not_grow_with_the_panel():
    small = charts.strip_chart([0.2, 0.4, 0.6], 0.5, low=0, high=1, width=120)
    large = charts.strip_chart([k / 2000 for k in range(2000)], 0.5, low=0, high=1, width=120)
    assert len(small.contents) == len(large.contents)


def test_reading_order_dots_equal_the_shape_by_shape_dots():
    positions = list(range(30))
    judgments = [1 + (k * 5) % 7 for k in positions]
    drawing = charts.order_chart(positions, judgments, low=1, high=7, width=300)
    layer = _layer(drawing)
    assert layer.stroke is None and layer.radius == 1.3 and layer.fill == PANEL
    # the reference: the frame's mapping of the plain loop (sorted by position)
    frame = drawing.contents[0]
    pmin, pmax = 0 - 0.015 * 29, 29 + 0.015 * 29
    lo, hi = 1 - 0.07 * 6, 7 + 0.07 * 6
    expected = [(frame.x + (p - pmin) / (pmax - pmin) * frame.width,
                 frame.y + (j - lo) / (hi - lo) * frame.height, 1.3) for p, j in sorted(zip(positions, judgments))]
    assert _flat(layer.dots()) == pytest.approx(_flat(expected), rel=1e-12)


def test_dot_layer_draws_in_a_pdf_and_an_empty_layer_draws_nothing():
    buf = io.BytesIO()
    canvas = Canvas(buf, invariant=True)
    drawing = Drawing(100, 30)
    drawing.add(charts.DotLayer([10, 20], [15, 15], 2.0, fill=PALE, stroke=PANEL, stroke_width=0.6))
    drawing.add(charts.DotLayer([], [], 1.0, fill=PANEL))
    drawing.drawOn(canvas, 0, 0)
    canvas.save()
    assert buf.getvalue().startswith(b"%PDF")
    assert charts.DotLayer([], [], 1.0, fill=PANEL).operators() == ""
    stroked = charts.DotLayer([10], [15], 2.0, fill=PALE, stroke=PANEL, stroke_width=0.6).operators()
    assert stroked.count(" B Q") == 1 and " RG 0.6 w" in stroked
    assert charts.DotLayer([10], [15], 2.0, fill=PALE).operators().count(" f Q") == 1


def test_a_large_grouping_tree_is_drawn_at_a_page_height_without_names():
    leaves = [f"r{k:04d}" for k in range(charts.TREE_NAMED_LEAVES + 40)]
    merges, clusters = [], [(leaf,) for leaf in leaves]
    height = 0.0
    while len(clusters) > 1:  # pair neighbours, level by level
        joined = []
        for i in range(0, len(clusters) - 1, 2):
            height += 0.001
            merges.append((clusters[i], clusters[i + 1], height))
            joined.append(clusters[i] + clusters[i + 1])
        if len(clusters) % 2:
            joined.append(clusters[-1])
        clusters = joined
    image = charts.grouping_tree(leaves, merges, {}, width_pt=400)
    assert image.drawHeight == pytest.approx(charts.UNNAMED_TREE_HEIGHT)
    few = charts.grouping_tree(leaves[:4], [(("r0000",), ("r0001",), 0.1), (("r0002",), ("r0003",), 0.2),
                                            (("r0000", "r0001"), ("r0002", "r0003"), 0.3)], {}, width_pt=400)
    assert few.drawHeight == pytest.approx(max(2.0, 0.22 * 4 + 0.6) * 72)


def test_a_large_group_is_listed_over_several_rows(monkeypatch):
    from calibrate.report import panel as panel_module

    class Group:
        def __init__(self, label, raters):
            self.group, self.raters, self.sets_apart, self.importance = label, raters, "leans on grades", {}

    class Panel:
        groups = [Group("A", [f"r{k:04d}" for k in range(150)]), Group("B", ["x1", "x2"])]
        grouping = None
        homogeneity = None

    report = panel_module.PanelReport.__new__(panel_module.PanelReport)
    story = panel_module.PanelReport.groups(report, Panel())
    (table,) = [f for f in story if f.__class__.__name__ == "Table" or hasattr(f, "_cellvalues")]
    cells = [[getattr(c, "text", c) for c in row] for row in table._cellvalues]
    per_row = panel_module.GROUP_NAMES_PER_ROW
    assert [row[0] for row in cells[1:]] == ["A", "A (continued)", "A (continued)", "B"]
    assert cells[1][2] == "leans on grades" and cells[2][2] == ""
    listed = [name for row in cells[1:4] for name in row[1].split(", ")]
    assert listed == Panel.groups[0].raters and len(cells[1][1].split(", ")) == per_row


def test_font_fallback_only_on_non_ascii_texts_draws_the_same_png():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.text import Text

    from calibrate.report.styles import matplotlib_families

    families = matplotlib_families()
    if len(families) < 2:
        pytest.skip("no CJK font installed: no fallback to compare")

    def png(every_text: bool) -> bytes:
        fig = charts.heat_map_figure(["王小明", "Birch"], ["grades", "essay"], [[0.61, -0.2], [0.05, 0.33]],
                                     ["A", "B"], width_pt=300)
        FigureCanvasAgg(fig)
        if every_text:  # the reference: every text of the figure given the list of families
            for item in fig.findobj(Text):
                item.set_fontfamily(families)
        else:
            charts._with_cjk_fallback(fig)
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=100, metadata={"Software": None})
        return buf.getvalue()

    assert png(every_text=False) == png(every_text=True)


@pytest.mark.parametrize("rater", ["Ann Lee", "Ann", "r10", "王小明"])
def test_a_sentence_is_kept_private_as_by_the_per_rater_pattern(rater):
    from calibrate.report._read import id_pattern
    from calibrate.report.rater import RaterReport

    ids = ["Ann Lee", "Ann", "r1", "r10", "王小明", "Birch"]

    class View:
        @staticmethod
        def rater_ids():
            return list(ids)

    report = RaterReport.__new__(RaterReport)
    report.view, report.rater = View(), rater
    report._any_id, report._others = id_pattern(ids), False
    reference = id_pattern(r for r in ids if r != rater)  # the pattern each report compiled before
    sentences = ["Your policy leans on grades.", f"Prepared for {rater}.", "Ann Lee and you agree.",
                 "Ann agrees.", "r1 and r10.", "r100 is not an id.", "王小明 too.", "Birch", "", None]
    for sentence in sentences:
        expected = None if not sentence or reference.search(sentence) else sentence
        assert report.private(sentence) == expected, sentence
