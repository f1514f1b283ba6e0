"""The training coordinator's report: training-report.pdf, read from comparison.json only.

The first page answers "did it work, for whom, and did it last" with the summary
sentences and verdict words that ``compare`` wrote; nothing here decides a word.
"""

from __future__ import annotations

import io

from reportlab.platypus import Spacer

from . import wording
from .layout import fitted_table
from .styles import (CELL, CELL_BOLD, CONTENT_WIDTH, HEADING, NOTE, SMALL, TITLE, ReportDocument,
                     table_style, text)

TRAINING_FILE = "training-report.pdf"
_METRIC_LABELS = {"r": "R_s", "retest_r": "retest r", "misallocation": "misallocation",
                  "severity": "severity", "r_a": "r_a"}


def _change_cell(block: dict, verdict: str) -> str:
    ch = block["changes"][-1]
    return (f"{verdict}: {wording.fmt(ch['delta'])} "
            f"[{wording.fmt(ch['ci_low'])}, {wording.fmt(ch['ci_high'])}]")


def training_pdf(comparison: dict) -> bytes:
    """training-report.pdf as bytes, from the comparison.json dictionary."""
    phases = comparison["phases"]
    metrics = [m for m in _METRIC_LABELS if comparison["raters"] and m in comparison["raters"][0]["metrics"]]
    story = [text("Did the training work?", TITLE)]
    for line in comparison["summary"]:
        story.append(text(line))
    story.append(text("Cautions", HEADING))
    for caution in comparison["cautions"]:
        story.append(text(caution, NOTE))

    story.append(text(f"Each rater, {phases[0]} to {phases[-1]}", HEADING))
    story.append(text("Each cell: the verdict, the change and its 95% interval. \"No clear change\" "
                      "means the interval holds zero; it is not proof that nothing changed.", SMALL))
    header = [text("rater", CELL_BOLD), text("arm", CELL_BOLD)] + [
        text(_METRIC_LABELS[m], CELL_BOLD) for m in metrics]
    rows = [header]
    ordered = sorted(comparison["raters"], key=lambda r: (not r["trained"],))
    for r in ordered:
        arm = "trained" if r["trained"] else "control"
        rows.append([text(r["rater"], CELL), text(arm, CELL)]
                    + [text(_change_cell(r["metrics"][m], r["verdicts"][m]), CELL) for m in metrics])
    first_width = 0.14 * CONTENT_WIDTH
    arm_width = 0.10 * CONTENT_WIDTH
    rest = (CONTENT_WIDTH - first_width - arm_width) / max(len(metrics), 1)
    story.append(fitted_table(rows, [first_width, arm_width] + [rest] * len(metrics),
                       style=table_style(), repeatRows=1))

    effects = comparison["panel"]["training_effect"]
    if effects:
        story.append(Spacer(1, 8))
        story.append(text("Trained against controls (difference in differences)", HEADING))
        rows = [[text(h, CELL_BOLD) for h in ("metric", "estimate", "95% interval", "p", "ANCOVA")]]
        for m in metrics:
            e = effects[m]
            a = e["ancova"]
            rows.append([text(_METRIC_LABELS[m], CELL), text(wording.fmt(e["estimate"]), CELL),
                         text(f"[{wording.fmt(e['ci_low'])}, {wording.fmt(e['ci_high'])}]", CELL),
                         text(wording.fmt_p(e["p_value"]), CELL),
                         text(f"{wording.fmt(a['estimate'])} [{wording.fmt(a['ci_low'])}, "
                              f"{wording.fmt(a['ci_high'])}]", CELL)])
        story.append(fitted_table(rows, style=table_style(), repeatRows=1))
        story.append(text("Welch's t on the per-rater changes; ANCOVA holds each rater's starting "
                          "value constant.", SMALL))
    if comparison["unmatched"]:
        story.append(text("Not in every phase (left out): "
                          + ", ".join(u["rater"] for u in comparison["unmatched"]), SMALL))
    buf = io.BytesIO()
    doc = ReportDocument(buf, study_name=comparison["study"]["name"], title="Training report",
                         caution=wording.CAUTION_LINE)
    doc.build(story)
    return buf.getvalue()
