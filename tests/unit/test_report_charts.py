"""Charts show every point and line up with each other: dots at the ends of the scale sit
inside the frame, heat-map cells carry their values, and the heat map's rows follow the tree."""

from __future__ import annotations

from reportlab.graphics.shapes import Circle, Rect

from calibrate.report import charts


def _frame_and_dots(drawing):
    """The chart's frame and every dot as (x, y, radius), whether a Circle or in a DotLayer."""
    frame = next(s for s in drawing.contents if isinstance(s, Rect))
    dots = []
    for shape in drawing.contents:
        if isinstance(shape, Circle):
            dots.append((shape.cx, shape.cy, shape.r))
        elif isinstance(shape, charts.DotLayer):
            dots += shape.dots()
    return frame, dots


def _inside(frame, dot) -> bool:
    x, y, r = dot
    return (frame.x <= x - r and x + r <= frame.x + frame.width
            and frame.y <= y - r and y + r <= frame.y + frame.height)


def test_retest_dots_at_both_ends_of_the_scale_sit_inside_the_frame():
    pairs = [(1, 1)] * 4 + [(7, 7)] * 3 + [(1, 7), (7, 1), (4, 4)]
    frame, dots = _frame_and_dots(charts.retest_scatter(pairs, low=1, high=7))
    assert len(dots) == 5
    assert all(_inside(frame, d) for d in dots), dots


def test_reading_order_dots_at_both_ends_sit_inside_the_frame():
    positions = list(range(40))
    judgments = [1 if k % 2 else 7 for k in positions]
    frame, dots = _frame_and_dots(charts.order_chart(positions, judgments, low=1, high=7, width=300))
    assert len(dots) == 40
    assert all(_inside(frame, d) for d in dots)


def test_heat_map_cells_carry_their_values():
    values = [[0.61, -0.2, None], [0.05, 0.33, -0.48]]
    fig = charts.heat_map_figure(["Alder", "Birch"], ["grades", "essay", "interview"], values, ["A", "B"],
                                 width_pt=480)
    shown = sorted(t.get_text() for t in fig.axes[0].texts)
    assert shown == sorted(["0.61", "-0.20", "0.05", "0.33", "-0.48"])
    colours = {t.get_text(): t.get_color() for t in fig.axes[0].texts}
    assert colours["0.61"] == "#ffffff" and colours["0.05"] == "#27323a"  # dark cell, pale cell


def test_tree_leaf_order_is_the_order_the_tree_draws():
    leaves = ["a", "b", "c", "d", "e"]
    merges = [(("a",), ("d",)), (("b",), ("e",)), (("a", "d"), ("c",)), (("b", "e"), ("a", "d", "c"))]
    order = charts.tree_leaf_order(leaves, merges)
    assert order == ["b", "e", "a", "d", "c"]
    drawn, _, _ = charts._replay_merges(leaves, [(a, b, 0.1 * k) for k, (a, b) in enumerate(merges)])
    assert order == drawn


def test_long_rater_names_are_shown_whole_beside_the_heat_map():
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    names = ["Maximiliana-Featherstonehaugh", "Rr"]
    fig = charts.heat_map_figure(names, ["x1", "x2"], [[0.1, 0.2], [0.3, -0.1]], ["A", "B"], width_pt=480)
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    for label in fig.axes[0].get_yticklabels():
        assert label.get_window_extent(renderer).x0 >= 0, label.get_text()
