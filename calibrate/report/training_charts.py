"""Charts of the training report (reportlab vector drawings: many small panels, sharp, small).

Trained raters and controls are told apart twice over, so the charts read in grey print
and for readers who do not see the colours: trained in the accent colour with solid
lines, controls in grey with dashed lines. Every chart carries or sits beside a legend.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

from reportlab.graphics.shapes import Drawing, Line, Polygon, PolyLine, Rect, String

from .charts import LABEL_SIZE, _nice_ticks
from .styles import ACCENT, BASE_FONT, INK, MUTED, PANEL, RUBRIC, RULE
from .wording import fmt

TRAINED_COLOUR = ACCENT
CONTROL_COLOUR = PANEL
CONTROL_DASH = [3, 2]


def _ok(v) -> bool:
    return v is not None and math.isfinite(v)


def _arm_style(trained: bool) -> dict:
    return ({"strokeColor": TRAINED_COLOUR} if trained else
            {"strokeColor": CONTROL_COLOUR, "strokeDashArray": CONTROL_DASH})


def arm_legend(width: float, *, has_control: bool, with_means: bool = True, extra: str | None = None) -> Drawing:
    """The legend line: trained (solid, accent), controls (dashed, grey), thick = arm mean."""
    d = Drawing(width, 14)
    x = 0.0
    items = [("trained" if has_control else "raters", True, 0.8)]
    if has_control:
        items.append(("controls", False, 0.8))
    if with_means:
        items.append(("mean of the trained" if has_control else "mean", True, 2.4))
        if has_control:
            items.append(("mean of the controls", False, 2.4))
    for label, trained, w in items:
        d.add(Line(x, 6, x + 18, 6, strokeWidth=w, **_arm_style(trained)))
        d.add(String(x + 22, 3.5, label, fontName=BASE_FONT, fontSize=LABEL_SIZE, fillColor=INK))
        x += 22 + 4.2 * len(label) + 14
    if extra:
        d.add(String(x, 3.5, extra, fontName=BASE_FONT, fontSize=LABEL_SIZE, fillColor=MUTED))
    return d


def slope_panel(title: str, phases: Sequence[str], lines: Sequence[tuple[Sequence[float | None], bool]],
                *, width: float, height: float = 110.0, means: Sequence[tuple[Sequence[float | None], bool]] = (),
                low: float | None = None, high: float | None = None, subtitle: str | None = None) -> Drawing:
    """One small panel: each line is one rater's figure across the phases (thin), ``means``
    the arm means (thick); ``subtitle`` (what the figure is, which way is better) under the title."""
    d = Drawing(width, height)
    values = [v for vals, _ in (*lines, *means) for v in vals if _ok(v)]
    lo = min(values) if values else 0.0
    hi = max(values) if values else 1.0
    lo = lo if low is None else min(low, lo)
    hi = hi if high is None else max(high, hi)
    if hi - lo < 1e-9:
        lo, hi = lo - 0.05, hi + 0.05
    ticks = _nice_ticks(lo, hi, 3)
    while len(ticks) < 2:  # a narrow range: widen it until at least two labelled lines show the scale
        span = hi - lo
        lo, hi = lo - span / 4, hi + span / 4
        ticks = _nice_ticks(lo, hi, 3)
    lo, hi = min(lo, ticks[0]), max(hi, ticks[-1])
    top_pad = 24.0
    x0, x1 = 30.0, width - 10.0
    y0, y1 = 14.0, height - top_pad

    def x_of(k: int) -> float:
        return x0 + (x1 - x0) * (k / max(len(phases) - 1, 1))

    def y_of(v: float) -> float:
        return y0 + (v - lo) / (hi - lo) * (y1 - y0)

    d.add(String(0, height - 9, title, fontName=BASE_FONT, fontSize=LABEL_SIZE + 1, fillColor=INK))
    if subtitle:
        limit = int(width / 3.2)   # about the characters that fit at this size
        shown = subtitle if len(subtitle) <= limit else subtitle[: limit - 3] + "..."
        d.add(String(0, height - 18, shown, fontName=BASE_FONT, fontSize=LABEL_SIZE - 1, fillColor=MUTED))
    for t in ticks:
        d.add(Line(x0, y_of(t), x1, y_of(t), strokeColor=RULE, strokeWidth=0.4))
        d.add(String(x0 - 3, y_of(t) - 2.5, fmt(t, 2), fontName=BASE_FONT, fontSize=LABEL_SIZE - 1.5,
                     fillColor=MUTED, textAnchor="end"))
    for k, ph in enumerate(phases):
        d.add(Line(x_of(k), y0, x_of(k), y1, strokeColor=RULE, strokeWidth=0.4))
        d.add(String(x_of(k), 3, ph, fontName=BASE_FONT, fontSize=LABEL_SIZE - 1, fillColor=MUTED,
                     textAnchor="middle" if 0 < k < len(phases) - 1 else ("start" if k == 0 else "end")))

    def draw(vals, trained, w):
        pts = [(x_of(k), y_of(v)) for k, v in enumerate(vals) if _ok(v)]
        if len(pts) >= 2:
            d.add(PolyLine([c for p in pts for c in p], strokeWidth=w, **_arm_style(trained)))
        elif pts:
            d.add(Line(pts[0][0] - 2, pts[0][1], pts[0][0] + 2, pts[0][1], strokeWidth=w, **_arm_style(trained)))

    # controls first, so the trained lines sit on top
    for vals, trained in sorted(lines, key=lambda item: item[1]):
        draw(vals, trained, 0.7)
    for vals, trained in sorted(means, key=lambda item: item[1]):
        draw(vals, trained, 2.4)
    return d


def _arrow(d: Drawing, xa: float, xb: float, y: float, trained: bool) -> None:
    style = _arm_style(trained)
    d.add(Line(xa, y, xb, y, strokeWidth=1.4, **style))
    if abs(xb - xa) >= 3:
        s = 1 if xb > xa else -1
        d.add(Polygon([xb, y, xb - s * 4, y + 2.4, xb - s * 4, y - 2.4], fillColor=style["strokeColor"],
                      strokeColor=None))
    else:
        d.add(Rect(xb - 1.5, y - 1.5, 3, 3, fillColor=style["strokeColor"], strokeColor=None))


def cue_shift_chart(cues: Sequence[str], *, rubric: Mapping[str, float | None],
                    trained: Mapping[str, tuple[float | None, float | None]],
                    control: Mapping[str, tuple[float | None, float | None]] | None,
                    toward: Mapping[str, bool | str | None], first: str, last: str, width: float) -> Drawing:
    """One row per cue: the rubric's share (a diamond), the trained raters' mean share
    moving from ``first`` to ``last`` (solid arrow) and the controls' (dashed, below)."""
    row_h = 24.0 if control is not None else 16.0
    label_w = min(120.0, max(60.0, 5.0 * max((len(c) for c in cues), default=8)))
    right_w = 90.0
    legend_h, axis_h = 16.0, 16.0
    height = legend_h + axis_h + row_h * len(cues) + 4
    d = Drawing(width, height)
    values = [v for c in cues for v in (rubric.get(c), *trained.get(c, ()), *((control or {}).get(c, ())))
              if _ok(v)]
    lo, hi = min([0.0, *values]), max([0.05, *values])
    ticks = _nice_ticks(lo, hi, 4)
    lo, hi = min(lo, ticks[0]), max(hi, ticks[-1])
    x0, x1 = label_w + 8, width - right_w

    def x_of(v: float) -> float:
        return x0 + (v - lo) / (hi - lo) * (x1 - x0)

    # legend
    lx = x0
    d.add(Polygon([lx, height - 6, lx + 3.5, height - 9.5, lx + 7, height - 6, lx + 3.5, height - 2.5],
                  fillColor=RUBRIC, strokeColor=None))
    d.add(String(lx + 11, height - 9, "rubric", fontName=BASE_FONT, fontSize=LABEL_SIZE, fillColor=INK))
    lx += 50
    for label, is_trained in (("trained", True), ("controls", False))[: 2 if control is not None else 1]:
        _arrow(d, lx, lx + 18, height - 6, is_trained)
        d.add(String(lx + 22, height - 9, f"{label}, {first} to {last}", fontName=BASE_FONT,
                     fontSize=LABEL_SIZE, fillColor=INK))
        lx += 30 + 4.2 * len(f"{label}, {first} to {last}") + 10
    top = height - legend_h
    for t in ticks:
        d.add(Line(x_of(t), axis_h, x_of(t), top, strokeColor=RULE, strokeWidth=0.4))
        d.add(String(x_of(t), axis_h - 9, fmt(t, 2), fontName=BASE_FONT, fontSize=LABEL_SIZE - 0.5,
                     fillColor=MUTED, textAnchor="middle"))
    d.add(String(x1 + (right_w - 6) / 2 + 6, axis_h - 9, "each trained rater", fontName=BASE_FONT,
                 fontSize=LABEL_SIZE - 0.5, fillColor=MUTED, textAnchor="middle"))
    for i, cue in enumerate(cues):
        y_mid = top - (i + 0.5) * row_h
        d.add(String(label_w, y_mid - 1, cue, fontName=BASE_FONT, fontSize=LABEL_SIZE + 0.5, fillColor=INK,
                     textAnchor="end"))
        y_t = y_mid + (4.0 if control is not None else 0)
        y_c = y_mid - 4.0
        if i:
            d.add(Line(x0 - label_w + 10, y_mid + row_h / 2, x1, y_mid + row_h / 2, strokeColor=RULE,
                       strokeWidth=0.3))
        r = rubric.get(cue)
        if _ok(r):
            d.add(Line(x_of(r), y_mid - row_h / 2 + 2, x_of(r), y_mid + row_h / 2 - 2, strokeColor=RUBRIC,
                       strokeWidth=0.6))
            d.add(Polygon([x_of(r) - 3.5, y_t, x_of(r), y_t - 3.5, x_of(r) + 3.5, y_t, x_of(r), y_t + 3.5],
                          fillColor=RUBRIC, strokeColor=None))
        a, b = trained.get(cue, (None, None))
        if _ok(a) and _ok(b):
            _arrow(d, x_of(a), x_of(b), y_t, True)
        if control is not None:
            a, b = control.get(cue, (None, None))
            if _ok(a) and _ok(b):
                _arrow(d, x_of(a), x_of(b), y_c, False)
        # The words test each trained rater's own distance to the rubric's share (paired), which
        # can shrink while the mean arrow barely moves (raters closing in from both sides).
        if _ok(r):
            said = toward.get(cue)
            word = {True: "closer to it", False: "further from it", "untested": "not tested"}.get(
                said, "no clear change")
            d.add(String(x1 + 8, y_t - 2.5, word, fontName=BASE_FONT, fontSize=LABEL_SIZE - 0.5,
                         fillColor=INK if isinstance(said, bool) else MUTED))
    return d


__all__ = ["CONTROL_COLOUR", "TRAINED_COLOUR", "arm_legend", "cue_shift_chart", "slope_panel"]
