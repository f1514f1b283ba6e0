"""A plain description of the data before any model: counts, coverage, connectedness."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..result_base import ResultMixin, jsonable
from .cues import CueDesign
from .ingest import JudgmentTable, PhaseData


@dataclass(frozen=True)
class Connectedness(ResultMixin):
    """Parts of the rater-case network: raters can only be compared through shared cases."""

    n_parts: int
    parts: tuple[tuple[str, ...], ...]  # raters in each part, largest first

    @property
    def connected(self) -> bool:
        return self.n_parts <= 1


def rater_case_parts(first: pd.DataFrame) -> Connectedness:
    """Connected components of the bipartite rater-case graph (scipy.sparse.csgraph)."""
    raters, r_idx = np.unique(first["rater"].to_numpy(dtype=str), return_inverse=True)
    cases, c_idx = np.unique(first["case"].to_numpy(dtype=str), return_inverse=True)
    n_r, n_c = len(raters), len(cases)
    if n_r == 0:
        return Connectedness(n_parts=0, parts=())
    graph = coo_matrix((np.ones(len(r_idx)), (r_idx, n_r + c_idx)), shape=(n_r + n_c, n_r + n_c))
    n, labels = connected_components(graph, directed=False)
    parts: dict[int, list[str]] = {}
    for i, rater in enumerate(raters):
        parts.setdefault(int(labels[i]), []).append(str(rater))
    ordered = sorted((tuple(sorted(p)) for p in parts.values()), key=lambda p: (-len(p), p))
    return Connectedness(n_parts=len(ordered), parts=tuple(ordered))


@dataclass(frozen=True)
class PhaseSummary(ResultMixin):
    phase: str
    n_raters: int
    n_cases: int
    n_judgments: int
    n_first: int
    n_repeat_pairs: int
    repeat_share: float            # repeat pairs / distinct cases judged, over the panel
    per_rater: tuple[dict, ...]    # rater, n_cases, n_repeats, n_judgments, n_presentations,
                                   # most_presentations, usable, cases_per_term
    min_cases_per_term: float
    connectedness: Connectedness
    raters_without_fit: tuple[str, ...]
    cue_correlations: dict = field(default_factory=dict)  # term -> term -> r, this phase's judged cases


@dataclass(frozen=True)
class DataSummary(ResultMixin):
    """What the data look like before any model.

    Two figures pool the phases on purpose, as a description of the study's cases (the
    ``pooled_over_phases`` field names them): ``missing_per_cue`` counts over the cases
    table, and the top-level ``cue_correlations`` are over the cases judged in any
    phase. Each phase's own cue correlations, on that phase's judged cases, are in
    ``phases[].cue_correlations``; the analyses only ever use the phase's own cases.
    """

    n_cues: int
    n_design_terms: int
    design_terms: tuple[str, ...]
    reference_levels: dict
    missing_per_cue: dict          # cue -> number of cases without a value
    cue_correlations: dict         # term -> term -> r (over judged cases)
    phases: tuple[PhaseSummary, ...]
    n_warnings: int
    pooled_over_phases: dict = field(default_factory=dict)  # figure -> what it pools

    def to_frame(self) -> pd.DataFrame:
        rows = []
        for ph in self.phases:
            for r in ph.per_rater:
                rows.append({"phase": ph.phase, **r})
        return pd.DataFrame(rows)


POOLED_NOTES = {
    "missing_per_cue": "counted over every case in the cases table, all phases together",
    "cue_correlations": "over the cases judged in any phase (each phase's own are in phases[].cue_correlations)",
}


def cue_correlations(design: CueDesign) -> dict:
    """term -> term -> r over the design's complete rows (None where undefined, as JSON)."""
    p = design.n_columns
    with np.errstate(invalid="ignore", divide="ignore"):
        m = design.matrix[design.complete_rows()]
        corr = np.corrcoef(m, rowvar=False).reshape(p, p) if len(m) > 2 else np.full((p, p), np.nan)
    return {a: {b: jsonable(round(float(corr[i, j]), 6)) for j, b in enumerate(design.columns)}
            for i, a in enumerate(design.columns)}


def summarize(table: JudgmentTable) -> DataSummary:
    design = table.design
    complete = pd.Series(design.complete_rows(), index=list(design.case_ids))
    p = design.n_columns
    phases = []
    for ph in table.phases:
        phases.append(_phase_summary(ph, complete, p, cue_correlations(table.phase_design(ph))))
    judged = set().union(*(set(ph.first["case"].astype(str)) for ph in table.phases)) if table.phases else set()
    corr_dict = cue_correlations(design.for_cases(judged))
    missing = {c.name: int(table.cases[c.name].isna().sum()) for c in table.spec.cues}
    return DataSummary(
        n_cues=len(design.cues),
        n_design_terms=p,
        design_terms=design.columns,
        reference_levels=dict(design.reference_levels),
        missing_per_cue=missing,
        cue_correlations=corr_dict,
        phases=tuple(phases),
        n_warnings=len(table.warnings),
        pooled_over_phases=dict(POOLED_NOTES),
    )


def _phase_summary(ph: PhaseData, complete: pd.Series, p: int, correlations: dict) -> PhaseSummary:
    first = ph.first
    n_cases = first.groupby("rater").size()
    n_rep = ph.repeats.groupby("rater").size()
    n_all = ph.ordered.groupby("rater").size()
    # presentations count the judgments dropped after the second of a case as well
    shown = ph.first["shown"] if "shown" in ph.first.columns else pd.Series(1, index=ph.first.index)
    shown_by_rater = shown.groupby(ph.first["rater"])
    n_shown, most_shown = shown_by_rater.sum(), shown_by_rater.max()
    usable = first.loc[first["case"].map(complete).to_numpy(dtype=bool)].groupby("rater").size()
    per_rater = []
    for rater in ph.raters:
        u = int(usable.get(rater, 0))
        per_rater.append({
            "rater": rater,
            "n_cases": int(n_cases.get(rater, 0)),
            "n_repeats": int(n_rep.get(rater, 0)),
            "n_judgments": int(n_all.get(rater, 0)),
            "n_presentations": int(n_shown.get(rater, 0)),
            "most_presentations": int(most_shown.get(rater, 0)),
            "usable_cases": u,
            "cases_per_term": u / p if p else float("nan"),
        })
    distinct = first["case"].nunique()
    return PhaseSummary(
        phase=ph.label,
        n_raters=len(ph.raters),
        n_cases=int(distinct),
        n_judgments=len(ph.ordered),
        n_first=len(first),
        n_repeat_pairs=len(ph.repeats),
        repeat_share=(len(ph.repeats) / len(first)) if len(first) else float("nan"),
        per_rater=tuple(per_rater),
        min_cases_per_term=min((r["cases_per_term"] for r in per_rater), default=float("nan")),
        connectedness=rater_case_parts(first),
        raters_without_fit=tuple(ph.too_few),
        cue_correlations=correlations,
    )


def _strong_pairs(correlations: dict) -> str:
    terms = list(correlations)
    strong = []
    for i, a in enumerate(terms):
        for b in terms[i + 1:]:
            r = correlations[a][b]
            if r is not None and abs(r) >= 0.5:
                strong.append(f"{a}~{b} r={r:.2f}")
    return ", ".join(strong) or "none"


def _per_term(value: float) -> str:
    """Cases per model term, or a dash in a study without cues (no terms to count)."""
    return f"{value:.1f}" if np.isfinite(value) else "-"


def format_summary(summary: DataSummary) -> str:
    """The data summary as text for the terminal."""
    lines = [f"Cues: {summary.n_cues} ({summary.n_design_terms} model terms: "
             f"{', '.join(summary.design_terms)})" if summary.n_cues else
             "Cues: none (agreement-only study: the analyses that model judgments on cues are left out)"]
    if summary.reference_levels:
        lines.append("Reference levels: " + ", ".join(f"{k} = {v}" for k, v in
                                                      summary.reference_levels.items()))
    miss = {k: v for k, v in summary.missing_per_cue.items() if v}
    lines.append("Missing cue values: " + (", ".join(f"{k} {v}" for k, v in miss.items()) or "none"))
    terms = list(summary.cue_correlations)
    if 1 < len(terms) <= 15:
        lines.append("Cue intercorrelations (r over the judged cases"
                     + (", all phases together; each phase's own are in results.json):"
                        if len(summary.phases) > 1 else "):"))
        width = max(len(t) for t in terms)
        for i, a in enumerate(terms):
            cells = []
            for b in terms[:i]:
                r = summary.cue_correlations[a][b]
                cells.append("   . " if r is None else f"{r:+.2f}")
            lines.append(f"  {a:<{width}} " + " ".join(cells))
    lines.append("Strongly related cues (|r| >= .50): " + _strong_pairs(summary.cue_correlations))
    for ph in summary.phases:
        lines.append("")
        lines.append(f"Phase {ph.phase}: {ph.n_raters} raters, {ph.n_cases} cases, "
                     f"{ph.n_judgments} judgments, {ph.n_repeat_pairs} repeat pairs "
                     f"({ph.repeat_share:.0%} of first judgments)")
        if len(summary.phases) > 1:
            lines.append("  Strongly related cues in this phase (|r| >= .50): "
                         + _strong_pairs(ph.cue_correlations))
        conn = ph.connectedness
        if conn.connected:
            lines.append("  Rater-case network: connected (every rater can be compared with every other).")
        else:
            lines.append(f"  Rater-case network: {conn.n_parts} separate parts; raters in different parts "
                         "cannot be compared: " + " | ".join(", ".join(p) for p in conn.parts))
        lines.append(f"  {'rater':<20} {'cases':>6} {'repeats':>8} {'all':>6} {'cases/term':>11}")
        for r in ph.per_rater:
            lines.append(f"  {r['rater'][:20]:<20} {r['n_cases']:>6} {r['n_repeats']:>8} "
                         f"{r['n_judgments']:>6} {_per_term(r['cases_per_term']):>11}")
        if ph.raters_without_fit:
            lines.append("  Too few usable cases for a policy fit: " + ", ".join(ph.raters_without_fit))
    return "\n".join(lines)
