"""The chair's panel summary: flags first, every rater, weights, groups, agreement,
where two readers part ways, files to read again, excluded attributes, data quality, methods, cautions."""

from __future__ import annotations

import math

from reportlab.platypus import CondPageBreak, KeepTogether, PageBreak, Spacer, Table

from . import charts, wording
from ._read import ReportInput
from .rater import _g_rubric, _misallocation, _offset, _policy_r, _retest_r
from .styles import (
    BASE_FONT,
    BODY,
    CELL,
    CELL_BOLD,
    CONTENT_WIDTH,
    HEADING,
    NOTE,
    SMALL,
    TITLE,
    table_style,
    text,
)
from .view import PanelView
from .wording import fmt


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


# Raters per heat-map image: 0.17 inch a row keeps 45 rows and the term names inside a page.
HEAT_MAP_ROWS = 45


class PanelReport:
    def __init__(self, data: ReportInput):
        self.data = data
        self.view = data.view

    def flowables(self) -> list:
        story = self.overview()
        story.append(PageBreak())
        story += self.rater_table()
        for phase in self.view.phases:
            story += self.phase_sections(phase)
        story += self.files_to_reread()
        story += self.excluded()
        story += self.data_quality()
        story += self.methods()
        story += self.cautions()
        return story

    def _chance_lines(self) -> list:
        """Per phase: the tested flags chance alone would show, and the reach of the retest check."""
        lines = []
        several = len(self.view.phases) > 1
        for phase in self.view.phases:
            panel = self.view.panel(phase)
            chance = None if panel is None else panel.chance_flags
            if chance is not None:
                lines.append(text(wording.chance_flags_sentence(
                    chance.n_tests, chance.panelwise_rate, chance.expected_chance_flags, chance.flags_shown,
                    phase if several else None), BODY))
            checked = [e for e in self.view.raters if e.phase == phase and e.retest is not None
                       and e.retest.n_pairs and "low_retest" not in e.flags]
            reach = [(e.retest.n_pairs, e.retest.flag_detectable_below) for e in checked]
            if reach:
                highest = max((v if v is not None else -1.0) for _, v in reach)
                lines.append(text(wording.retest_reach_panel_sentence(
                    min(n for n, _ in reach), max(n for n, _ in reach), highest,
                    phase if several else None,
                    over_showings=any(e.retest.measure == "mean_pairwise_r" for e in checked)), BODY))
        return lines

    # ------------------------------------------------------------------ overview
    def overview(self) -> list:
        story = [text("Panel summary", TITLE),
                 text("For the chair of the panel. It names every rater; please keep it within the "
                      "committee. Each rater receives a separate private report about their own judgments.",
                      BODY)]
        for summary in self.view.phase_counts:
            phase = summary.phase
            story.append(text(
                (f"Phase {phase}: " if phase else "")
                + f"{summary.n_raters} raters, {summary.n_cases} cases, "
                f"{summary.n_judgments} judgments, {summary.n_repeat_pairs} repeated pairs.", BODY))
        story.append(text("Flags first", HEADING))
        flagged = [e for e in self.view.raters if e.flags]
        named = self.view.named_phases
        if flagged:
            rows = [[text(h, CELL_BOLD) for h in ("Rater",) + (("Phase",) if named else ()) + ("What was flagged",)]]
            for e in flagged:
                rows.append([text(e.rater, CELL)] + ([text(e.phase or "", CELL)] if named else [])
                            + [text("; ".join(wording.flag_words(f) for f in e.flags), CELL)])
            widths = [90, 60] if named else [90]
            table = Table(rows, colWidths=widths + [CONTENT_WIDTH - sum(widths)], repeatRows=1, hAlign="LEFT")
            table.setStyle(table_style())
            story.append(table)
        else:
            story.append(text("No rater was flagged.", BODY))
        story += self._chance_lines()
        story.append(text("Panel at a glance", HEADING))
        rows = [[text(h, CELL_BOLD) for h in (("Phase",) if named else ()) + (
            "ICC(A,1)", "Krippendorff's alpha", "Groups", "Policies alike? (p)", "Reading")]]
        for phase in self.view.phases:
            panel = self.view.panel(phase)
            a1 = None if panel is None or panel.icc is None else panel.icc.estimates["a1"]
            alpha = None if panel is None else panel.alpha
            groups = () if panel is None else panel.groups
            hom_p = None if panel is None or panel.homogeneity is None else panel.homogeneity[1]
            reading = []
            if a1 is not None:
                reading.append(f"single-rater agreement {wording.icc_reading(a1)} ({wording.ICC_BANDS.source})")
            if alpha is not None:
                reading.append(f"alpha {wording.ALPHA_BANDS.words(alpha)}")
            rows.append(([text(phase or "", CELL)] if named else []) + [text(fmt(a1), CELL), text(fmt(alpha), CELL),
                         text(str(len(groups)) if groups else "n/a", CELL), text(wording.fmt_p(hom_p), CELL),
                         text("; ".join(reading) or "not available yet", CELL)])
        widths = ([55] if named else []) + [55, 80, 45, 80]
        table = Table(rows, colWidths=widths + [CONTENT_WIDTH - sum(widths)], hAlign="LEFT")
        table.setStyle(table_style())
        story.append(table)
        n_warn = len(self.all_warnings())
        story.append(text(f"The data-quality section lists {n_warn} note(s) from reading and fitting the data.",
                          SMALL))
        story.append(Spacer(1, 6))
        story.append(text(wording.CAUTIONS[0], NOTE))
        return story

    def rater_table(self) -> list:
        story = [text("Every rater", HEADING)]
        named = self.view.named_phases
        head = ("Rater",) + (("Phase",) if named else ()) + (
            "Cases", "Repeats", "R_s", "Retest r", "Offset", "Misalloc.", "G rubric", "Group", "Flags")
        rows = [[text(h, CELL_BOLD) for h in head]]
        for e in self.view.raters:
            rows.append([text(e.rater, CELL)] + ([text(e.phase or "", CELL)] if named else []) + [
                         text(str(e.n_cases), CELL),
                         text(str(e.n_repeats), CELL), text(fmt(_policy_r(e)), CELL),
                         text(fmt(_retest_r(e)), CELL), text(fmt(_offset(e)), CELL),
                         text(fmt(_misallocation(e)), CELL), text(fmt(_g_rubric(e)), CELL),
                         text(e.group or "", CELL), text(", ".join(e.flags), CELL)])
        widths = [62] + ([40] if named else []) + [34, 40, 32, 40, 36, 44, 42, 34]
        widths.append(CONTENT_WIDTH - sum(widths))
        table = Table(rows, colWidths=widths, repeatRows=1)
        table.setStyle(table_style(("FONT", (0, 1), (-1, -1), BASE_FONT, 7.5)))
        story.append(table)
        story.append(text("Offset: positive means judgments run higher than the panel's on the same cases. "
                          "Misalloc.: misallocation against the rubric (0 = the rubric's weights).", SMALL))
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
        entries.sort(key=lambda e: (e.group or "~", e.rater))
        values = [[e.policy.std_weights.get(t) for t in terms] for e in entries]
        # one map holds at most HEAT_MAP_ROWS raters: a taller image cannot fit on a page
        images = [charts.weight_heat_map([e.rater for e in entries[i:i + HEAT_MAP_ROWS]], terms,
                                         values[i:i + HEAT_MAP_ROWS],
                                         [e.group for e in entries[i:i + HEAT_MAP_ROWS]], width_pt=CONTENT_WIDTH)
                  for i in range(0, len(entries), HEAT_MAP_ROWS)]
        return images + [text("Rows are raters ordered by group (letter in brackets); green: the judgment rises "
                            "with the cue, brown: it falls. Weights are on z-scored cues and judgments.", SMALL)]

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
            if grouping.rule:
                story.append(text(f"Number of groups: {grouping.rule}", SMALL))
        rows = [[text(h, CELL_BOLD) for h in ("Group", "Raters", "What sets it apart")]]
        for g in groups:
            rows.append([text(g.group, CELL), text(", ".join(g.raters), CELL),
                         text(g.sets_apart or "", CELL)])
        table = Table(rows, colWidths=[45, 170, CONTENT_WIDTH - 215], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        story.append(table)
        if panel.homogeneity is not None:
            statistic, p_value = panel.homogeneity
            story.append(text(f"Test that all raters share one set of weights: statistic "
                              f"{fmt(statistic)}, p = {wording.fmt_p(p_value)}.", BODY))
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
                             text(wording.icc_reading(est), CELL)])
            table = Table(rows, colWidths=[60, 50, 80, 200, CONTENT_WIDTH - 390], hAlign="LEFT")
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
            table = Table(rows, colWidths=[100, 120, 120], hAlign="LEFT")
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
        if not pairs:
            return [text("The pairwise view is not available for this study yet.", BODY)]
        pairs = sorted(pairs, key=lambda p: p.r if p.r is not None else 9)[:15]
        rows = [[text(h, CELL_BOLD) for h in ("Rater", "Rater", "Shared cases", "r", "G", "C",
                                             "Mainly from")]]
        for p in pairs:
            source = p.main_source
            rows.append([text(p.rater_a, CELL), text(p.rater_b, CELL), text(str(p.n), CELL),
                         text(fmt(p.r), CELL), text(fmt(p.g), CELL), text(fmt(p.c), CELL),
                         text({"weighting": "different weighting (G)", "inconsistency": "inconsistency (R_s)"}
                              .get(source, str(source or "")), CELL)])
        table = Table(rows, colWidths=[70, 70, 60, 40, 40, 40, CONTENT_WIDTH - 320], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        return [text("The pairs that agree least, with where their disagreement comes from: weighting the "
                     "cues differently (low G) or applying a policy inconsistently (low R_s).", BODY), table]

    # ------------------------------------------------------------------ files, excluded, quality
    def files_to_reread(self) -> list:
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
                shown = ", ".join(map(str, ids[:60])) + (f" and {len(ids) - 60} more" if len(ids) > 60 else "")
                story.append(text((f"Phase {phase}, {len(ids)} file(s): " if phase else f"{len(ids)} file(s): ")
                                  + shown + ".", BODY))
            story.append(text("The full list, with the reason for each file, is in the files table.", SMALL))
            return story
        chosen = frame[frame[flag_col].astype(bool)]
        if chosen.empty:
            return story + [text("No file needs another read.", BODY)]
        chosen = self._most_urgent_first(chosen)
        cols = [c for c in (("phase",) if self.view.named_phases else ()) + ("case", "n_readers", "raw_mean", "adjusted", "spread_sd", "disagreement",
                            "reasons") if c in chosen.columns]
        rows = [[text(c.replace("_", " "), CELL_BOLD) for c in cols]]
        story.append(text(f"{len(chosen)} file(s) were marked for another read: readers disagreed more than "
                          "usual, or the cut-off lies within the file's uncertainty, so its side of the cut-off "
                          "depends on who read it. Most urgent first: disagreement, then the files closest to "
                          "the cut-off. Raw mean: average judgment; adjusted: after removing each reader's "
                          "severity offset.", BODY))
        per_phase = 40 // max(1, chosen["phase"].nunique()) if "phase" in chosen.columns else 40
        shown = (chosen.groupby("phase", sort=False).head(per_phase) if "phase" in chosen.columns
                 else chosen.head(per_phase))
        for _, r in shown.iterrows():
            rows.append([text(fmt(_finite(r[c])) if isinstance(r[c], float) else str(r[c]), CELL) for c in cols])
        table = Table(rows, repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        story.append(table)
        if len(chosen) > len(shown):
            story.append(text(f"{len(chosen) - len(shown)} more in the files table of the workbook.", SMALL))
        return story

    def _most_urgent_first(self, chosen):
        """Files whose readers disagree come first, then files whose adjusted score sits closest
        to the cut-off for its uncertainty; phases keep their order."""
        cut = self.view.cut_off
        chosen = chosen.copy()
        reasons = chosen["reasons"].astype(str) if "reasons" in chosen.columns else ""
        chosen["_disagree"] = ~reasons.str.contains("high_disagreement") if "reasons" in chosen.columns else True
        if cut is not None and {"adjusted", "se"} <= set(chosen.columns):
            chosen["_closeness"] = (chosen["adjusted"] - cut).abs() / chosen["se"].where(chosen["se"] > 0)
        else:
            chosen["_closeness"] = 0.0
        phases = list(self.view.phase_order)
        if "phase" in chosen.columns:
            chosen["_phase"] = chosen["phase"].map({p: i for i, p in enumerate(phases)})
        else:
            chosen["_phase"] = 0
        chosen = chosen.sort_values(["_phase", "_disagree", "_closeness"], kind="mergesort")
        return chosen.drop(columns=["_disagree", "_closeness", "_phase"])

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
        table = Table(table_rows, repeatRows=1, hAlign="LEFT")
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
        out: list[tuple[str, str]] = []
        for w in self.view.warnings:
            out.append((f"reading the data ({w.where})" if w.where else "analysis", w.message))
        for e in self.view.raters:
            for msg in e.warnings:
                out.append((f"fitting {e.rater}" + (f", {e.phase}" if e.phase else ""), msg))
        for p in self.view.panels:
            for msg in p.warnings:
                out.append(("panel" + (f", {p.phase}" if p.phase else ""), msg))
        return out

    def data_quality(self) -> list:
        story = [CondPageBreak(150), text("Data quality", HEADING)]
        warnings = self.all_warnings()
        if not warnings:
            return story + [text("No warning was raised while reading or fitting the data.", BODY)]
        rows = [[text("Where", CELL_BOLD), text("Note", CELL_BOLD)]]
        rows += [[text(where, CELL), text(msg, CELL)] for where, msg in warnings]
        table = Table(rows, colWidths=[130, CONTENT_WIDTH - 130], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        return story + [table]

    def methods(self) -> list:
        rows = [[text(h, CELL_BOLD) for h in ("Analysis", "Method", "Published source")]]
        every_showing = any(e.repeats_mode == "all" for e in self.view.raters)
        rows += [[text(a, CELL), text(m, CELL), text(s, CELL)] for a, m, s in METHODS
                 if every_showing or a != "Every showing used"]
        table = Table(rows, colWidths=[100, 230, CONTENT_WIDTH - 330], repeatRows=1, hAlign="LEFT")
        table.setStyle(table_style())
        return [CondPageBreak(200), text("Methods and sources", HEADING), table,
                text("Sources are named by author and year so that they can be found; check the original "
                     "before quoting them.", SMALL)]

    def cautions(self) -> list:
        return [KeepTogether([text("Cautions", HEADING)] + [text(f"- {c}", BODY) for c in wording.CAUTIONS])]

