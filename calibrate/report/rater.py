"""The private feedback report of one rater.

Privacy: the report names this rater only. Colleagues appear as unnamed dots in a
distribution, and only when the phase's panel has at least
``wording.MIN_PANEL_FOR_PEERS`` raters; any free text (warnings, group sentences)
that names another rater is left out.
"""

from __future__ import annotations

import math
import re
import statistics
from collections.abc import Callable
from dataclasses import dataclass
from xml.sax.saxutils import escape

from reportlab.platypus import CondPageBreak, KeepTogether, Spacer, Table

from . import charts, wording
from ._read import ReportInput, id_pattern
from .layout import fitted_table, fresh_page
from .styles import (
    ACCENT,
    ACCENT_LIGHT,
    BODY,
    CELL,
    CELL_BOLD,
    CONTENT_WIDTH,
    HEADING,
    NOTE,
    PANEL,
    RUBRIC,
    SMALL,
    TITLE,
    markup,
    table_style,
    text,
)
from .view import CutoffView, GroupView, LensView, PolicyView, RaterView
from .wording import fmt


@dataclass(frozen=True)
class KeyFigure:
    """One row of the first page: a figure of a rater's entry and its reading."""

    label: str
    value: Callable[[RaterView], float | None]
    reading: Callable[[RaterView], str]
    strip: tuple[float, float, str, str] | None  # axis low, high, words at each end


def _policy_r(e: RaterView) -> float | None:
    return None if e.policy is None else e.policy.r


def _retest_r(e: RaterView) -> float | None:
    return None if e.retest is None else e.retest.r


def _agreement_r(e: RaterView) -> float | None:
    return e.agreement_r


def _offset(e: RaterView) -> float | None:
    return None if e.severity is None else e.severity.offset


def _misallocation(e: RaterView) -> float | None:
    return None if e.alignment is None else e.alignment.misallocation


def _g_rubric(e: RaterView) -> float | None:
    return None if e.alignment is None else e.alignment.g_rubric


def _not_available(e: RaterView, section: str) -> str | None:
    """'Not available: <why>.' when the audit left ``section`` null and said why."""
    reason = e.reason(section)
    return f"Not available: {reason}." if reason else None


def _retest_reading(e: RaterView) -> str:
    if e.retest is None and _not_available(e, "retest"):
        return _not_available(e, "retest")
    return retest_sentence(e)


def _severity_reading(e: RaterView) -> str:
    sev = e.severity
    if sev is None and _not_available(e, "severity"):
        return _not_available(e, "severity")
    return wording.severity_reading(None, None, ()) if sev is None else \
        wording.severity_reading(sev.offset, sev.se, sev.flags)


def _alignment_reading(e: RaterView) -> str:
    al = e.alignment
    if al is None and _not_available(e, "alignment"):
        return _not_available(e, "alignment")
    return wording.alignment_reading(None, None, None) if al is None else \
        wording.alignment_reading(al.misallocation, al.most_over, al.most_under)


KEY_FIGURES = (
    KeyFigure("Consistency (R_s)", _policy_r,
              lambda e: wording.consistency_reading(_policy_r(e)), (0.0, 1.0, "looser", "closer")),
    KeyFigure("Test-retest r", _retest_r, _retest_reading, (0.0, 1.0, "looser", "closer")),
    KeyFigure("Agreement with the panel (r)", _agreement_r,
              lambda e: wording.agreement_reading(_agreement_r(e)), (0.0, 1.0, "lower", "higher")),
    KeyFigure("Severity offset", _offset, _severity_reading, (-1.0, 1.0, "lower", "higher")),
    KeyFigure("Rubric misallocation", _misallocation, _alignment_reading, (0.0, 0.5, "closer", "further")),
    KeyFigure("Match with the rubric (G)", _g_rubric,
              lambda e: ("No rubric was given." if _g_rubric(e) is None else
                         f"Your policy and the rubric {wording.MATCH_BANDS.words(_g_rubric(e))}."),
              (0.0, 1.0, "lower", "higher")),
)


class RaterReport:
    """Builds the flowables of one rater's report from the results dictionary."""

    def __init__(self, data: ReportInput, rater: str, *, include_excluded: bool = False):
        self.data = data
        self.view = data.view
        self.rater = rater
        self.include_excluded = include_excluded
        self.entries = self.view.entries_of(rater)
        if not self.entries:
            raise KeyError(f"rater {rater!r} is not in the results")
        self.entry = self.entries[-1]        # detailed sections: the latest phase
        self.phase = self.entry.phase
        # Every id, compiled once per report input: a sentence in which no id stands cannot
        # name another rater, so the pattern of the other ids (a regex of thousands of
        # alternatives, compiled per rater) is built only for a sentence where one does.
        key = ("id_pattern", "all raters")
        if key not in data.shared_figures:
            data.shared_figures[key] = id_pattern(self.view.rater_ids())
        self._any_id = data.shared_figures[key]
        self._others: re.Pattern | None | bool = False  # False: not built yet

    @property
    def others(self) -> re.Pattern | None:
        """The regex that finds any other rater's id as a whole word (None: there is none)."""
        if self._others is False:
            self._others = id_pattern(r for r in self.view.rater_ids() if r != self.rater)
        return self._others

    # ------------------------------------------------------------ helpers
    def private(self, sentence: str | None) -> str | None:
        """The sentence, or None when it names another rater."""
        if not sentence:
            return None
        if self._any_id is None or not self._any_id.search(str(sentence)):
            return str(sentence)
        if self.others is not None and self.others.search(str(sentence)):
            return None
        return str(sentence)

    def chart_caption(self, sentence: str) -> str:
        """A chart's caption that names the phase the chart shows ("Phase after: each dot ...");
        the sentence as it is in a study with one unnamed phase."""
        if not self.view.named_phases or self.phase is None or not sentence:
            return sentence
        return f"Phase {self.phase}: {sentence[0].lower()}{sentence[1:]}"

    def peers(self, phase) -> list[RaterView]:
        return [e for e in self.view.entries_in(phase) if e.rater != self.rater]

    def shows_peers(self, phase) -> bool:
        return len(self.view.entries_in(phase)) >= wording.MIN_PANEL_FOR_PEERS

    def scale(self) -> tuple[float, float] | None:
        if self.view.scale is None:
            frame = self.data.table("repeat_pairs", "repeats")
            if frame is not None:
                vals = frame[["first", "second"]].to_numpy(dtype=float)
                return float(vals.min()), float(vals.max())
            return None
        return self.view.scale

    # ------------------------------------------------------------ sections
    def flowables(self) -> list:
        story = []
        story += self.first_page()
        story.append(fresh_page())
        story += before_after_section(self)
        story += self.cue_weights()
        story += self.consistency()
        story += self.severity_and_range()
        story += self.cases_to_revisit()
        story += self.lens()
        if self.include_excluded:
            story += self.excluded()
        story += self.context()
        story += self.cautions_and_glossary()
        return story

    def first_page(self) -> list:
        e = self.entry
        story = [text("Feedback on your judgments", TITLE),
                 markup(f"Prepared for <b>{escape(wording.to_text(self.rater))}</b> alone. "
                        + ("It describes how your judgments relate to the information in the cases, "
                           "so you can decide which cues and which cases to look at again."
                           if self.view.cues else wording.NO_CUES_RATER), BODY)]
        phases = [x.phase for x in self.entries]
        story.append(text(counts_sentence(self.entries), BODY))
        for x in self.entries:
            note = wording.repeats_note(x.repeats_mode, x.n_repeats, x.most_presentations,
                                        None if x.retest is None else x.retest.measure)
            if note:
                # the first-two sentence is said once for every phase, so it names none
                where = (f"In phase {x.phase}: " if x.phase and len(self.entries) > 1
                         and x.repeats_mode == "all" else "")
                story.append(text(where + note, SMALL))
                if x.repeats_mode != "all":
                    break  # the first-two sentence is the same for every phase
        story.append(Spacer(1, 4))
        story.append(self.key_figure_table(phases))
        if self.shows_peers(self.phase):
            story.append(text("Dots: your figure (filled) among your colleagues' figures (open, unnamed).",
                              SMALL))
        else:
            story.append(text("The panel has fewer than five raters, so no comparison with colleagues is "
                              "shown: with so few, a summary could reveal a colleague's figures.", SMALL))
        story += self.group_line()
        story.append(text(drift_sentence(e), BODY))
        line = flags_sentence(e, include_excluded=self.include_excluded, named_phases=self.view.named_phases)
        for other in self.entries:  # an earlier phase's flags are said too, never left unsaid
            visible = visible_flags(other, include_excluded=self.include_excluded)
            if other is not e and visible and self.view.named_phases:
                line += (f" In phase {other.phase}: " + "; ".join(wording.flag_words(f) for f in visible) + ".")
        story.append(text(line, NOTE))
        story += self.next_steps()
        return story

    def key_figure_table(self, phases) -> Table:
        multi = len(phases) > 1
        head = ["Figure"] + ([str(p) for p in phases] if multi else ["Value"])
        head += ["Among colleagues" if self.shows_peers(self.phase) else "",
                 f"What it says ({phases[-1]})" if multi else "What it says"]
        rows = [[text(h, CELL_BOLD) for h in head]]
        strip_w = 120.0
        label_w, value_w = 100.0, 42.0
        for fig in KEY_FIGURES:
            values = [fig.value(x) for x in self.entries]
            mine = values[-1]
            row = [text(fig.label, CELL)] + [text(fmt(v), CELL) for v in values]
            strip = ""
            if fig.strip and mine is not None and self.shows_peers(self.phase):
                peer_values = [v for v in (fig.value(p) for p in self.peers(self.phase)) if v is not None]
                if peer_values:
                    lo, hi, lw, hw = fig.strip
                    strip = charts.strip_chart(peer_values, mine, low=lo, high=hi, width=strip_w,
                                               low_words=lw, high_words=hw)
            row += [strip, text(fig.reading(self.entry), CELL)]
            rows.append(row)
        widths = [label_w] + [value_w] * len(self.entries) + [strip_w]
        widths.append(CONTENT_WIDTH - sum(widths))
        table = fitted_table(rows, widths, repeatRows=1)
        table.setStyle(table_style(("VALIGN", (0, 1), (-1, -1), "MIDDLE")))
        return table

    def my_group(self) -> GroupView | None:
        label = self.entry.group
        panel = self.view.panel(self.phase)
        if label is None or panel is None:
            return None
        return next((g for g in panel.groups if g.group == label), None)

    def group_line(self) -> list:
        label = self.entry.group
        if label is None:
            return [text("Groups of raters with similar policies are not available for this study.", BODY)]
        sentence = f"Your policy falls in group {label} of raters who weigh the cues alike."
        group = self.my_group()
        if group and self.shows_peers(self.phase) and len(group.raters) >= wording.MIN_GROUP_FOR_PEERS:
            extra = self.private(group.sets_apart)
            if extra:
                # the figures in brackets mix in other raters' weights; the first page keeps to
                # figures from this rater's own entry
                extra = re.sub(r"\s*\([^()]*\d[^()]*\)", "", extra)
                sentence += f" {extra}"
        return [text(sentence, BODY)]

    def cue_weights(self) -> list:
        story = [text("How you weigh the cues", HEADING)]
        policy = self.entry.policy
        if policy is None:
            reason = self.entry.reason("policy")
            return story + [text(f"Your policy is not available: {reason}." if reason else
                                 "Your policy is not available for this study (too few cases, or the "
                                 "analysis did not run).", BODY)]
        cues = self.view.cues
        on_rubric_basis = bool(self.entry.alignment and self.entry.alignment.shares)
        shares = self.entry.alignment.shares if on_rubric_basis else policy.importance
        series = [("your weight shares", {c: shares.get(c) for c in cues if shares.get(c) is not None},
                   ACCENT)]
        if self.shows_peers(self.phase):
            median = self.panel_median_shares(cues, on_rubric_basis)
            series.append(("panel median", median, PANEL))
        group = self.my_group()
        if (group and self.shows_peers(self.phase)
                and len(group.raters) >= wording.MIN_GROUP_FOR_PEERS and group.importance):
            series.append((f"group {group.group}", dict(group.importance), ACCENT_LIGHT))
        rubric = self.rubric_shares()
        if rubric:
            series.append(("rubric", rubric, RUBRIC))
        story.append(charts.weight_chart(cues, series, width=CONTENT_WIDTH))
        story.append(text(self.chart_caption(wording.shares_caption(shares)), SMALL))
        if policy.importance_interval_note and not on_rubric_basis:
            story.append(text(policy.importance_interval_note, SMALL))
        cutoff = self.entry.cutoff
        if cutoff is not None and cutoff.flagged and cutoff.cue is not None:
            story.append(text(cutoff_sentence(cutoff), NOTE))
        story.append(self.weights_table(policy))
        return story

    def panel_median_shares(self, cues, on_rubric_basis: bool) -> dict:
        """Median share per cue over the phase's raters: rubric-basis shares or R² shares (the
        same for every rater of the phase: computed once per report input)."""
        key = ("panel_median_shares", self.phase, tuple(cues), on_rubric_basis)
        if key not in self.data.shared_figures:
            self.data.shared_figures[key] = self._panel_median_shares(cues, on_rubric_basis)
        return dict(self.data.shared_figures[key])

    def _panel_median_shares(self, cues, on_rubric_basis: bool) -> dict:
        out = {}
        for c in cues:
            vals = []
            for p in self.view.entries_in(self.phase):
                if on_rubric_basis:
                    source = p.alignment.shares if p.alignment is not None else {}
                else:
                    source = p.policy.importance if p.policy is not None else {}
                v = source.get(c)
                if v is not None:
                    vals.append(v)
            if vals:
                out[c] = statistics.median(vals)
        return out

    def rubric_shares(self) -> dict:
        if self.view.rubric_shares:
            return dict(self.view.rubric_shares)
        frame = self.data.table("alignment")
        if frame is not None and {"cue", "rubric_share"} <= set(frame.columns):
            rows = frame.drop_duplicates("cue")
            return {str(c): float(v) for c, v in zip(rows["cue"], rows["rubric_share"]) if math.isfinite(float(v))}
        return {}

    def weights_table(self, policy: PolicyView):
        if not policy.weights:
            return Spacer(1, 1)
        rows = [[text(h, CELL_BOLD) for h in ("Term", "Weight (scale points per unit)", "95% interval",
                                             "Standardized weight")]]
        for term, w in policy.weights.items():
            ci = policy.weight_intervals.get(term)
            ci_text = "n/a" if ci is None else f"{fmt(ci[0])} to {fmt(ci[1])}"
            rows.append([text(wording.term_words(term), CELL), text(fmt(w), CELL), text(ci_text, CELL),
                         text(fmt(policy.std_weights.get(term)), CELL)])
        table = fitted_table(rows, [150, 120, 110, CONTENT_WIDTH - 380], repeatRows=1)
        table.setStyle(table_style())
        notes = []
        if any("=" in t for t in policy.weights):
            notes.append("A category's weight ('cue: category') is measured against the cue's most common "
                         "category.")
        if any(t.endswith(":missing") for t in policy.weights):
            notes.append("'(value missing)': the extra weight of a case whose value was missing (filled "
                         "with the mean of the other cases).")
        return KeepTogether([Spacer(1, 4), table] + ([text(" ".join(notes), SMALL)] if notes else []))

    def consistency(self) -> list:
        story = [CondPageBreak(200), text("How consistently the cues are used", HEADING)]
        r_s = _policy_r(self.entry)
        retest = self.entry.retest
        r_tt = _retest_r(self.entry)
        story.append(text(wording.consistency_reading(r_s), BODY))
        pairs = self.repeat_pairs()
        bounds = self.scale()
        if pairs and bounds:
            story.append(charts.retest_scatter(pairs, low=bounds[0], high=bounds[1]))
            every = retest is not None and retest.measure == "mean_pairwise_r" and retest.presentations > 2
            story.append(text(self.chart_caption("Each dot is a case you judged more than once: your first judgment across, "
                              "your second up" + (" (the first two of its showings; the figures below use "
                                                  "every showing)" if every else "")
                              + "; dots on the dashed line got the same judgment both times, "
                              "and larger dots stand for several cases."), SMALL))
        elif r_tt is None:
            reason = self.entry.reason("retest")
            story.append(text(f"Test-retest is not available: {reason}." if reason else
                              "No case was shown to you more than once, so test-retest is not available.",
                              BODY))
        if r_tt is not None:
            story.append(text(retest_sentence(self.entry), BODY))
            reach = wording.retest_reach_sentence(retest.n_pairs, retest.flag_detectable_below,
                                                  retest.measure, retest.presentations)
            if reach and "low_retest" not in self.entry.flags:
                story.append(text(reach, BODY))
            story.append(text(ceiling_sentence(r_s, r_tt, self.entry.ceiling_verdict,
                                               ceiling=self.entry.ceiling if self.entry.policy_on_means else None),
                              BODY))
        return story

    def my_rows(self, names: tuple[str, ...], x: str, y: str) -> list[tuple[float, float]]:
        """(x, y) pairs of this rater (and phase) from the first table found under ``names``."""
        frame = self.data.table(*names)
        if frame is None or not {"rater", x, y} <= set(frame.columns):
            return []
        # the table's rows grouped by rater once per report input, not scanned whole per rater
        key = ("rows_by_rater", id(frame))
        if key not in self.data.shared_figures:
            groups = frame.groupby(frame["rater"].astype(str), sort=False).indices
            self.data.shared_figures[key] = (frame, groups)
        groups = self.data.shared_figures[key][1]
        mine = frame.iloc[groups.get(self.rater, [])]
        if "phase" in mine.columns and self.phase is not None:
            mine = mine[mine["phase"].astype(str) == str(self.phase)]
        pairs = zip(mine[x].astype(float), mine[y].astype(float))
        return [(a, b) for a, b in pairs if math.isfinite(a) and math.isfinite(b)]

    def repeat_pairs(self) -> list[tuple[float, float]]:
        return self.my_rows(("repeat_pairs", "repeats"), "first", "second")

    def severity_and_range(self) -> list:
        story = [CondPageBreak(150), text("Level, range and reading order", HEADING)]
        sev = self.entry.severity
        offset = _offset(self.entry)
        if offset is None:
            reason = self.entry.reason("severity")
            story.append(text(f"Severity is not available: {reason}." if reason else
                              "Severity is not available for this study.", BODY))
        else:
            se = sev.se
            tail = f" (offset {fmt(offset)}" + (f", standard error {fmt(se)})" if se is not None else ")")
            story.append(text(wording.severity_reading(offset, se, sev.flags) + tail, BODY))
        ratio = None if sev is None else sev.sd_ratio
        if ratio is not None:
            story.append(text(f"You use {wording.RANGE_BANDS.words(ratio)} (spread {fmt(ratio)} times the "
                              "panel's).", BODY))
        middle = None if sev is None else sev.middle_share
        panel_middle = None if sev is None else sev.panel_middle_share
        if middle is not None:
            line = f"{fmt(100 * middle, 0)}% of your judgments sit in the middle of the scale"
            if panel_middle is not None and self.shows_peers(self.phase):
                line += f" (panel: {fmt(100 * panel_middle, 0)}%)"
            story.append(text(line + ".", BODY))
        story.append(text(drift_sentence(self.entry), BODY))
        order = self.reading_order()
        bounds = self.scale()
        if order and bounds:
            story.append(charts.order_chart([p for p, _ in order], [j for _, j in order], low=bounds[0],
                                            high=bounds[1], width=CONTENT_WIDTH * 0.8))
            story.append(text(self.chart_caption("Grey dots: your judgments in reading order; line: their "
                                                 "running average."), SMALL))
        return story

    def reading_order(self) -> list[tuple[float, float]]:
        return self.my_rows(("reading_order", "ordered"), "position", "judgment")

    def cases_to_revisit(self) -> list:
        story = [CondPageBreak(120), text("Cases to look at again", HEADING)]
        cases = cases_to_show(self.entry, self.scale())
        if not cases:
            return story + [text("No case stands out from your own policy, or the policy is not available.",
                                 BODY)]
        story.append(text("These cases received the judgments that stand out most from what your own policy "
                          "predicts for them, most unusual first: each difference is weighed by how surely "
                          "the policy predicts that case, so a case with unusual cues can come before a "
                          "larger plain difference. Re-reading them may show a cue that was missed or an "
                          "exception that deserves a rule.", BODY))
        judged = "Your mean judgment" if self.entry.policy_on_means else "Your judgment"
        rows = [[text(h, CELL_BOLD) for h in ("Case", judged, "Your policy predicts", "Difference")]]
        for c in cases[:12]:
            rows.append([text(c.case, CELL), text(fmt(c.judgment, 1), CELL),
                         text(fmt(c.predicted, 1) + ("*" if c.clipped else ""), CELL),
                         text(fmt(c.difference, 1), CELL)])
        table = fitted_table(rows, [140, 100, 120, 100], hAlign="LEFT", repeatRows=1)
        table.setStyle(table_style())
        story.append(table)
        if any(c.clipped for c in cases[:12]):
            story.append(text(wording.PREDICTION_CLIPPED_NOTE, SMALL))
        listed = len(self.entry.policy.look_again) if self.entry.policy is not None else 0
        if listed > len(cases):
            n = listed - len(cases)
            story.append(text(f"{n} more case{'s' if n > 1 else ''} stood out but {'are' if n > 1 else 'is'} "
                              "not shown: your judgment sat at the end of the scale and your policy's "
                              "prediction lay beyond it, so on the scale the two agree.", SMALL))
        return story

    def lens(self) -> list:
        lens = self.entry.lens
        story = [CondPageBreak(150), text("Judgments and the later outcome (lens model)", HEADING)]
        if lens is None:
            reason = self.entry.reason("lens")
            return story + [text(f"The lens model is not available: {reason}." if reason else
                                 "No outcome (criterion) is recorded for this study, so this section is not "
                                 "available.", BODY)]
        r_a, g, c, r_e, r_s = lens.r_a, lens.g, lens.c, lens.r_e, lens.r_s

        def value(key, figure):
            low, high = lens.intervals.get(key, (None, None))
            return fmt(figure) if low is None or high is None else f"{fmt(figure)} ({fmt(low)} to {fmt(high)})"

        rows = [[text(h, CELL_BOLD) for h in ("Figure", "Value (95% interval)", "Meaning")],
                [text("r_a", CELL), text(value("r_a", r_a), CELL), text("how well your judgments tracked the outcome", CELL)],
                [text("G", CELL), text(value("g", g), CELL), text("how far your policy matches the cues' best rule", CELL)],
                [text("C", CELL), text(value("c", c), CELL), text("what your judgments caught beyond the cues", CELL)],
                [text("R_e", CELL), text(value("r_e", r_e), CELL), text("how predictable the outcome is from the cues", CELL)],
                [text("R_s", CELL), text(fmt(r_s), CELL), text("your consistency on these cases", CELL)]]
        table = fitted_table(rows, [40, 130, CONTENT_WIDTH - 170], hAlign="LEFT")
        table.setStyle(table_style())
        story.append(table)
        # The small-sample caution rides in the same paragraph to keep the report's length.
        story.append(text(" ".join(filter(None, (bootstrap_sentence(lens), lens.small_sample_note))), BODY))
        if self.view.criterion_only_for_selected or any(
                "criterion" in w.message and "missing" in w.message for w in self.view.warnings):
            story.append(text(wording.LENS_SELECTED_CAUTION, NOTE))
        return story

    def excluded(self) -> list:
        story = [CondPageBreak(100), text("Attributes that must not count", HEADING)]
        block = self.entry.excluded
        if not block:
            return story + [text("No excluded attribute was checked for this study.", BODY)]
        rows = [[text(h, CELL_BOLD) for h in ("Attribute", "Added R²", "p (adjusted)", "Reading")]]
        for attr, res in block.items():
            rows.append([text(attr, CELL), text(fmt(res.delta_r2, 3), CELL),
                         text(wording.fmt_p(res.p_adjusted), CELL),
                         text("associated with your judgments beyond the cues" if res.flagged
                              else "no clear association beyond the cues", CELL)])
        table = fitted_table(rows, [120, 70, 80, CONTENT_WIDTH - 270], hAlign="LEFT")
        table.setStyle(table_style())
        return story + [table, text("An association is not proof that the attribute was used: a cue related "
                                    "to it can carry it.", SMALL)]

    def context(self) -> list:
        rows = [[text(h, CELL_BOLD) for h in ("Figure", "Yardstick", "Source")]]
        for item in wording.PUBLISHED_CONTEXT:
            rows.append([text(item.figure, CELL), text(item.value, CELL), text(item.source, CELL)])
        table = fitted_table(rows, [140, 110, CONTENT_WIDTH - 250], hAlign="LEFT")
        table.setStyle(table_style())
        return [CondPageBreak(120), text("Context for your figures", HEADING),
                text(wording.CONTEXT_INTRO, BODY), table]

    def next_steps(self) -> list:
        steps = suggestions(self.entry, include_excluded=self.include_excluded, scale=self.scale())
        story = [text("What to try next", HEADING)]
        for s in steps:
            story.append(text(f"- {s}", BODY))
        return story

    def cautions_and_glossary(self) -> list:
        story = [CondPageBreak(150), text("Cautions", HEADING)]
        story += [text(f"- {c}", BODY) for c in wording.CAUTIONS]
        notes = [self.private(w) for w in self.entry.warnings]
        notes = [n for n in notes if n]
        if notes:
            story.append(text("Notes on your data", HEADING))
            story += [text(f"- {n}", SMALL) for n in notes]
        story.append(text("Terms used", HEADING))
        rows = [[text(term, CELL_BOLD), text(meaning, CELL)] for term, meaning in wording.GLOSSARY.items()]
        table = fitted_table(rows, [120, CONTENT_WIDTH - 120], hAlign="LEFT")
        table.setStyle(table_style(("LINEBELOW", (0, 0), (-1, 0), 0.3, ACCENT_LIGHT)))
        story.append(table)
        return story


BEFORE_AFTER_INTRO = ("Each line compares your own figures in two phases, with the 95% interval of the change; "
                      "a change is named only where its interval excludes zero. The cases and your practice "
                      "with the task changed between phases too, so a change is not by itself the effect of "
                      "a training.")


def before_after_section(report: RaterReport) -> list:
    """With two phases or more: this rater's change in each figure, in the words results.json
    carries (nothing in a study without phases)."""
    if len(report.view.phase_order) < 2 or not report.view.named_phases:
        return []
    story = [text("Your change between phases", HEADING)]
    lines = [report.private(ch.sentence) for e in report.entries for items in (e.changes or {}).values()
             for ch in items]
    lines = [line for line in lines if line]
    if not lines:
        reasons = [e.reason("changes") for e in report.entries if e.changes is None]
        why = next((r for r in reversed(reasons) if r), "results.json holds no change figures")
        return story + [text(f"Not available: {why}.", BODY)]
    story.append(text(BEFORE_AFTER_INTRO, SMALL))
    story += [text(f"- {line}", BODY) for line in lines]
    if report.view.criterion_only_for_selected and any(e.changes and e.changes.get("r_a") for e in report.entries):
        story.append(text(f"r_a: {wording.LENS_SELECTED_CAUTION}", SMALL))
    return story


def retest_sentence(e: RaterView) -> str:
    """The test-retest sentence for this entry, naming the figure shown (``retest.measure``)."""
    rt = e.retest
    if rt is None:
        return wording.retest_reading(None, None)
    return wording.retest_reading(rt.r, rt.n_pairs, rt.measure, rt.presentations, rt.presentation_pairs)


def ceiling_sentence(r_s: float | None, r_tt: float, verdict: str | None = None, *,
                     ceiling: float | None = None) -> str:
    """R_s set against sqrt(r_tt): in the population R_s <= sqrt(r_tt) when the cues
    stay fixed and only the unreliable part of the judgment differs between readings
    (a standard reliability bound: a correlation cannot exceed the square root of the
    reliability; common practice, no single source). ``ceiling`` given: R_s was fitted
    to case means ([judgment] repeats = "all") and the bound is the square root of the
    reliability of those means, as the audit computed it (results.json ``consistency.ceiling``)."""
    if r_s is None:
        return "Without a fitted policy, consistency cannot be set against test-retest."
    if r_tt <= 0 or (ceiling is not None and not ceiling > 0):
        return ("Repeated cases were judged so differently that the test-retest bound says nothing about "
                "the policy.")
    if ceiling is None:
        ceiling = math.sqrt(r_tt)
        head = f"Consistency R_s = {fmt(r_s)} against the square root of test-retest, {fmt(ceiling)}. "
    else:
        head = (f"Consistency R_s = {fmt(r_s)}, on your mean judgment of each case, against the square root "
                f"of how reliable those means are, {fmt(ceiling)}. ")
    if isinstance(verdict, str) and verdict:
        return head + wording.CEILING_VERDICTS.get(verdict, verdict.replace("_", " ") + ".")
    if r_s > ceiling + 0.05:
        return head + ("The policy fits better than the repeats alone would suggest; with few repeated "
                       "cases this happens by chance.")
    if r_s < ceiling - 0.10:
        return head + wording.CEILING_VERDICTS["model_misses_rule"]
    return head + "The two agree: what a linear rule leaves out is mostly the ordinary noise of repeating."


def cutoff_sentence(cutoff: CutoffView) -> str:
    threshold = cutoff.threshold
    at = f" near {fmt(threshold)}" if threshold is not None else ""
    return (f"Your judgments jump when {cutoff.cue} passes a point{at}, more than a steady weight "
            "would: a cut-off may be at work. Check whether the rubric intends one.")


def bootstrap_sentence(lens: LensView) -> str:
    # The verdict and its sentence are decided once, in the lens model, and stored in
    # results.json; the report prints them so the two can never disagree.
    return lens.summary if lens.summary else "The outcome comparison is not available."


def suggestions(entry: RaterView, *, include_excluded: bool,
                scale: tuple[float, float] | None = None) -> list[str]:
    """Concrete next steps from this rater's own figures (about cues and cases)."""
    out = []
    over, under = (None, None) if entry.alignment is None else (entry.alignment.most_over,
                                                                  entry.alignment.most_under)
    mis = _misallocation(entry)
    if mis is not None and mis >= wording.MISALLOCATION_BANDS.bands[1].low:
        if over:
            out.append(f"Read the rubric's guidance on {over}: your judgments lean on it more than intended.")
        if under:
            out.append(f"Check how you use the cue {under}: it carries less weight in your judgments than the rubric asks.")
    cutoff = entry.cutoff
    if cutoff is not None and cutoff.flagged and cutoff.cue is not None:
        out.append(f"Look at files just either side of your step on {cutoff.cue}: would the rubric "
                   "separate them as sharply?")
    cases = cases_to_show(entry, scale)
    if cases:
        ids = ", ".join(c.case for c in cases[:3])
        out.append(f"Re-read cases {ids} and note what set them apart from your usual rule.")
    r_tt = _retest_r(entry)
    if r_tt is not None and r_tt < wording.RETEST_BANDS.bands[1].low:
        out.append("Before scoring, write down the two or three cues that decide most cases, and check each "
                   "case against them.")
    r_s = _policy_r(entry)
    if r_s is not None and r_s < wording.CONSISTENCY_BANDS.bands[1].low:
        out.append("Use the same order of reading the cues for every case; it steadies how they are combined.")
    if entry.drift is not None and entry.drift.flagged:
        out.append("Re-read a few early cases at the end of a session to check that the standard has not moved.")
    flags = set(entry.flags) | set(entry.severity.flags if entry.severity is not None else ())
    if "narrow_range" in flags or "central_tendency" in flags:
        out.append("Use the ends of the scale where a case deserves it; the anchors describe what they mean.")
    if include_excluded and "excluded_attribute" in flags:
        out.append("Cover the attribute that must not count while reading, and check which cues relate to it.")
    if not out:
        out.append("Keep your current approach and compare with the next audit; nothing here calls for a change.")
    return out


def counts_sentence(entries) -> str:
    """'You judged 100 cases (15 of them shown twice).' with each phase named when the study
    has phases, and the true number of presentations of the repeated cases."""
    parts = [wording.presentations_text(x.n_cases, x.n_repeats, x.n_presentations, x.most_presentations)
             + (f" in phase {x.phase}" if x.phase else "") for x in entries]
    return f"You judged {', '.join(parts)}."


def hidden_checks(entry: RaterView, *, include_excluded: bool) -> int:
    """How many of this entry's checks the rater's report leaves to the chair: the
    excluded-attribute check, when it ran and the chair has not chosen to show it."""
    return 0 if include_excluded or not entry.excluded else 1


def visible_flags(entry: RaterView, *, include_excluded: bool) -> tuple[str, ...]:
    return tuple(f for f in entry.flags if f != "excluded_attribute" or include_excluded)


def drift_sentence(entry: RaterView) -> str:
    """The drift sentence, with the size and interval of a flagged drift (as the chair sees it)."""
    line = wording.drift_reading(entry.drift, entry.reason("drift"))
    flagged = entry.drift is not None and entry.drift.flagged
    figure = wording.flag_figure_text(entry.evidence.get("drift")) if flagged else ""
    return line[:-1] + f" ({figure})." if figure else line


def flags_sentence(entry: RaterView, *, include_excluded: bool, named_phases: bool = True) -> str:
    return wording.flags_reading(visible_flags(entry, include_excluded=include_excluded),
                                 hidden_checks(entry, include_excluded=include_excluded),
                                 entry.phase if named_phases else None)


@dataclass(frozen=True)
class ShownCase:
    """A case to look at again as the report shows it (prediction kept on the scale)."""

    case: str
    judgment: float | None
    predicted: float | None
    clipped: bool
    difference: float | None


def cases_to_show(entry: RaterView, scale: tuple[float, float] | None) -> list[ShownCase]:
    """The policy's cases to look at again, predictions kept on the scale. A case whose
    judgment sits at the very end its prediction passed is left out: on the scale, the
    judgment and the prediction then agree."""
    cases = entry.policy.look_again if entry.policy is not None else ()
    out = []
    for c in cases:
        shown, clipped = wording.predicted_on_scale(c.predicted, scale)
        diff = None if c.judgment is None or shown is None else c.judgment - shown
        if clipped and diff is not None and abs(diff) < 0.05:
            continue
        out.append(ShownCase(c.case, c.judgment, shown, clipped, diff))
    return out
