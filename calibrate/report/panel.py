"""The chair's panel summary: page 1 (flags first, how far the decisions can be trusted,
next steps), the lens model, every rater, weights, groups, agreement, where two readers
part ways, files to read again, excluded attributes, data quality, methods, cautions."""

from __future__ import annotations

import io
import math

from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, KeepTogether, PageBreak, Spacer, Table

from ..notes import group_notes
from . import charts, wording
from ._read import ReportInput
from .layout import fitted_table, fresh_page
from .rater import _g_rubric, _misallocation, _offset, _policy_r, _retest_r
from .styles import (
    BASE_FONT,
    BODY,
    CELL,
    CELL_BOLD,
    CONTENT_WIDTH,
    HEADING,
    MARGIN,
    NOTE,
    PAGE_SIZE,
    ReportDocument,
    SMALL,
    TITLE,
    markup,
    table_style,
    text,
)
from .view import PanelView
from .wording import fmt


#: How many files the summary shows (split over the phases); the files table holds all.
TOP_FILES = 25
REASON_WORDS = {"may_change": "may change side", "high_disagreement": "readers disagree",
                "near_cut_off": "near the cut-off"}


def _percent(value) -> str:
    """A chance as a whole percentage ("<1%" below one half of a percent)."""
    try:
        value = float(value)
    except (TypeError, ValueError):
        return "n/a"
    if not math.isfinite(value):
        return "n/a"
    return "<1%" if value < 0.005 else f"{100 * value:.0f}%"


def _finite(value: float) -> float | None:
    """A table cell as a figure: NaN (an empty cell) prints as n/a."""
    return value if math.isfinite(value) else None


ICC_FORMS = (("i1", "ICC(1,1)", "one rater, raters random, absolute"),
             ("a1", "ICC(A,1)", "one rater, absolute agreement"),
             ("c1", "ICC(C,1)", "one rater, consistency"),
             ("ik", "ICC(1,k)", "mean of the raters, raters random"),
             ("ak", "ICC(A,k)", "mean of the raters, absolute agreement"),
             ("ck", "ICC(C,k)", "mean of the raters, consistency"))

METHODS = (
    ("Rater policy", "ordinary least squares of judgments on cues; R_s = multiple R",
     "Hammond, Hursch & Todd (1964); Cooksey (1996)"),
    ("Relative importance", "general dominance weights (sum to R²); relative weights beyond about 12 cues",
     "Budescu (1993); Azen & Budescu (2003); Johnson (2000)"),
    ("Interval for R_s", "bias-corrected and accelerated bootstrap", "Efron (1987)"),
    ("Lens model", "Lens Model Equation r_a = G R_e R_s + C sqrt(1-R_e²) sqrt(1-R_s²)", "Tucker (1964)"),
    ("Intervals for r_a, G, C, R_e", "case bootstrap, bias-corrected and accelerated", "Efron (1987)"),
    ("Judgment bootstrapping", "model of the judge against the judge; unit weights",
     "Goldberg (1970); Dawes (1979)"),
    ("Agreement", "the six ICC forms; incomplete designs from variance components",
     "Shrout & Fleiss (1979); McGraw & Wong (1996)"),
    ("Krippendorff's alpha", "agreement beyond chance at the scale's level", "Krippendorff (2011)"),
    ("Fleiss' kappa, Gwet's AC1", "agreement on the exact category beyond chance (ordinal and binary "
     "scales); interval by case bootstrap; with a varying number of readers per file, every file "
     "weighs the same (our own rule)", "Fleiss (1971); Gwet (2008)"),
    ("Readers per file", "generalizability variance components and a D-study",
     "Cronbach et al. (1972); Brennan (2001)"),
    ("Where two readers part ways", "interpersonal lens: agreement split into matching G and consistency",
     "Hammond (1965)"),
    ("Groups of raters", "hierarchical grouping losing the least overall R² at each merge",
     "Ward (1963); Christal (1968)"),
    ("Excluded attributes", "incremental R² with a nested F test; Holm adjustment", "Holm (1979)"),
    ("Test-retest", "correlation, ICC(A,1), weighted kappa, Bland-Altman limits",
     "Cohen (1968); Bland & Altman (1986)"),
    ("Every showing used", "([judgment] repeats = \"all\") policies on case means; test-retest as the "
     "mean r over pairs of showings and ICC(A,1), ICC(C,1) over showings (F intervals; r takes that of "
     "ICC(C,1)); Spearman-Brown for the R_s ceiling", "McGraw & Wong (1996); Spearman (1910); Brown (1910)"),
    ("Wording bands", "every band that turns a figure into words is this tool's own rule of thumb (see each)",
     "our own"),
)


# Tallest image a page's frame holds, with room for a heading above it (points).
MAX_IMAGE_HEIGHT = 640.0


def _fit_on_page(image):
    """Shrink a chart that is taller than a page, keeping its proportions: a big panel's
    grouping tree would otherwise stop the whole report."""
    if image.drawHeight > MAX_IMAGE_HEIGHT:
        factor = MAX_IMAGE_HEIGHT / image.drawHeight
        image.drawHeight *= factor
        image.drawWidth *= factor
    return image


# The height of a page's frame (points): the page less its margins (styles.ReportDocument).
FIRST_PAGE_HEIGHT = PAGE_SIZE[1] - 2 * MARGIN - 16 * mm


def _one_page(story) -> bool:
    """Whether ``story`` lays out on a single page of the reports' frame."""
    doc = ReportDocument(io.BytesIO(), study_name="", title="", caution="")
    doc.build(story)
    return doc.page == 1


def _height(flowables) -> float:
    """The height a list of flowables takes in the frame's width, spacing included."""
    total = 0.0
    for f in flowables:
        _, h = f.wrap(CONTENT_WIDTH, 10 * PAGE_SIZE[1])
        total += h + f.getSpaceBefore() + f.getSpaceAfter()
    return total


# Rater names in one row of the groups table: about 15 lines of the 170-point column, so that a
# row always fits on a page however long the ids.
GROUP_NAMES_PER_ROW = 60

# Raters per heat-map image: 0.17 inch a row keeps 45 rows and the term names inside a page.
HEAT_MAP_ROWS = 45


class PanelReport:
    def __init__(self, data: ReportInput):
        self.data = data
        self.view = data.view

    def flowables(self) -> list:
        story = self.overview()
        story.append(PageBreak())
        lens = self.lens_section()
        if lens:
            story += lens + [CondPageBreak(300)]
        story += self.rater_table()
        for phase in self.view.phases:
            story += self.phase_sections(phase)
        story += self.files_to_reread()
        story += self.excluded()
        story += self.data_quality()
        story += self.methods()
        story += self.cautions()
        return story

    def _chance_lines(self) -> list[str]:
        """Per phase: the tested flags chance alone would show."""
        lines = []
        several = len(self.view.phases) > 1
        for phase in self.view.phases:
            panel = self.view.panel(phase)
            chance = None if panel is None else panel.chance_flags
            if chance is not None:
                lines.append(wording.chance_flags_sentence(
                    chance.n_tests, chance.panelwise_rate, chance.expected_chance_flags, chance.flags_shown,
                    phase if several else None))
        return lines

    def _reach_lines(self) -> list[str]:
        """Per phase: what the low test-retest check can catch with the repeats at hand
        (under the every-rater table, beside the retest figures)."""
        lines = []
        several = len(self.view.phases) > 1
        for phase in self.view.phases:
            checked = [e for e in self.view.raters if e.phase == phase and e.retest is not None
                       and e.retest.n_pairs and "low_retest" not in e.flags]
            reach = [(e.retest.n_pairs, e.retest.flag_detectable_below) for e in checked]
            if reach:
                highest = max((v if v is not None else -1.0) for _, v in reach)
                lines.append(wording.retest_reach_panel_sentence(
                    min(n for n, _ in reach), max(n for n, _ in reach), highest,
                    phase if several else None,
                    over_showings=any(e.retest.measure == "mean_pairwise_r" for e in checked)))
        return lines

    # ------------------------------------------------------------------ overview
    def panel_wide(self, phase) -> tuple[str, ...]:
        """Flags every rater of the phase carries: stated once for the panel."""
        return wording.panel_wide_flags([e.flags for e in self.view.entries_in(phase)])

    def conversation_rows(self) -> list[tuple]:
        """(rater entry, its own flags) for every flagged rater, the flags every rater of
        the phase shares left out; most serious first (by :func:`wording.flag_rank`)."""
        shared = {phase: set(self.panel_wide(phase)) for phase in self.view.phases}
        rows = []
        for e in self.view.raters:
            own = sorted((f for f in e.flags if f not in shared.get(e.phase, ())),
                         key=lambda f: (wording.flag_rank(f), f))
            if own:
                rows.append((e, tuple(own)))
        phase_order = {p: i for i, p in enumerate(self.view.phases)}
        rows.sort(key=lambda r: (wording.flag_rank(r[1][0]), phase_order.get(r[0].phase, 0), r[0].rater))
        return rows

    def reasons_by_rater(self, rows_in) -> list[tuple[str, list[str], list[str]]]:
        """One line per rater (most serious first): a flag raised in several phases is
        named once, with each phase's figure."""
        several = self.view.named_phases
        grouped: dict[str, dict[str, list]] = {}
        phases: dict[str, list[str]] = {}
        for e, own in rows_in:
            phases.setdefault(e.rater, [])
            if e.phase and e.phase not in phases[e.rater]:
                phases[e.rater].append(e.phase)
            for flag in own:
                grouped.setdefault(e.rater, {}).setdefault(flag, []).append(e)
        out = []
        for rater, flags in grouped.items():
            reasons = []
            for flag in sorted(flags, key=lambda f: (wording.flag_rank(f), f)):
                entries = flags[flag]
                # a rater listed for several phases: every reason says which phase it is from
                if several and (len(entries) > 1 or len(phases[rater]) > 1):
                    reasons.append(wording.flag_reason_by_phase(
                        flag, [(e.phase, e.evidence.get(flag)) for e in entries]))
                else:
                    reasons.append(wording.flag_reason(flag, entries[0].evidence.get(flag)))
            out.append((rater, phases[rater], reasons))
        return out

    def next_steps(self) -> tuple[str | None, list[str]]:
        """Three steps drawn from the latest phase's numbers (the panel as it reads now)."""
        phase = self.view.phases[-1]
        panel = self.view.panel(phase)
        named = phase if self.view.named_phases else None
        talk = [(e, own) for e, own in self.conversation_rows()
                if e.phase == phase and wording.flag_rank(own[0]) < len(wording.CONVERSATION_ORDER)]
        if talk:
            first, own = talk[0]
            step1 = wording.step_conversation(first.rater, own[0], first.evidence.get(own[0]),
                                              others=list(dict.fromkeys(e.rater for e, _ in talk[1:]
                                                                        if e.rater != first.rater)))
        else:
            step1 = wording.step_conversation(None, None)
        cue, p_adj = wording.cue_to_discuss(panel.homogeneity_per_cue if panel is not None else {})
        step2 = wording.step_cue(cue, p_adj)
        step3 = self._readers_step(panel)
        return named, [step1, step2, step3]

    @staticmethod
    def _readers_step(panel) -> str:
        if panel is None or not panel.d_study:
            return wording.step_readers(None, None, None, None, None)
        k_now = panel.icc.readers_per_case if panel.icc is not None else None
        reached_now = panel.icc.estimates.get("ak") if panel.icc is not None else None
        needed_phi = panel.readers_needed.get("phi")
        target, needed = wording.readers_target(needed_phi if isinstance(needed_phi, dict) else {}, reached_now)
        at_needed = next((row.phi for row in panel.d_study if row.raters == needed), None)
        return wording.step_readers(k_now, reached_now, target, needed, at_needed,
                                    panel.icc.intervals.get("ak") if panel.icc is not None else None)

    def overview(self) -> list:
        story = [text("Panel summary", TITLE),
                 text("For the chair: it names every rater, so please keep it within the committee (each "
                      "rater receives a private report on their own judgments). "
                      + wording.CAUTIONS[0] + " " + wording.CAUTIONS[3], NOTE), Spacer(1, 4)]
        counts = [(f"phase {c.phase}: " if c.phase else "") + f"{c.n_raters} raters, {c.n_cases} cases, "
                  f"{c.n_judgments} judgments, {c.n_repeat_pairs} repeated pairs" for c in self.view.phase_counts]
        if counts:
            line = "; ".join(counts) + "."
            story.append(text(line[0].upper() + line[1:], SMALL))
        return self._first_page(story)

    def _first_page(self, head: list) -> list:
        """Page 1 with as many flagged raters as leave it one page: a first guess from the
        flowables' heights, then checked by laying page 1 out alone (a page or two of
        layout, a few hundredths of a second each)."""
        n_flagged = len(self.reasons_by_rater(self.conversation_rows()))
        budget = FIRST_PAGE_HEIGHT - _height(head) - _height(self.at_a_glance() + self.steps())
        rows = self._rows_within(budget)

        def page(n):
            return head + self.flags_first(rows=n) + self.at_a_glance() + self.steps()

        if n_flagged <= self.MIN_FIRST_PAGE_ROWS:
            return page(rows)
        if _one_page(page(rows)):
            while rows < min(n_flagged, self.FIRST_PAGE_ROWS) and _one_page(page(rows + 1)):
                rows += 1
        else:
            while rows > self.MIN_FIRST_PAGE_ROWS and not _one_page(page(rows - 1)):
                rows -= 1
            rows = max(self.MIN_FIRST_PAGE_ROWS, rows - 1)
        return page(rows)

    def _rows_within(self, budget: float) -> int:
        """How many flagged raters the flags-first section can show in ``budget`` points."""
        n = self.FIRST_PAGE_ROWS
        while n > self.MIN_FIRST_PAGE_ROWS and _height(self.flags_first(rows=n)) > budget:
            n -= 1
        return n

    #: Raters in the flags-first table on page 1, and reasons shown per rater (the most
    #: serious); the rest are counted and found in the every-rater table and results.json.
    FIRST_PAGE_ROWS = 12
    MIN_FIRST_PAGE_ROWS = 3
    FIRST_PAGE_REASONS = 2

    def flags_first(self, rows: int | None = None) -> list:
        """Flags every rater shares (once), then the first ``rows`` flagged raters (all
        up to FIRST_PAGE_ROWS when None), most serious first; the rest counted."""
        story = [text("Flags first: who needs a conversation, and why", HEADING)]
        named = self.view.named_phases
        shared_in: dict[str, list] = {}
        for phase in self.view.phases:
            for flag in self.panel_wide(phase):
                shared_in.setdefault(flag, []).append(phase)
        for flag, phases in shared_in.items():
            every = named and len(phases) == len(self.view.phases) > 1
            for phase in ([None] if every else phases):
                entries = [e for e in self.view.raters if e.phase in phases] if every else self.view.entries_in(phase)
                story.append(text(wording.panel_wide_flag_sentence(
                    flag, [e.evidence.get(flag) for e in entries], len({e.rater for e in entries}),
                    phase if named else None, every_phase=every), BODY))
        rows_in = self.conversation_rows()
        # one small paragraph for every phase's chance and reach lines: page 1 stays one page
        lines = self._chance_lines()
        kinds = len(group_notes(w.as_note() for w in self.view.warnings))
        lines.append(f"The data-quality section gives {len(self.view.warnings)} note(s) from reading and "
                     f"fitting the data, one line for each of their {kinds} kind(s).")
        chance = [text(" ".join(lines), SMALL)]
        if rows_in:
            by_rater = self.reasons_by_rater(rows_in)
            table, more = self._reasons_table(by_rater, min(len(by_rater), rows or self.FIRST_PAGE_ROWS))
            story += [table] + more
        elif not any(self.panel_wide(p) for p in self.view.phases):
            story.append(text("No rater was flagged.", BODY))
        else:
            story.append(text("No rater was flagged for anything beyond what all of them share.", BODY))
        return story + chance

    def _reasons_table(self, by_rater, n: int) -> tuple[Table, list]:
        """The first ``n`` flagged raters with their most serious reasons, and the line
        counting the rest."""
        named = self.view.named_phases
        rows = [[text(h, CELL_BOLD) for h in ("Rater",) + (("Phase",) if named else ()) + ("Why",)]]
        for rater, phases, reasons in by_rater[:n]:
            shown = "; ".join(reasons[:self.FIRST_PAGE_REASONS])
            if len(reasons) > self.FIRST_PAGE_REASONS:
                shown += f"; and {len(reasons) - self.FIRST_PAGE_REASONS} more (every-rater table)"
            rows.append([text(rater, CELL)] + ([text(", ".join(phases), CELL)] if named else [])
                        + [text(shown, CELL)])
        widths = [80, 72] if named else [80]
        table = fitted_table(rows, widths + [CONTENT_WIDTH - sum(widths)], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        more = []
        if len(by_rater) > n:
            rest = len(by_rater) - n
            more.append(text(f"{rest} more flagged rater{'s are' if rest != 1 else ' is'} in the every-rater "
                             "table on the next pages and in results.json.", SMALL))
        return table, more

    def at_a_glance(self) -> list:
        """The decisions' reliability beside single-rater agreement, 'policies alike?' in
        words, and the lens result: one column per phase."""
        phases = self.view.phases
        named = self.view.named_phases
        panels = [self.view.panel(p) for p in phases]
        lens_entries = [[e for e in self.view.entries_in(p) if e.lens is not None] for p in phases]
        has_lens = any(lens_entries)

        def icc(panel, form):
            if panel is None or panel.icc is None:
                return None, None
            return panel.icc.estimates.get(form), panel.icc.intervals.get(form)

        label_rows = [
            ("Decisions as the files were read (ICC(A,k))",
             [wording.decision_reliability_text(*icc(pn, "ak"), pn.icc.readers_per_case if pn and pn.icc else None)
              for pn in panels]),
            ("One reader alone (ICC(A,1))",
             [wording.single_reader_text(*icc(pn, "a1")) for pn in panels]),
            ("Krippendorff's alpha (one reader)",
             [wording.alpha_text(pn.alpha if pn else None, pn.alpha_interval if pn else None) for pn in panels]),
            ("Policies alike?",
             [wording.policies_alike_answer(pn.homogeneity[1] if pn and pn.homogeneity else None)
              for pn in panels]),
        ]
        if has_lens:
            label_rows.append(("Lens model: each rater against their own model",
                               [self._lens_line(entries) for entries in lens_entries]))
        head = [text("", CELL_BOLD)] + [text(f"Phase {p}" if named else "This panel", CELL_BOLD) for p in phases]
        rows = [head] + [[text(label, CELL_BOLD)] + [text(v, CELL) for v in values] for label, values in label_rows]
        first = 120
        widths = [first] + [(CONTENT_WIDTH - first) / len(phases)] * len(phases)
        table = fitted_table(rows, widths, hAlign="LEFT")
        table.setStyle(table_style())
        story = [text("How far the decisions can be trusted", HEADING), table,
                 text(wording.bands_note(), SMALL)]
        if has_lens and self.view.criterion_only_for_selected:
            story.append(text(wording.LENS_SELECTED_SHORT, SMALL))
        return story

    @staticmethod
    def _lens_line(entries) -> str:
        if not entries:
            return "No criterion in this phase."
        gains = sorted(((e.rater, e.lens.gain, *e.lens.gain_interval) for e in entries
                        if e.lens.verdict == "model_better" and e.lens.gain is not None
                        and None not in e.lens.gain_interval), key=lambda t: (-t[1], t[0]))
        return wording.lens_panel_sentence([e.lens.verdict for e in entries], gains)

    def steps(self) -> list:
        phase, steps = self.next_steps()
        story = [text("Next steps" + (f" (from phase {phase}, the latest)" if phase else ""), HEADING)]
        story += [text(f"{i}. {step}", BODY) for i, step in enumerate(steps, 1)]
        return story

    # ------------------------------------------------------------------ lens model
    def lens_section(self) -> list:
        """Per rater r_a, G, C, R_s, R_e with intervals and the model against the rater."""
        if not any(e.lens is not None for e in self.view.raters):
            return []
        story = [text("Lens model: judgments against the outcome", HEADING),
                 text(wording.LENS_SECTION_INTRO, BODY)]
        if self.view.criterion_only_for_selected:
            story.append(text(wording.LENS_SELECTED_CAUTION, NOTE))
        named = self.view.named_phases
        for phase in self.view.phases:
            entries = [e for e in self.view.entries_in(phase) if e.lens is not None]
            if not entries:
                continue
            if named:
                story += [CondPageBreak(90), text(f"Phase {phase}", CELL_BOLD)]
            order = {v: i for i, v in enumerate(wording.MODEL_VS_RATER_WORDS)}
            entries.sort(key=lambda e: (order.get(e.lens.verdict, 9), -(e.lens.gain or 0), e.rater))
            head = ("Rater", "r_a", "G", "C", "R_s", "R_e", "Model's gain", "In words")
            rows = [[text(h, CELL_BOLD) for h in head]]
            for e in entries:
                lens = e.lens

                def cell(value, key=None, signed=False, lens=lens):
                    shown = wording.lens_number(value, signed)
                    ends = lens.intervals.get(key) if key else None
                    if key == "gain":
                        ends = lens.gain_interval
                    if ends and None not in ends:
                        shown += f"<br/><font size=7>{fmt(ends[0])}, {fmt(ends[1])}</font>"
                    return markup(shown, CELL)   # figures only: nothing to escape

                rows.append([text(e.rater, CELL), cell(lens.r_a, "r_a"), cell(lens.g, "g"), cell(lens.c, "c"),
                             cell(lens.r_s), cell(lens.r_e, "r_e"), cell(lens.gain, "gain", signed=True),
                             text(wording.MODEL_VS_RATER_WORDS.get(lens.verdict, lens.verdict), CELL)])
            widths = [66, 56, 56, 56, 34, 56, 62]
            table = fitted_table(rows, widths + [CONTENT_WIDTH - sum(widths)], repeatRows=1, hAlign="LEFT")
            table.setStyle(table_style())
            story.append(table)
        story.append(text(wording.LENS_SECTION_LEGEND, SMALL))
        return story

    def rater_table(self) -> list:
        story = [text("Every rater", HEADING)]
        named = self.view.named_phases
        head = ("Rater",) + (("Phase",) if named else ()) + (
            "Cases", "Repeats", "R_s", "Retest r", "Offset", "Misalloc.", "G rubric", "Group", "Flags")
        rows = [[text(h, CELL_BOLD) for h in head]]
        shared = {phase: set(self.panel_wide(phase)) for phase in self.view.phases}
        for e in self.view.raters:
            own = ", ".join(wording.flag_short(f) for f in e.flags if f not in shared.get(e.phase, ()))
            rows.append([text(e.rater, CELL)] + ([text(e.phase or "", CELL)] if named else []) + [
                         text(str(e.n_cases), CELL),
                         text(str(e.n_repeats), CELL), text(fmt(_policy_r(e)), CELL),
                         text(fmt(_retest_r(e)), CELL), text(fmt(_offset(e)), CELL),
                         text(fmt(_misallocation(e)), CELL), text(fmt(_g_rubric(e)), CELL),
                         text(e.group or "", CELL), text(own, CELL)])
        widths = [62] + ([40] if named else []) + [34, 40, 32, 40, 36, 44, 42, 34]
        widths.append(CONTENT_WIDTH - sum(widths))
        table = fitted_table(rows, widths, repeatRows=1)
        table.setStyle(table_style(("FONT", (0, 1), (-1, -1), BASE_FONT, 7.5)))
        story.append(table)
        margin = ("" if self.view.scale is None else
                  f" A rater is flagged as running high or low only when the offset's 95% interval lies wholly "
                  f"beyond {fmt(0.05 * (self.view.scale[1] - self.view.scale[0]))} scale points either way "
                  "(5% of the scale's range; our own rule of thumb).")
        story.append(text("Offset: positive means judgments run higher than the panel's on the same cases."
                          + margin + " Misalloc.: misallocation against the rubric (0 = the rubric's weights). Flags: in "
                          "short words (page 1 gives each in full with its figure); a flag that every rater "
                          + ("of a phase " if named else "") + "carries is stated once on page 1 and left out "
                          "here.", SMALL))
        story += [text(line, SMALL) for line in self._reach_lines()]
        repeats = wording.panel_repeats_note(self.view.raters)
        if repeats:
            story.append(text(repeats, SMALL))
        few = [f"{e.rater} ({e.phase})" if e.phase else e.rater for e in self.view.raters
               if e.lens is not None and e.lens.small_sample_note]
        if few:
            story.append(text(wording.LENS_SMALL_SAMPLE_PANEL.format(raters=", ".join(few)), SMALL))
        return story

    # ------------------------------------------------------------------ per phase
    def phase_sections(self, phase) -> list:
        label = f" (phase {phase})" if phase else ""
        panel = self.view.panel(phase)
        if panel is None:
            return [CondPageBreak(100), text(f"Panel results{label} are not in the results.", BODY)]
        if not self.view.cues:   # agreement-only data: the sections on cue weights have nothing to show
            return [CondPageBreak(200), text(f"Agreement and readers per file{label}", HEADING),
                    text(wording.NO_CUES_PANEL, BODY)] + self.agreement(panel)
        story = [CondPageBreak(250), text(f"Cue weights by rater{label}", HEADING)]
        story += self.heat_map(phase)
        story += [CondPageBreak(200), text(f"Groups of raters{label}", HEADING)]
        story += self.groups(panel)
        story += [CondPageBreak(200), text(f"Agreement and readers per file{label}", HEADING)]
        story += self.agreement(panel)
        story += [CondPageBreak(200), text(f"Where pairs of raters disagree{label}", HEADING)]
        story += self.rater_pairs(panel)
        return story

    def heat_map(self, phase) -> list:
        entries = [e for e in self.view.entries_in(phase) if e.policy is not None and e.policy.std_weights]
        if not entries:
            return [text("Standardized weights are not available yet for this phase.", BODY)]
        terms = list(self.view.design_terms) or list(entries[0].policy.std_weights)
        entries = self._in_tree_order(entries, self.view.panel(phase))
        values = [[e.policy.std_weights.get(t) for t in terms] for e in entries]
        # one map holds at most HEAT_MAP_ROWS raters: a taller image cannot fit on a page
        images = [charts.weight_heat_map([e.rater for e in entries[i:i + HEAT_MAP_ROWS]], terms,
                                         values[i:i + HEAT_MAP_ROWS],
                                         [e.group for e in entries[i:i + HEAT_MAP_ROWS]], width_pt=CONTENT_WIDTH)
                  for i in range(0, len(entries), HEAT_MAP_ROWS)]
        return images + [text("Rows are raters in the order of the grouping tree below (group letter in "
                              "brackets); each cell shows the standardized weight; green: the judgment rises "
                              "with the cue, brown: it falls. Weights are on z-scored cues and judgments.",
                              SMALL)]

    @staticmethod
    def _in_tree_order(entries, panel: PanelView | None):
        """Raters in the grouping tree's top-to-bottom order, so that the heat map's rows and the
        tree's leaves line up; raters outside the tree follow by group and id."""
        grouping = None if panel is None else panel.grouping
        order: list[str] = []
        if grouping is not None and grouping.merges:
            order = charts.tree_leaf_order(list(grouping.grouped_raters),
                                           [(m.merged_a, m.merged_b) for m in grouping.merges])
        place = {r: i for i, r in enumerate(order)}
        return sorted(entries, key=lambda e: (place.get(e.rater, len(place)), e.group or "~", e.rater))

    def groups(self, panel: PanelView) -> list:
        groups = panel.groups
        if not groups:
            return [text("Groups of raters are not available for this study yet.", BODY)]
        story = []
        grouping = panel.grouping
        merges = grouping.merges if grouping is not None else ()
        leaves = list(grouping.grouped_raters if grouping is not None else ()) or \
            sorted({r for g in groups for r in g.raters})
        if merges:
            base = grouping.r2_individual
            steps = []
            for m in merges:
                height = (base - m.r2) if (base is not None and m.r2 is not None) else m.step
                steps.append((list(m.merged_a), list(m.merged_b), height))
            leaf_group = {r: g.group for g in groups for r in g.raters}
            story.append(_fit_on_page(charts.grouping_tree(leaves, steps, leaf_group, width_pt=CONTENT_WIDTH * 0.85)))
            if len(leaves) > charts.TREE_NAMED_LEAVES:
                story.append(text(f"The tree of {len(leaves)} raters is drawn without their names, which "
                                  "would be too small to read at this size; the table below lists the "
                                  "raters of each group.", SMALL))
            if grouping.rule:
                story.append(text(f"Number of groups: {grouping.rule}", SMALL))
        rows = [[text(h, CELL_BOLD) for h in ("Group", "Raters", "What sets it apart")]]
        for g in groups:
            # A table row cannot break across pages: a group of hundreds of raters is listed
            # over several rows ("continued") rather than in one cell taller than a page.
            members = list(g.raters)
            for start in range(0, max(len(members), 1), GROUP_NAMES_PER_ROW):
                first = start == 0
                rows.append([text(g.group if first else f"{g.group} (continued)", CELL),
                             text(", ".join(members[start:start + GROUP_NAMES_PER_ROW]), CELL),
                             text((g.sets_apart or "") if first else "", CELL)])
        table = fitted_table(rows, [45, 170, CONTENT_WIDTH - 215], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        story.append(table)
        if panel.homogeneity is not None:
            statistic, p_value = panel.homogeneity
            shown_p = wording.fmt_p(p_value)
            story.append(text("Test that all raters share one set of weights (a Wald test with each rater's "
                              "own error variance, p from a parametric bootstrap): "
                              f"statistic {fmt(statistic)}, p {shown_p if shown_p.startswith('<') else '= ' + shown_p}.",
                              BODY))
        return story

    def agreement(self, panel: PanelView) -> list:
        story = []
        icc = panel.icc
        if icc is not None:
            rows = [[text(h, CELL_BOLD) for h in ("Form", "Estimate", "95% interval", "Meaning", "Reading")]]
            for key, label, meaning in ICC_FORMS:
                est = icc.estimates[key]
                ci = icc.intervals.get(key)
                rows.append([text(label, CELL), text(fmt(est), CELL),
                             text(f"{fmt(ci[0])} to {fmt(ci[1])}" if ci else "", CELL), text(meaning, CELL),
                             text(wording.icc_verdict(est, ci), CELL)])
            table = fitted_table(rows, [60, 50, 80, 200, CONTENT_WIDTH - 390], hAlign="LEFT")
            table.setStyle(table_style())
            story.append(table)
            if icc.method:
                story.append(text(f"Estimated by: {icc.method}"
                                  + (f"; intervals: {icc.ci_method}" if icc.ci_method else "") + ".", SMALL))
            story.append(text(f"Bands: {wording.ICC_BANDS.source}.", SMALL))
        else:
            story.append(text("ICC agreement is not available for this study yet.", BODY))
        alpha = panel.alpha
        if alpha is not None:
            story.append(text(f"Krippendorff's alpha = {fmt(alpha)}: {wording.ALPHA_BANDS.words(alpha)} "
                              f"({wording.ALPHA_BANDS.source}).", BODY))
        if panel.categories:
            shown = " and ".join(f"{label} = {fmt(est)}" + (f" (95% interval {fmt(lo)} to {fmt(hi)})"
                                                             if lo is not None and hi is not None else "")
                                 for label, est, lo, hi in panel.categories)
            story.append(text(f"{shown}: agreement on the exact scale value beyond chance (1 = every reader "
                              "chose the same value, 0 = no more than chance). AC1 stays steadier than "
                              "kappa when most judgments fall on one value.", BODY))
        vc = panel.variance_components
        if vc is not None:
            parts = ", ".join(f"{k} {fmt(v, 3)}" for k, v in vc.items() if v is not None)
            how = f" ({panel.variance_estimator})" if panel.variance_estimator is not None else ""
            story.append(text(f"Variance components{how}: {parts}.", BODY))
        d_study = panel.d_study
        if d_study:
            rows = [[text(h, CELL_BOLD) for h in ("Readers per file", "Relative G (ranking)",
                                                 "Phi (absolute level)")]]
            for row in d_study:
                rows.append([text(str(row.raters), CELL), text(fmt(row.g_rel), CELL), text(fmt(row.phi), CELL)])
            table = fitted_table(rows, [100, 120, 120], hAlign="LEFT")
            table.setStyle(table_style())
            story += [Spacer(1, 4), table,
                      text("How dependable a file's mean score would be with this many readers "
                           "(Cronbach et al. 1972; Brennan 2001).", SMALL)]
            needed = panel.readers_needed
            bits = []
            for key, what in (("g_rel", "ranking files (relative G)"), ("phi", "absolute levels (phi)")):
                value = needed.get(key)
                if isinstance(value, dict):
                    value = ", ".join(f"{n if n is not None else 'more than studied'} to reach {t}"
                                      for t, n in value.items())
                if value is not None:
                    bits.append(f"for {what}: {value}")
            if bits:
                story.append(text("Readers per file needed " + "; ".join(bits) + ".", BODY))
            flips = panel.flips
            if flips:
                parts = [f"{readers} reader(s): {fmt(100 * rate, 0)}%" for readers, rate in flips]
                story.append(text("How often a file near the cut-off would land on the other side with other "
                                  "readers: " + ", ".join(parts) + ".", BODY))
        else:
            story.append(text("The readers-per-file table is not available for this study yet.", BODY))
        return story

    def rater_pairs(self, panel: PanelView) -> list:
        pairs = panel.pairs
        rule = ([text(f"A pair is shown when the two raters share at least {panel.pairs_threshold}, "
                      "so that both policies can be refitted on their shared cases.", SMALL)]
                if panel.pairs_threshold else [])
        if not pairs:
            if panel.pairs_left_out:
                return [text(f"The pairwise view is empty: {panel.pairs_left_out}.", BODY)] + rule
            return [text("The pairwise view is not available for this study yet.", BODY)]
        if panel.pairs_left_out:
            rule.append(text(f"Left out: {panel.pairs_left_out}.", SMALL))
        pairs = sorted(pairs, key=lambda p: p.r if p.r is not None else 9)[:15]
        rows = [[text(h, CELL_BOLD) for h in ("Rater", "Rater", "Shared cases", "r", "G", "C",
                                             "Mainly from")]]
        for p in pairs:
            source = p.main_source
            rows.append([text(p.rater_a, CELL), text(p.rater_b, CELL), text(str(p.n), CELL),
                         text(fmt(p.r), CELL), text(fmt(p.g), CELL), text(fmt(p.c), CELL),
                         text({"weighting": "different weighting (G)", "inconsistency": "inconsistency (R_s)"}
                              .get(source, str(source or "")), CELL)])
        table = fitted_table(rows, [70, 70, 60, 40, 40, 40, CONTENT_WIDTH - 320], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        lead = ("The pairs that agree least" if len(panel.pairs) > len(pairs) or panel.pairs_left_out is None
                else f"The {len(pairs)} pair{'s' if len(pairs) > 1 else ''} that share enough cases to be "
                     "compared (not necessarily the pairs that agree least)")
        return [text(f"{lead}, with where their disagreement comes from: weighting the "
                     "cues differently (low G) or applying a policy inconsistently (low R_s).", BODY), table] + rule

    # ------------------------------------------------------------------ files, excluded, quality
    def files_to_reread(self) -> list:
        """The files most likely to change side with one more reading, a few per phase, with
        how many there are; the full ranked list is the files table."""
        story = [CondPageBreak(150), text("Files that need another read", HEADING)]
        frame = self.data.table("files", "case_scores", "cases")
        flag_col = None
        if frame is not None:
            flag_col = next((c for c in ("needs_another_read", "another_read", "reread") if c in frame.columns), None)
        if frame is None or flag_col is None:
            listed = [(p.phase, p.files_needing_another_read) for p in self.view.panels
                      if p.files_needing_another_read]
            if not listed:
                return story + [text("The per-file results are not available for this study yet.", BODY)]
            for phase, ids in listed:
                shown = ", ".join(map(str, ids[:TOP_FILES])) + (
                    f" and {len(ids) - TOP_FILES} more" if len(ids) > TOP_FILES else "")
                story.append(text((f"Phase {phase}, {len(ids)} file(s): " if phase else f"{len(ids)} file(s): ")
                                  + shown + ".", BODY))
            story.append(text("The full list, with the reason for each file, is in the files table.", SMALL))
            return story
        cut = self.view.cut_off
        has_chance = cut is not None and "change_probability" in frame.columns
        named = self.view.named_phases and "phase" in frame.columns
        parts = ([(phase, frame[frame["phase"] == phase]) for phase in frame["phase"].drop_duplicates()]
                 if named else [(None, frame)])
        if has_chance:
            story.append(text(
                "How likely one more reading is to put each file on the other side of the cut-off "
                f"({fmt(cut)}): one more reader's judgment, with their severity removed, joins the file's "
                "adjusted mean. The chance comes from the file's adjusted mean, its number of readers, "
                "the panel's spread between readers and the spread of the files' values; files whose "
                "readers disagree more than usual are listed too. Adjusted: the mean after removing "
                "each reader's severity offset.", BODY))
        else:
            story.append(text("Without a cut-off ([judgment] cut_off) no file can be said to change side; "
                              "the files whose readers disagree more than usual are listed, the strongest "
                              "disagreement first.", BODY))
        per_phase = max(10, TOP_FILES // max(1, len(parts)))
        for phase, part in parts:
            chosen = self._most_urgent_first(part[part[flag_col].astype(bool)])
            level = next((p.files_change_level for p in self.view.panels if p.phase == phase), None)
            # a phase whose chances could not be computed (no spread estimate) says nothing of them
            chance_here = has_chance and bool(part["change_probability"].notna().any())
            story += self._files_part(phase, part, chosen, per_phase, chance_here, level)
        story.append(text("Every file, ranked the same way (change_rank, change_probability, reasons), is in "
                          "the files table (tables/files.csv and the workbook's files sheet).", SMALL))
        return story

    def _files_part(self, phase, part, chosen, per_phase: int, has_chance: bool, level: float | None) -> list:
        lead = f"Phase {phase}: " if phase else ""
        n_files = len(part)
        reasons = chosen["reasons"].fillna("").astype(str) if "reasons" in chosen.columns else None
        n_change = int(reasons.str.contains("may_change").sum()) if reasons is not None else 0
        n_disagree_only = (int((reasons.str.contains("high_disagreement")
                                & ~reasons.str.contains("may_change")).sum()) if reasons is not None else 0)
        if chosen.empty:
            return [text(f"{lead}no file of {n_files} needs another read.", BODY)]
        if has_chance:
            level = "a" if level is None else f"at least a {100 * level:.0f}%"
            said = (f"{lead}{n_change} of {n_files} files have {level} chance that one more "
                    "reading changes their side of the cut-off"
                    + (f"; {n_disagree_only} more are listed because their readers disagree more than usual"
                       if n_disagree_only else "")
                    + f". {len(chosen)} listed in all")
        else:
            said = f"{lead}{len(chosen)} of {n_files} files are listed"
        shown = chosen.head(per_phase)
        said += (f"; the {len(shown)} most likely to change are shown." if has_chance and len(chosen) > len(shown)
                 else "; all are shown." if len(chosen) == len(shown) else f"; the first {len(shown)} are shown.")
        heads = [("case", "File", 70), ("n_readers", "Readers", 50), ("adjusted", "Adjusted", 55)]
        if has_chance:
            heads.append(("change_probability", "Chance of a change", 85))
        heads += [("spread_sd", "Spread (SD)", 60), ("reasons", "Why", None)]
        heads = [h for h in heads if h[0] in shown.columns]
        rows = [[text(title, CELL_BOLD) for _, title, _ in heads]]
        for _, r in shown.iterrows():
            cells = []
            for col, _, _ in heads:
                value = r[col]
                if col == "change_probability":
                    cells.append(text(_percent(value), CELL))
                elif col == "reasons":
                    cells.append(text("; ".join(REASON_WORDS.get(w, w.replace("_", " "))
                                                for w in str(value or "").split(";") if w), CELL))
                elif isinstance(value, float):
                    cells.append(text(fmt(_finite(value)), CELL))
                else:
                    cells.append(text(str(value), CELL))
            rows.append(cells)
        fixed = sum(w for _, _, w in heads if w)
        widths = [w if w else CONTENT_WIDTH - fixed for _, _, w in heads]
        table = fitted_table(rows, widths, repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        out = [KeepTogether([text(said, BODY), table])]
        if len(chosen) > len(shown):
            out.append(text(f"{len(chosen) - len(shown)} more listed files are in the files table.", SMALL))
        return out

    def _most_urgent_first(self, chosen):
        """The files most likely to change side first (the table's ``change_rank``); without a
        cut-off, the strongest disagreement first. Phases keep their order."""
        chosen = chosen.copy()
        if "change_rank" in chosen.columns:
            return chosen.sort_values("change_rank", kind="mergesort")
        if "disagreement_p" in chosen.columns:
            return chosen.sort_values("disagreement_p", kind="mergesort")
        return chosen

    def excluded(self) -> list:
        story = [CondPageBreak(150), text("Attributes that must not count", HEADING)]
        rows = []
        for e in self.view.raters:
            for attr, res in e.excluded.items():
                rows.append((e.rater, e.phase or "", attr, res.delta_r2, res.p_value, res.p_adjusted, res.flagged))
        if not rows:
            return story + [text("No excluded-attribute result is available for this study.", BODY)]
        rows.sort(key=lambda r: (not r[6], r[5] if r[5] is not None else 9))
        shown = [r for r in rows if r[6]] or rows[:5]
        shown = shown if len(shown) >= 5 else rows[:5]
        named = self.view.named_phases
        table_rows = [[text(h, CELL_BOLD) for h in ("Rater",) + (("Phase",) if named else ()) + (
            "Attribute", "Added R²", "p", "p (Holm)", "Flagged")]]
        for r in shown[:40]:
            table_rows.append([text(r[0], CELL)] + ([text(r[1], CELL)] if named else []) + [
                text(r[2], CELL), text(fmt(r[3], 3), CELL), text(wording.fmt_p(r[4]), CELL),
                text(wording.fmt_p(r[5]), CELL), text("yes" if r[6] else "", CELL)])
        table = fitted_table(table_rows, repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        story += [text("Each attribute added to each rater's policy; p adjusted (Holm) across every "
                       "tested flag of the phase, all raters and attributes included. An association can run through a cue related to the attribute. Flagged "
                       "results first.", BODY), table]
        proxies = [(p.attribute, p.cue, p.association) for panel in self.view.panels for p in panel.proxies
                   if p.strong]
        if proxies:
            story.append(text("Cues strongly related to an excluded attribute (a rater can lean on the attribute "
                              "through them): " + "; ".join(f"{c} with {a} ({fmt(v)})" for a, c, v in
                                                           dict.fromkeys(proxies)) + ".", BODY))
        n_flagged = sum(r[6] for r in rows)
        story.append(text(f"{n_flagged} of {len(rows)} rater-attribute checks were flagged; all "
                          f"{len(rows)} are in the workbook.", SMALL))
        return story

    def all_warnings(self) -> list[tuple[str, str]]:
        """Every note once, as (where, text): results.json's warnings hold the data notes and
        every analysis note, per-rater ones included (the rater entries repeat those)."""
        return [(f"reading the data ({w.where})" if w.where else "analysis", w.message)
                for w in self.view.warnings]

    def data_quality(self) -> list:
        """One line per kind of note, with its count and a few examples; the full list is
        the notes table."""
        story = [CondPageBreak(150), text("Data quality", HEADING)]
        notes = [w.as_note() for w in self.view.warnings]
        if not notes:
            return story + [text("No warning was raised while reading or fitting the data.", BODY)]
        groups = group_notes(notes)
        story.append(text(f"{len(notes)} note(s) of {len(groups)} kind(s) were recorded while reading and "
                          "fitting the data; each kind is one line below, with how often it arose and a "
                          "few of the raters or files it concerns.", BODY))
        rows = [[text("Notes", CELL_BOLD), text("What was noted", CELL_BOLD)]]
        rows += [[text(str(g.count), CELL), text(g.line(), CELL)] for g in groups]
        table = fitted_table(rows, [40, CONTENT_WIDTH - 40], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        return story + [table, text("Every note, one row each with its kind, rater and case, is in the notes "
                                    "table (tables/notes.csv and the workbook's notes sheet) and in "
                                    "results.json.", SMALL)]

    def methods(self) -> list:
        rows = [[text(h, CELL_BOLD) for h in ("Analysis", "Method", "Published source")]]
        every_showing = any(e.repeats_mode == "all" for e in self.view.raters)
        rows += [[text(a, CELL), text(m, CELL), text(s, CELL)] for a, m, s in METHODS
                 if every_showing or a != "Every showing used"]
        table = fitted_table(rows, [100, 230, CONTENT_WIDTH - 330], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        return [CondPageBreak(200), text("Methods and sources", HEADING), table,
                text("Sources are named by author and year so that they can be found; check the original "
                     "before quoting them.", SMALL)]

    def cautions(self) -> list:
        return [KeepTogether([text("Cautions", HEADING)] + [text(f"- {c}", BODY) for c in wording.CAUTIONS])]

