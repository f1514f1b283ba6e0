"""Charts. Small per-rater charts are reportlab vector drawings (fast, sharp, small);
the two rich panel figures (heat map, grouping tree) are matplotlib ``Figure``s drawn
at their final size and embedded as PNG."""

from __future__ import annotations

import io
from collections import Counter
from collections.abc import Mapping, Sequence

from reportlab.graphics.shapes import Circle, DirectDraw, Drawing, Line, PolyLine, Rect, String
from reportlab.platypus import Image

from .styles import ACCENT, ACCENT_LIGHT, BASE_FONT, INK, MUTED, PALE, PANEL, RUBRIC, RULE, matplotlib_families
from .wording import fmt

LABEL_SIZE = 7.5
# Room beyond each end of the judgment scale, as a share of its length: a dot at 1 or at 7
# (and the larger dot of several equal pairs) sits wholly inside the frame, off the edge.
SCALE_PAD = 0.07


# A circle of radius 1 about the origin as four Bezier quarter arcs (the usual 0.5523 handle).
_ARC = 0.5522847498


def _pdf_number(v: float) -> str:
    text = f"{v:.3f}".rstrip("0").rstrip(".")
    return "0" if text in ("", "-0") else text


def _pdf_rgb(colour) -> str:
    return " ".join(_pdf_number(c) for c in colour.rgb())


class DotLayer(DirectDraw):
    """Many dots of one look (radius, fill, outline), drawn as one run of PDF operators.

    A strip chart of 2,000 raters has 2,000 dots; as reportlab ``Circle`` shapes each one costs
    a shape object, a graphics-state push and a Bezier arc computed and formatted anew (about
    0.1 ms a dot, most of a large panel's report). Here the circle's path is formatted once and
    each dot adds only its translation; what is drawn is the same, dot by dot in the order
    given (a later dot covers an earlier one, as before). The dots sit in the drawing's
    ``contents`` beside the other shapes, so they are drawn in their place among them.
    """

    def __init__(self, xs: Sequence[float], ys: Sequence[float], radius: float, *, fill,
                 stroke=None, stroke_width: float = 0.0) -> None:
        # plain attributes, outside reportlab's attribute checks (this shape has no style of
        # its own for a renderer to apply)
        self.__dict__.update(xs=[float(x) for x in xs], ys=[float(y) for y in ys], radius=float(radius),
                             fill=fill, stroke=stroke, stroke_width=float(stroke_width))

    def dots(self) -> list[tuple[float, float, float]]:
        """(centre x, centre y, radius) of every dot, in drawing order."""
        return [(x, y, self.radius) for x, y in zip(self.xs, self.ys)]

    def getBounds(self):
        r = self.radius
        if not self.xs:
            return (0, 0, 0, 0)
        return (min(self.xs) - r, min(self.ys) - r, max(self.xs) + r, max(self.ys) + r)

    def copy(self):
        return DotLayer(self.xs, self.ys, self.radius, fill=self.fill, stroke=self.stroke,
                        stroke_width=self.stroke_width)

    def operators(self) -> str:
        """The PDF content-stream operators that draw the dots."""
        if not self.xs:
            return ""
        r, k = self.radius, self.radius * _ARC
        n = _pdf_number
        path = (f"{n(r)} 0 m {n(r)} {n(k)} {n(k)} {n(r)} 0 {n(r)} c "
                f"{n(-k)} {n(r)} {n(-r)} {n(k)} {n(-r)} 0 c "
                f"{n(-r)} {n(-k)} {n(-k)} {n(-r)} 0 {n(-r)} c "
                f"{n(k)} {n(-r)} {n(r)} {n(-k)} {n(r)} 0 c h")
        paint = "B" if self.stroke is not None else "f"
        head = [f"q {_pdf_rgb(self.fill)} rg"]
        if self.stroke is not None:
            head.append(f"{_pdf_rgb(self.stroke)} RG {n(self.stroke_width)} w")
        tail = f" cm {path} {paint} Q"
        # fixed 3 decimals (a thousandth of a point): formatted by one f-string per dot
        body = [f"q 1 0 0 1 {x:.3f} {y:.3f}{tail}" for x, y in zip(self.xs, self.ys)]
        return "\n".join([*head, *body, "Q"])

    def drawDirectly(self, renderer) -> None:
        renderer._canvas.addLiteral(self.operators())


def _padded(low: float, high: float) -> tuple[float, float]:
    """The plotted range of a scale from ``low`` to ``high``: the scale plus SCALE_PAD each side."""
    pad = SCALE_PAD * (high - low)
    return low - pad, high + pad


def _nice_ticks(low: float, high: float, count: int = 5) -> list[float]:
    span = high - low
    if span <= 0:
        return [low]
    raw = span / count
    magnitude = 10 ** int(f"{raw:e}".split("e")[1])
    step = next(m * magnitude for m in (1, 2, 2.5, 5, 10) if m * magnitude >= raw)
    first = (low // step) * step
    ticks, t = [], first
    while t <= high + 1e-9:
        if t >= low - 1e-9:
            ticks.append(round(t, 10))
        t += step
    return ticks


def weight_chart(cues: Sequence[str], series: Sequence[tuple[str, Mapping[str, float], object]],
                 *, width: float, title: str | None = None) -> Drawing:
    """Horizontal bars, one row per cue and one thin bar per series (label, values, colour).

    Values may be negative (a weight share keeps its sign); the axis spans them.
    """
    series = [s for s in series if s[1]]
    bar_h, gap = 6.0, 7.0
    row_h = bar_h * max(len(series), 1) + gap
    label_w = min(150.0, max(60.0, 5.0 * max((len(c) for c in cues), default=8)))
    legend_h = 16.0
    axis_h = 16.0
    height = legend_h + axis_h + row_h * len(cues) + 4
    d = Drawing(width, height)
    values = [v for _, vals, _ in series for v in vals.values() if v is not None]
    low = min([0.0, *values])
    high = max([0.0, *values, 0.05])
    ticks = _nice_ticks(low, high, 4)
    low, high = min(low, ticks[0]), max(high, ticks[-1])
    x0, x1 = label_w + 6, width - 10

    def x_of(v: float) -> float:
        return x0 + (v - low) / (high - low) * (x1 - x0)

    # legend
    lx = x0
    for label, _, colour in series:
        d.add(Rect(lx, height - 10, 8, 7, fillColor=colour, strokeColor=None))
        d.add(String(lx + 11, height - 9, label, fontName=BASE_FONT, fontSize=LABEL_SIZE, fillColor=INK))
        lx += 18 + 4.3 * len(label) + 10
    top = height - legend_h
    for t in ticks:
        d.add(Line(x_of(t), axis_h, x_of(t), top, strokeColor=RULE, strokeWidth=0.4))
        d.add(String(x_of(t), axis_h - 9, fmt(t, 2), fontName=BASE_FONT, fontSize=LABEL_SIZE - 0.5,
                     fillColor=MUTED, textAnchor="middle"))
    d.add(Line(x_of(0), axis_h, x_of(0), top, strokeColor=INK, strokeWidth=0.7))
    for i, cue in enumerate(cues):
        y_top = top - i * row_h - gap / 2
        d.add(String(label_w, y_top - row_h / 2 + 1, cue, fontName=BASE_FONT, fontSize=LABEL_SIZE + 0.5,
                     fillColor=INK, textAnchor="end"))
        for j, (_, vals, colour) in enumerate(series):
            v = vals.get(cue)
            if v is None:
                continue
            y = y_top - (j + 1) * bar_h
            left, right = sorted((x_of(0), x_of(v)))
            d.add(Rect(left, y, max(right - left, 0.6), bar_h - 1, fillColor=colour, strokeColor=None))
    return d


def strip_chart(values: Sequence[float], mine: float, *, low: float, high: float, width: float,
                low_words: str = "lower", high_words: str = "higher") -> Drawing:
    """The reader's figure (a filled dot) among the panel's (small open dots, unlabelled)."""
    height = 20.0
    d = Drawing(width, height)
    lo, hi = min([low, mine, *values]), max([high, mine, *values])
    x0, x1 = 34.0, width - 36.0

    def x_of(v: float) -> float:
        return x0 + (v - lo) / (hi - lo) * (x1 - x0) if hi > lo else (x0 + x1) / 2

    y = 10.0
    d.add(Line(x0, y, x1, y, strokeColor=RULE, strokeWidth=1.2))
    d.add(String(x0 - 6, y - 2.5, low_words, fontName=BASE_FONT, fontSize=6.5, fillColor=MUTED,
                 textAnchor="end"))
    d.add(String(x1 + 6, y - 2.5, high_words, fontName=BASE_FONT, fontSize=6.5, fillColor=MUTED))
    ordered = sorted(values)
    # a little vertical spread (-2.5, 0, +2.5 in turn) so close values stay visible
    d.add(DotLayer([x_of(v) for v in ordered], [y + (k % 3 - 1) * 2.5 for k in range(len(ordered))], 2.2,
                   fill=PALE, stroke=PANEL, stroke_width=0.6))
    d.add(Circle(x_of(mine), y, 4.2, fillColor=ACCENT, strokeColor=INK, strokeWidth=0.6))
    return d


def retest_scatter(pairs: Sequence[tuple[float, float]], *, low: float, high: float,
                   size: float = 150.0) -> Drawing:
    """First against second judgment of each repeated case; dot area grows with the count."""
    d = Drawing(size + 30, size + 26)
    x0, y0 = 26.0, 20.0
    if high <= low:
        high = low + 1
    lo, hi = _padded(low, high)

    def sx(v):
        return x0 + (v - lo) / (hi - lo) * size

    def sy(v):
        return y0 + (v - lo) / (hi - lo) * size

    d.add(Rect(x0, y0, size, size, fillColor=None, strokeColor=RULE, strokeWidth=0.6))
    d.add(Line(sx(low), sy(low), sx(high), sy(high), strokeColor=RUBRIC, strokeWidth=0.8,
               strokeDashArray=[3, 2]))
    for t in _nice_ticks(low, high, 6):
        d.add(String(sx(t), y0 - 9, fmt(t, 0 if float(t).is_integer() else 1), fontName=BASE_FONT,
                     fontSize=6.5, fillColor=MUTED, textAnchor="middle"))
        d.add(String(x0 - 3, sy(t) - 2, fmt(t, 0 if float(t).is_integer() else 1), fontName=BASE_FONT,
                     fontSize=6.5, fillColor=MUTED, textAnchor="end"))
    d.add(String(x0 + size / 2, 0, "first judgment", fontName=BASE_FONT, fontSize=7, fillColor=INK,
                 textAnchor="middle"))
    d.add(String(x0 + 2, y0 + size + 4, "second judgment", fontName=BASE_FONT, fontSize=7, fillColor=INK))
    counts = Counter((float(a), float(b)) for a, b in pairs)
    for (a, b), n in sorted(counts.items()):
        d.add(Circle(sx(a), sy(b), 2.2 + 1.4 * (n - 1) ** 0.5, fillColor=ACCENT_LIGHT, strokeColor=ACCENT,
                     strokeWidth=0.7))
    return d


def order_chart(positions: Sequence[float], judgments: Sequence[float], *, low: float, high: float,
                width: float, height: float = 90.0) -> Drawing:
    """Judgments over the reading order with a running mean (window of a tenth of the cases)."""
    d = Drawing(width, height)
    x0, y0, x1, y1 = 26.0, 16.0, width - 6, height - 6
    n = len(positions)
    pmin, pmax = (min(positions), max(positions)) if n else (0, 1)
    if pmax <= pmin:
        pmax = pmin + 1
    # the first and last judgments sit off the frame's sides as well
    pmin, pmax = pmin - 0.015 * (pmax - pmin), pmax + 0.015 * (pmax - pmin)
    if high <= low:
        high = low + 1
    shown_low, shown_high = _padded(low, high)

    def sx(v):
        return x0 + (v - pmin) / (pmax - pmin) * (x1 - x0)

    def sy(v):
        return y0 + (v - shown_low) / (shown_high - shown_low) * (y1 - y0)

    d.add(Rect(x0, y0, x1 - x0, y1 - y0, fillColor=None, strokeColor=RULE, strokeWidth=0.6))
    for t in _nice_ticks(low, high, 4):
        d.add(String(x0 - 3, sy(t) - 2, fmt(t, 0 if float(t).is_integer() else 1), fontName=BASE_FONT,
                     fontSize=6.5, fillColor=MUTED, textAnchor="end"))
    d.add(String((x0 + x1) / 2, 3, "reading order (first case left)", fontName=BASE_FONT, fontSize=7,
                 fillColor=INK, textAnchor="middle"))
    order = sorted(zip(positions, judgments))
    d.add(DotLayer([sx(p) for p, _ in order], [sy(j) for _, j in order], 1.3, fill=PANEL))
    window = max(3, n // 10)
    if n >= window:
        points = []
        running = sum(j for _, j in order[:window])
        for k in range(window, n + 1):
            centre = order[k - window // 2 - 1][0]
            points.extend([sx(centre), sy(running / window)])
            if k < n:
                running += order[k][1] - order[k - window][1]
        d.add(PolyLine(points, strokeColor=ACCENT, strokeWidth=1.6))
    return d


# ---------------------------------------------------------------- matplotlib figures


def _with_cjk_fallback(fig) -> None:
    """Let every text of the figure fall back to the CJK font (rater ids such as 王小明 in
    tick labels), which matplotlib does per character when given a list of families."""
    from matplotlib.text import Text

    families = matplotlib_families()
    if len(families) > 1:
        for item in fig.findobj(Text):
            # Only texts the first family may lack: a list of families sends a text through
            # matplotlib's font look-up for each family (about a twentieth of a 2,000-rater
            # panel summary), and an ASCII text is drawn the same (DejaVu Sans has every
            # ASCII glyph; the heat map's PNG is byte-identical).
            if not item.get_text().isascii():
                item.set_fontfamily(families)


def _label_room(labels: Sequence[str], width_pt: float, *, least: float = 0.2, most: float = 0.45) -> float:
    """The share of a figure's width its row labels need on the left (6.5 pt DejaVu Sans, as
    drawn), so that a long rater name is shown whole rather than cut at the figure's edge."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    widest = max((stringWidth(str(label), BASE_FONT, 6.5) for label in labels), default=0.0)
    return min(most, max(least, (widest + 18.0) / width_pt))  # 18 pt: tick padding and a margin


def _png_image(fig, width_pt: float, height_pt: float) -> Image:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    _with_cjk_fallback(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=200, metadata={"Software": None})
    buf.seek(0)
    return Image(buf, width=width_pt, height=height_pt)


def weight_heat_map(raters: Sequence[str], terms: Sequence[str], values: Sequence[Sequence[float | None]],
                    groups: Sequence[str | None], *, width_pt: float) -> Image:
    """Standardized weights, raters (rows, in the order given: the grouping tree's) by design
    terms (columns), each cell with its value."""
    fig = heat_map_figure(raters, terms, values, groups, width_pt=width_pt)
    return _png_image(fig, width_pt, fig.get_figheight() * 72)


def heat_map_figure(raters: Sequence[str], terms: Sequence[str], values: Sequence[Sequence[float | None]],
                    groups: Sequence[str | None], *, width_pt: float):
    """The matplotlib Figure behind :func:`weight_heat_map`."""
    import numpy as np
    from matplotlib.colors import LinearSegmentedColormap
    from matplotlib.figure import Figure

    data = np.array([[np.nan if v is None else v for v in row] for row in values], dtype=float)
    longest = max((len(t) for t in terms), default=4)
    bottom_in = 0.2 + 0.04 * longest          # room for the slanted term names
    height_in = bottom_in + 0.15 + 0.17 * max(len(raters), 1)
    width_in = width_pt / 72
    fig = Figure(figsize=(width_in, height_in))
    bottom = bottom_in / height_in
    top = 1 - 0.15 / height_in
    labels = [f"{r}  ({g})" if g else str(r) for r, g in zip(raters, groups)]
    left = _label_room(labels, width_pt)
    ax = fig.add_axes((left, bottom, 0.86 - left, top - bottom))
    cmap = LinearSegmentedColormap.from_list("calm", ["#b5651d", "#f7f4ee", "#2f7d74"])
    finite = data[np.isfinite(data)]
    bound = max(float(np.max(np.abs(finite))) if finite.size else 1.0, 0.05)
    im = ax.imshow(np.ma.masked_invalid(data), cmap=cmap, vmin=-bound, vmax=bound, aspect="auto")
    # Each cell carries its value: light text on the dark ends of the palette, ink on the pale
    # middle; the size follows the cell's width so that many cues still fit.
    cell_width_pt = (0.86 - left) * width_pt / max(len(terms), 1)
    value_size = max(3.5, min(6.0, cell_width_pt / 3.4))
    for (i, j), v in np.ndenumerate(data):
        if np.isfinite(v):
            ax.text(j, i, fmt(float(v), 2), ha="center", va="center", fontsize=value_size,
                    color="#ffffff" if abs(v) > 0.62 * bound else "#27323a")
    ax.set_xticks(range(len(terms)), labels=list(terms), rotation=40, ha="right", fontsize=6.5)
    ax.set_yticks(range(len(raters)), labels=labels, fontsize=6.5)
    for k in range(1, len(groups)):
        if groups[k] != groups[k - 1]:
            ax.axhline(k - 0.5, color="#27323a", linewidth=1.0)
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    cax = fig.add_axes((0.89, bottom, 0.02, top - bottom))
    bar = fig.colorbar(im, cax=cax)
    bar.ax.tick_params(labelsize=6)
    bar.set_label("standardized weight", fontsize=6.5)
    return fig


def _replay_merges(leaves: Sequence[str], merges: Sequence[tuple[Sequence[str], Sequence[str], float]]):
    """Replay the merge sequence: each cluster is a list of leaves and merged lists concatenate,
    so that the leaves come out in an order in which no branches cross.

    Returns (leaf order, links (cluster a, cluster b, height), height of every cluster)."""
    clusters = {frozenset([leaf]): [leaf] for leaf in leaves}
    pos_height: dict[frozenset, float] = {frozenset([leaf]): 0.0 for leaf in leaves}
    links = []
    for a, b, h in merges:
        ka, kb = frozenset(a), frozenset(b)
        if ka not in clusters or kb not in clusters:
            continue
        links.append((ka, kb, h))
        clusters[ka | kb] = clusters.pop(ka) + clusters.pop(kb)
        pos_height[ka | kb] = h
    order = [leaf for members in clusters.values() for leaf in members]
    return order, links, pos_height


def tree_leaf_order(leaves: Sequence[str], merges: Sequence[tuple[Sequence[str], Sequence[str]]]) -> list[str]:
    """The top-to-bottom order of the leaves in the grouping tree (:func:`grouping_tree`), for
    the figures that list raters beside it (the heat map)."""
    return _replay_merges(leaves, [(a, b, 0.0) for a, b in merges])[0]


# Largest tree drawn with every rater's name beside its leaf: 0.22 inch a leaf, the tree then
# fits a page at two thirds of its size or more, and the names stay legible. A bigger tree is
# drawn at the page's height without names (a name would be under 3 points tall); the groups
# table lists every group's raters.
TREE_NAMED_LEAVES = 60
# Height of an unnamed tree (points): the tallest image a page holds (panel.MAX_IMAGE_HEIGHT).
UNNAMED_TREE_HEIGHT = 640.0


def grouping_tree(leaves: Sequence[str], merges: Sequence[tuple[Sequence[str], Sequence[str], float]],
                  leaf_groups: Mapping[str, str | None], *, width_pt: float) -> Image:
    """A tree drawn from the merge sequence: each merge joins two sets of raters at the
    overall R^2 lost so far (the height), leaves ordered so that no branches cross.

    Up to TREE_NAMED_LEAVES leaves each carries its rater's name (and group); a larger tree is
    drawn at a page's height, its leaves unnamed, its links as one line collection."""
    from matplotlib.figure import Figure

    order, links, pos_height = _replay_merges(leaves, merges)
    x_of_leaf = {leaf: i for i, leaf in enumerate(order)}
    named = len(order) <= TREE_NAMED_LEAVES
    height_in = max(2.0, 0.22 * len(order) + 0.6) if named else UNNAMED_TREE_HEIGHT / 72
    fig = Figure(figsize=(width_pt / 72, height_in))
    if named:
        labels = [f"{leaf}  ({leaf_groups.get(leaf)})" if leaf_groups.get(leaf) else str(leaf) for leaf in order]
        left = _label_room(labels, width_pt)
        ax = fig.add_axes((left, 0.1, 0.92 - left, 0.85))
    else:
        ax = fig.add_axes((0.08, 0.06, 0.84, 0.92))
    centre: dict[frozenset, float] = {frozenset([leaf]): x_of_leaf[leaf] for leaf in leaves}
    paths = []
    for ka, kb, h in links:
        ca, cb = centre[ka], centre[kb]
        ha, hb = pos_height[ka], pos_height[kb]
        paths.append([(ha, ca), (h, ca), (h, cb), (hb, cb)])
        centre[ka | kb] = (ca + cb) / 2
    if named:
        for path in paths:
            ax.plot([p[0] for p in path], [p[1] for p in path], color="#2f7d74", linewidth=1.0)
        ax.set_yticks(range(len(order)), labels=labels, fontsize=6.5)
    else:
        from matplotlib.collections import LineCollection

        ax.add_collection(LineCollection(paths, colors="#2f7d74", linewidths=0.5))
        ax.set_xlim(0, max((h for _, _, h in links), default=1.0) * 1.02 or 1.0)
        ax.set_yticks([])
        ax.set_ylabel(f"{len(order)} raters in the order of the tree", fontsize=7)
    ax.set_ylim(-0.6, len(order) - 0.4)
    ax.invert_yaxis()
    ax.set_xlabel("overall R² lost by merging", fontsize=7)
    ax.tick_params(axis="x", labelsize=6.5)
    ax.tick_params(axis="y", length=0)
    for side in ("top", "right", "left"):
        ax.spines[side].set_visible(False)
    return _png_image(fig, width_pt, height_in * 72)
