"""The training coordinator's report: training-report.pdf, read from comparison.json only.

The first page answers "did it work, for whom, and does it last" in a sentence each. Every
word (the answers, each change's verdict, which way is better, the reading beside what the
design could detect) is read from comparison.json, where :mod:`calibrate.training.verdicts`
wrote it from the intervals: nothing here decides a word, and a comparison.json without them
shows the numbers alone. Numbers are printed by :mod:`calibrate.formatting`, as in the
verdict sentences. Sections whose figures a comparison.json does not hold are left out with
one line saying so (:data:`calibrate.report.comparison_view.ABSENT_REASON`).
"""

from __future__ import annotations

import io
from xml.sax.saxutils import escape

from reportlab.lib.styles import ParagraphStyle
from reportlab.platypus import CondPageBreak, PageBreak, Spacer, Table, TableStyle

from ..formatting import METRIC_LABELS as LABELS, signed
from . import training_charts, wording
from .comparison_view import ABSENT, ABSENT_REASON, ComparisonView, SeriesView
from .layout import fitted_table
from .styles import (BODY, CELL, CELL_BOLD, CONTENT_WIDTH, HEADING, NOTE, SMALL, TITLE, ReportDocument,
                     markup, table_style, text)

TRAINING_FILE = "training-report.pdf"
# The report names every rater with their own changes, as the chair's summary does.
PRIVACY_NOTE = ("For the training coordinator: it names every rater with their own changes, so please keep it "
                "within those responsible for the training (each rater sees only their own change, in their "
                "private report). Decisions about people follow the institution's own policies and the "
                "applicable law, not these figures alone.")
MEANINGS = {"r": "consistency", "retest_r": "test-retest agreement", "misallocation": "distance from the rubric",
            "g_rubric": "match with the rubric", "severity": "offset from the panel", "r_a": "accuracy against the outcome",
            "g": "match with the outcome's model"}
# The report's own cautions, printed after the comparison's: always true of a before/after study.
STANDING_CAUTIONS = (
    "Practice: raters get used to the task and the scale between rounds, trained or not; only the "
    "difference from a control group separates that from the training.",
    "Regression to the mean: a rater with unusually low figures in one round tends to score closer to "
    "the average in the next by chance alone, so a gain among those who started worst is partly expected.",
    "Different cases in different rounds change R_s, weights and misallocation by themselves (fewer "
    "cases give a higher R_s); figures marked as not comparable are shown with that reason.",
    "These are statistical descriptions of judgment patterns on a sample of cases, not a verdict on any "
    "person; small samples give unstable weights. Decisions about careers or admissions follow the "
    "institution's policies and applicable law.",
)
# Charts laid out side by side: no rules, no row bands.
_TIGHT = ParagraphStyle("tight_cell", parent=CELL, fontSize=7.5, leading=9)
_CHART_GRID = TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("LEFTPADDING", (0, 0), (-1, -1), 0),
                          ("RIGHTPADDING", (0, 0), (-1, -1), 6), ("BOTTOMPADDING", (0, 0), (-1, -1), 6)])


def _absent(section: str) -> list:
    return [text(f"{section}: left out; {ABSENT_REASON}.", SMALL)]


# ----------------------------------------------------------------------------- words


def _interval(lo, hi) -> str:
    if lo is None and hi is None:
        return "(no interval)"
    return f"[{signed(lo, end=True)}, {signed(hi, end=True)}]"


def _word(verdict: str | None) -> str:
    """The verdict compare wrote beside a change; nothing when comparison.json has none."""
    return "" if verdict is None else f" {verdict}"


def _answer(sentence: str) -> object:
    question, _, rest = sentence.partition("? ")
    if not rest:
        return text(sentence, BODY)
    return markup(f"<b>{escape(question)}?</b> {escape(rest)}", BODY)


# ----------------------------------------------------------------------------- sections


def first_page(view: ComparisonView) -> list:
    n_t, n_c = len(view.arm(True)), len(view.arm(False))
    who = (f"{n_t} trained raters and {n_c} controls" if view.has_control else
           f"{n_t} raters, all counted as trained (no control group)")
    story = [text("Did the training work?", TITLE),
             text(PRIVACY_NOTE, NOTE),
             text(f"Phases {', '.join(view.phases)}; {who}. Each answer below reads the 95% intervals: "
                  "a change is claimed only where its interval excludes zero.", SMALL), Spacer(1, 4)]
    if view.answers is not None:
        story += [_answer(view.answers[k]) for k in ("worked", "for_whom", "lasts") if view.answers.get(k)]
        if view.answers.get("regression_to_mean"):
            story.append(text(view.answers["regression_to_mean"], NOTE))
    else:
        story += [text(line, BODY) for line in view.summary]
        story.append(text(f"The answers for whom and whether it lasts: left out; {ABSENT_REASON}.", SMALL))
    story += effect_table(view)
    if view.cautions:
        story.append(text("Read these first", HEADING))
        story += [text(f"- {c}", BODY) for c in view.cautions]
    if view.unmatched:
        story.append(text("Not in every phase (left out of every figure): " + ", ".join(view.unmatched), SMALL))
    return story


def effect_table(view: ComparisonView) -> list:
    """The headline numbers: each arm's mean change and the difference in differences."""
    first, last = view.phases[0], view.phases[-1]
    panel = view.panel
    detect = panel.detectable or {}
    head = ["measure", "trained change"] + (
        ["control change", "trained minus controls", "same, allowing for the start"]
        if view.has_control else ["95% interval"]) + ["could detect"]
    rows = [[text(h, CELL_BOLD) for h in head]]
    for m in view.metrics:
        arms = panel.metrics.get(m, {})
        t = arms.get("trained").change(first, last) if "trained" in arms else None
        row = [text(LABELS.get(m, m), CELL), text("n/a" if t is None else signed(t.delta), CELL)]
        if view.has_control:
            c = arms.get("control").change(first, last) if "control" in arms else None
            e = (panel.training_effect or {}).get(m)
            row.append(text("n/a" if c is None else signed(c.delta), CELL))
            if e is None:
                row += [text("n/a", CELL), text("n/a", CELL)]
            else:
                row.append(text(f"{signed(e.change.delta)} {_interval(e.change.ci_low, e.change.ci_high)}"
                                f"{_word(e.change.verdict)}", CELL))
                row.append(text("n/a" if e.ancova is None else
                                f"{signed(e.ancova.delta)} {_interval(e.ancova.ci_low, e.ancova.ci_high)}",
                                CELL))
        else:
            row.append(text("n/a" if t is None else
                            f"{_interval(t.ci_low, t.ci_high)}{_word(t.verdict)}", CELL))
        panel_detect = detect.get(m, (None, None))[1]
        row.append(text("n/a" if panel_detect is None else f"{wording.fmt(panel_detect)} or larger", CELL))
        rows.append(row)
    widths = ([0.14, 0.13, 0.13, 0.26, 0.2, 0.14] if view.has_control else [0.2, 0.2, 0.4, 0.2])
    story = [text(f"From {first} to {last}", HEADING),
             fitted_table(rows, [w * CONTENT_WIDTH for w in widths], style=table_style(), repeatRows=1)]
    method = ("Trained minus controls: the trained raters' mean change minus the controls' (difference in "
              "differences, Welch's t on the per-rater changes). 'Same, allowing for the start' compares "
              "the arms as if every rater had started at the same value (an analysis of covariance, ANCOVA). " if view.has_control else
              "Mean change across raters, paired t interval. ")
    method += ("'Could detect': the smallest effect this design would see 80% of the time (5% two-sided); "
               "a 'no clear change' is no evidence of no effect when the figure there is large."
               if panel.detectable is not None else
               f"'Could detect' is left out: {ABSENT_REASON}.")
    story.append(text(method, SMALL))
    return story


def _rater_lines(view: ComparisonView, metric: str) -> list:
    return [([r.metrics[metric].values.get(ph) for ph in view.phases], r.trained)
            for r in view.raters if metric in r.metrics]


def _arm_means(view: ComparisonView, metric: str) -> list:
    arms = view.panel.metrics.get(metric, {})
    return [([s.values.get(ph) for ph in view.phases], arm == "trained") for arm, s in arms.items()]


def slope_charts(view: ComparisonView) -> list:
    story = [PageBreak(), text("Each rater across the phases", HEADING),
             text("One small chart per measure: each thin line is one rater, the thick lines the arm means. "
                  "Where the lines run in the 'better' direction the figure improved.", SMALL),
             training_charts.arm_legend(CONTENT_WIDTH, has_control=view.has_control)]
    cols = 3
    w = CONTENT_WIDTH / cols
    cells = []
    for m in view.metrics:
        direction = (view.better or {}).get(m)
        meaning = MEANINGS.get(m, m)
        cells.append(training_charts.slope_panel(
            LABELS.get(m, m), view.phases, _rater_lines(view, m), means=_arm_means(view, m), width=w - 8,
            subtitle=(f"{meaning}; {direction} is better" if direction else
                      f"{meaning}; no better direction" if view.better is not None else meaning)))
    grid = [cells[i:i + cols] + [""] * (cols - len(cells[i:i + cols])) for i in range(0, len(cells), cols)]
    if grid:
        story.append(Table(grid, colWidths=[w] * cols, style=_CHART_GRID))
    story += rater_table(view)
    return story


def rater_table(view: ComparisonView) -> list:
    first, last = view.phases[0], view.phases[-1]
    story = [Spacer(1, 6), text(f"Each rater, {first} to {last}", HEADING),
             text("Each cell: the change and its 95% interval, with 'better', 'worse' (or 'higher', 'lower' for "
                  "severity) only where the interval excludes zero. A cell without a word is no clear change: "
                  "the interval holds zero, which is not proof that nothing changed.", SMALL)]
    metrics = view.metrics
    rows = [[text("rater", CELL_BOLD), text("arm", CELL_BOLD)] + [text(LABELS.get(m, m), CELL_BOLD) for m in metrics]]
    notes: list[str] = []
    ordered = sorted(view.raters, key=lambda r: not r.trained)
    for r in ordered:
        cells = [text(r.rater, CELL), text("trained" if r.trained else "control", CELL)]
        for m in metrics:
            ch = r.metrics[m].change(first, last)
            if ch is None:
                cells.append(text("n/a", CELL))
                continue
            mark = ""
            if ch.comparable is False:
                note = ch.note or "the phases are not comparable for this figure"
                if note not in notes:
                    notes.append(note)
                mark = "*" * (notes.index(note) + 1)
            word = ch.verdict
            # a space before each break: the words stay words for the width check and for copy-paste
            shown = f"<b>{escape(word)}</b> <br/>" if word and word != "no clear change" else ""
            cells.append(markup(f"{shown}{signed(ch.delta)}{mark} <br/>{_interval(ch.ci_low, ch.ci_high)}",
                                _TIGHT))
        rows.append(cells)
    first_w, arm_w = 0.12 * CONTENT_WIDTH, 0.08 * CONTENT_WIDTH
    rest = (CONTENT_WIDTH - first_w - arm_w) / max(len(metrics), 1)
    story.append(fitted_table(rows, [first_w, arm_w] + [rest] * len(metrics), style=table_style(),
                       repeatRows=1))
    for k, note in enumerate(notes):
        story.append(text(f"{'*' * (k + 1)} Not comparable as it stands: {note}.", SMALL))
    return story


def _series_rows(name: str, arms: dict[str, SeriesView], phases) -> list:
    """Table rows: one per arm, its value per phase and each change with its interval."""
    rows = []
    for arm, s in arms.items():
        changes = "; ".join(f"{ch.from_phase} to {ch.to_phase}: {signed(ch.delta)} "
                            f"{_interval(ch.ci_low, ch.ci_high)}{_word(ch.verdict)}"
                            + (f" ({ch.note})" if ch.note else "") for ch in s.changes) or "not computed"
        label = {"all": "all raters", "control": "controls"}.get(arm, arm)
        rows.append([text(name, CELL), text(label, CELL)]
                    + [text(wording.fmt(s.values.get(ph)), CELL) for ph in phases] + [text(changes, CELL)])
    return rows


def convergence(view: ComparisonView) -> list:
    story = [CondPageBreak(260), text("Is the panel converging?", HEADING)]
    conv = view.panel.convergence
    if conv is None:
        return story + _absent("The spread of the raters' weight profiles")
    story.append(text("Lower is closer: the spread is a typical distance between two raters' profiles of "
                      "cue shares; the distance to the rubric is a typical distance of the raters' profiles "
                      "from the rubric's shares; both with the part that each rater's own noise adds taken "
                      "off. Lines: the arm's figure in each phase.", SMALL))
    has_control = any("control" in (arms or {}) for arms in conv.values())
    story.append(training_charts.arm_legend(CONTENT_WIDTH, has_control=has_control, with_means=False))
    titles = {"pairwise_distance": "spread between raters", "distance_to_rubric": "distance to the rubric"}
    cells, lines = [], []
    rows = [[text(h, CELL_BOLD) for h in ("figure", "arm", *view.phases, "change [95% interval]")]]
    for name, arms in conv.items():
        title = titles.get(name, name.replace("_", " "))
        if arms is None:
            lines.append(f"{title}: left out (no rubric was given).")
            continue
        series = [([s.values.get(ph) for ph in view.phases], arm != "control") for arm, s in arms.items()]
        cells.append(training_charts.slope_panel(title, view.phases, [], means=series,
                                                 width=CONTENT_WIDTH / 2 - 10, subtitle="lower is closer"))
        rows += _series_rows(title, arms, view.phases)
    if cells:
        story.append(Table([cells + [""] * (2 - len(cells))], colWidths=[CONTENT_WIDTH / 2] * 2,
                           style=_CHART_GRID))
    if len(rows) > 1:
        n = len(view.phases)
        story.append(fitted_table(rows, [w * CONTENT_WIDTH for w in (0.18, 0.1)] + [0.08 * CONTENT_WIDTH] * n
                           + [(0.72 - 0.08 * n) * CONTENT_WIDTH], style=table_style(), repeatRows=1))
    story += [text(line, SMALL) for line in lines]
    return story


def agreement_and_groups(view: ComparisonView) -> list:
    story = [text("Agreement across the panel", HEADING)]
    ag = view.panel.agreement
    if ag is None:
        story += _absent("The change in ICC and Krippendorff's alpha")
    else:
        rows = [[text(h, CELL_BOLD) for h in ["measure", *view.phases, "change [95% interval]"]]]
        for key, label in (("icc", "ICC"), ("alpha", "Krippendorff's alpha")):
            s = ag.get(key)
            if s is None:
                continue
            changes = "; ".join(f"{c.from_phase} to {c.to_phase}: {signed(c.delta)} "
                                f"{_interval(c.ci_low, c.ci_high)}{_word(c.verdict)}" for c in s.changes) or "n/a"
            rows.append([text(label, CELL)] + [text(wording.fmt(s.values.get(ph)), CELL) for ph in view.phases]
                        + [text(changes, CELL)])
        n = len(view.phases)
        story.append(fitted_table(rows, [0.2 * CONTENT_WIDTH] + [0.09 * CONTENT_WIDTH] * n
                           + [(0.8 - 0.09 * n) * CONTENT_WIDTH], style=table_style(), repeatRows=1))
        if view.panel.same_cases is False:
            story.append(text("Different cases in each phase: these panel figures compare different case sets, "
                              "so they are context only; the verdicts above rest on each rater's own figures.",
                              SMALL))
    groups = view.panel.groups
    if groups is None:
        story += _absent("Groups of raters who weigh the cues alike")
    else:
        counts, steps = groups
        line = "Groups of raters who weigh the cues alike: " + ", ".join(
            f"{ph} {'n/a' if counts.get(ph) is None else counts[ph]}" for ph in view.phases) + "."
        for s in steps:
            rand = ("" if s.adjusted_rand is None else
                    f" (overlap of the two groupings {wording.fmt(s.adjusted_rand)}, where 1 means the same "
                    "groups and 0 what chance gives: the adjusted Rand index)")
            line += (f" From {s.from_phase} to {s.to_phase} groups {'merged' if s.merged else 'did not merge'}"
                     f"{rand}.")
        story.append(text(line, BODY))
    return story


def cue_shift(view: ComparisonView) -> list:
    story = [CondPageBreak(200), text("Cue by cue: toward the rubric or away from it", HEADING)]
    shift = view.panel.cue_shift
    if shift is None:
        return story + _absent("The shift of each cue's share")
    first, last = view.phases[0], view.phases[-1]
    cues = list(shift)
    has_control = any(s.control is not None for s in shift.values())
    story.append(text(f"Each cue's share of the weight (shares sum to 1): the arrow runs from the mean share in "
                      f"{first} to the mean share in {last}; the diamond marks the rubric's share. On the right, "
                      "whether each trained rater's own share came closer to the rubric's or went further "
                      "from it (a paired 95% interval of the change in distance that excludes zero); the "
                      "mean arrow can move little while the raters close in from both sides.", SMALL))
    story.append(training_charts.cue_shift_chart(
        cues, rubric={c: shift[c].rubric_share for c in cues},
        trained={c: (shift[c].trained.get(first), shift[c].trained.get(last)) for c in cues},
        control=({c: ((shift[c].control or {}).get(first), (shift[c].control or {}).get(last)) for c in cues}
                 if has_control else None),
        toward={c: shift[c].toward_rubric if shift[c].toward_tested else "untested" for c in cues},
        first=first, last=last, width=CONTENT_WIDTH))
    if all(s.rubric_share is None for s in shift.values()):
        story.append(text("No rubric was given, so no direction toward it is shown.", SMALL))
    return story


def detectable_table(view: ComparisonView) -> list:
    story = [CondPageBreak(160), text("What this design could have seen", HEADING)]
    detect = view.panel.detectable
    if detect is None:
        return story + _absent("The smallest detectable change")
    first, last = view.phases[0], view.phases[-1]
    readings = view.panel.detectable_reading or {}
    rows = [[text(h, CELL_BOLD) for h in ("measure", "estimate [95% interval]", "one rater could detect",
                                           "the panel could detect", "reading")]]
    for m in view.metrics:
        per_rater, panel = detect.get(m, (None, None))
        e = (view.panel.training_effect or {}).get(m) if view.has_control else None
        ch = e.change if e is not None else (view.panel.metrics.get(m, {}).get("trained").change(first, last)
                                             if "trained" in view.panel.metrics.get(m, {}) else None)
        est = "n/a" if ch is None else f"{signed(ch.delta)} {_interval(ch.ci_low, ch.ci_high)}"
        # compare's words (verdicts.detectable_reading); an older comparison.json has none
        reading = readings.get(m, "n/a")
        rows.append([text(LABELS.get(m, m), CELL), text(est, CELL),
                     text("n/a" if per_rater is None else wording.fmt(per_rater), CELL),
                     text("n/a" if panel is None else wording.fmt(panel), CELL), text(reading, CELL)])
    story.append(fitted_table(rows, [w * CONTENT_WIDTH for w in (0.15, 0.23, 0.13, 0.13, 0.36)],
                       style=table_style(), repeatRows=1))
    story.append(text("Smallest change seen 80% of the time at the 5% level (two-sided), given the cases and "
                      "repeats per phase: 'one rater' is the change of a typical rater, 'the panel' the "
                      + ("difference between trained and controls." if view.has_control else
                         "mean change across raters."), SMALL))
    return story


def follow_up(view: ComparisonView) -> list:
    if len(view.phases) < 3:
        return []
    end, later = view.phases[-2], view.phases[-1]
    story = [CondPageBreak(140), text(f"Does it last? {end} to {later}", HEADING)]
    effects = view.panel.follow_up_effect
    # Without a control group the table has no control or difference columns (empty ones
    # had no width to lay out in, and the report could not be built).
    arm_names = ("trained", "control") if view.has_control else ("trained",)
    head = ("measure", "trained change") + (("control change", "trained minus controls")
                                             if view.has_control else ())
    rows = [[text(h, CELL_BOLD) for h in head]]
    for m in view.metrics:
        arms = view.panel.metrics.get(m, {})
        cells = [text(LABELS.get(m, m), CELL)]
        for arm in arm_names:
            ch = arms[arm].change(end, later) if arm in arms else None
            cells.append(text("" if ch is None else f"{signed(ch.delta)} {_interval(ch.ci_low, ch.ci_high)}"
                              f"{_word(ch.verdict)}", CELL))
        if view.has_control:
            e = None if effects in (ABSENT, None) else effects.get(m)
            cells.append(text("" if e is None else f"{signed(e.change.delta)} "
                              f"{_interval(e.change.ci_low, e.change.ci_high)}{_word(e.change.verdict)}", CELL))
        rows.append(cells)
    story.append(fitted_table(rows, style=table_style(), repeatRows=1))
    if view.has_control and effects is ABSENT:
        story += _absent("The difference in differences over the follow-up")
    return story


def cautions(view: ComparisonView) -> list:
    story = [CondPageBreak(120), text("Cautions", HEADING)]
    story += [text(f"- {c}", BODY) for c in STANDING_CAUTIONS]
    return story


def training_flowables(comparison: dict) -> list:
    view = ComparisonView.read(comparison)
    story = first_page(view)
    story += slope_charts(view)
    story += follow_up(view)
    story += convergence(view)
    story += agreement_and_groups(view)
    story += cue_shift(view)
    story += detectable_table(view)
    story += cautions(view)
    return story


def training_pdf(comparison: dict) -> bytes:
    """training-report.pdf as bytes, from the comparison.json dictionary."""
    buf = io.BytesIO()
    doc = ReportDocument(buf, study_name=str(comparison["study"]["name"]), title="Training report",
                         caution=wording.CAUTION_LINE)
    doc.build(training_flowables(comparison))
    return buf.getvalue()
