"""A typed, read-only view of results.json for the reports.

The reports are built from ``AuditResult.to_dict()`` (the same dictionary as
results.json), so a report can be rebuilt from a results folder alone. This module
turns that dictionary into small frozen dataclasses once, up front, so that a
misspelt or renamed key fails loudly (:class:`ResultsViewError`, naming the key path)
instead of turning a section silently into "not available".

Rules:

- A key the audit always writes is *required*: if it is missing the view raises.
- A value the audit may record as null (a rater without repeats has no retest, a study
  without a criterion has no lens) is ``None`` in the view only when the audit wrote
  null. Where the audit also records why, under the entry's optional ``unavailable``
  mapping (``{"retest": "no case was shown twice"}``), the view keeps the reason so the
  section can say "not available: <reason>".
- Numbers are finite floats or ``None`` (NaN and infinities are written as null).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from ..errors import CalibrateError

_MISSING = object()

# The results key of the one phase of a study that declares none (calibrate.data.ingest
# writes it; the report layer reads results.json only, so the word is repeated here).
UNNAMED_PHASE = "all"


class ResultsViewError(CalibrateError, KeyError):
    """results.json lacks a key the reports need, or holds a value of the wrong kind."""

    def __init__(self, path: str, problem: str = "is missing"):
        self.path = path
        super().__init__(f"results.json: {path} {problem}; the reports cannot be built from it. "
                         "Re-run the audit with this version of calibrate.")

    def __str__(self) -> str:  # KeyError would quote the message
        return self.args[0]


# ---------------------------------------------------------------- readers
def _get(mapping: Any, key: str, path: str, default: Any = _MISSING) -> Any:
    """``mapping[key]``; raises naming ``path.key`` when absent (unless a default is given)."""
    if not isinstance(mapping, Mapping):
        raise ResultsViewError(path, "is not an object")
    if key in mapping:
        return mapping[key]
    if default is _MISSING:
        raise ResultsViewError(f"{path}.{key}")
    return default


def _number(value: Any, path: str) -> float | None:
    """A finite float, or None for null/NaN; a non-number is an error."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ResultsViewError(path, f"should be a number, not {type(value).__name__}")
    value = float(value)
    return value if math.isfinite(value) else None


def _num(mapping: Any, key: str, path: str, default: Any = _MISSING) -> float | None:
    value = _get(mapping, key, path, default)
    return None if value is _MISSING else _number(value, f"{path}.{key}")


def _block(mapping: Any, key: str, path: str) -> Mapping | None:
    """A required key whose value is an object or null."""
    value = _get(mapping, key, path)
    if value is not None and not isinstance(value, Mapping):
        raise ResultsViewError(f"{path}.{key}", "should be an object or null")
    return value


def _list(mapping: Any, key: str, path: str, default: Any = _MISSING) -> list:
    value = _get(mapping, key, path, default)
    if value is None or value is _MISSING:
        return []
    if not isinstance(value, (list, tuple)):
        raise ResultsViewError(f"{path}.{key}", "should be a list")
    return list(value)


def _numbers(mapping: Any, path: str) -> dict[str, float | None]:
    if not isinstance(mapping, Mapping):
        raise ResultsViewError(path, "should be an object")
    return {str(k): _number(v, f"{path}.{k}") for k, v in mapping.items()}


def _count(mapping: Any, key: str, path: str) -> int | None:
    """A whole number the audit records from this version on (None in older results)."""
    value = _num(mapping, key, path, default=None)
    return None if value is None else int(value)


def _optional_text(value: Any) -> str | None:
    return None if value is None else str(value)


def collect_warnings(node: Any) -> tuple[str, ...]:
    """Every plain-English warning string found anywhere in an entry (de-duplicated)."""
    found: list[str] = []

    def walk(x):
        if isinstance(x, Mapping):
            for k, v in x.items():
                if k == "warnings" and isinstance(v, list):
                    for w in v:
                        msg = w.get("message") if isinstance(w, Mapping) else w
                        if msg and str(msg) not in found:
                            found.append(str(msg))
                else:
                    walk(v)
        elif isinstance(x, list):
            for v in x:
                walk(v)

    walk(node)
    return tuple(found)


# ---------------------------------------------------------------- rater entries
@dataclass(frozen=True)
class CaseToRevisit:
    case: str
    judgment: float | None
    predicted: float | None


@dataclass(frozen=True)
class PolicyView:
    r: float | None
    weights: dict[str, float | None]                       # scale points per unit, by design term
    weight_intervals: dict[str, tuple[float, float] | None]  # 95% interval of each weight
    std_weights: dict[str, float | None]
    importance: dict[str, float | None]                    # shares of R², by cue
    look_again: tuple[CaseToRevisit, ...]

    @classmethod
    def read(cls, d: Mapping, path: str) -> PolicyView:
        cases = tuple(CaseToRevisit(str(_get(c, "case", f"{path}.look_again[{i}]")),
                                    _num(c, "judgment", f"{path}.look_again[{i}]"),
                                    _num(c, "predicted", f"{path}.look_again[{i}]"))
                      for i, c in enumerate(_list(d, "look_again", path, default=None)))
        weights = _numbers(_get(d, "weights", path), f"{path}.weights")
        intervals = {}
        for term in weights:
            pair = _get(_get(d, "ci", path), term, f"{path}.ci")
            lo, hi = (None, None) if pair is None else (_number(v, f"{path}.ci.{term}") for v in pair)
            intervals[term] = None if lo is None or hi is None else (lo, hi)
        return cls(r=_num(d, "r", path), weights=weights, weight_intervals=intervals,
                   std_weights=_numbers(_get(d, "std_weights", path), f"{path}.std_weights"),
                   importance=_numbers(_get(d, "importance", path), f"{path}.importance"), look_again=cases)


@dataclass(frozen=True)
class RetestView:
    n_pairs: int
    r: float | None
    icc_a1: float | None
    mean_abs_diff: float | None
    flag_detectable_below: float | None
    # which figure r is (results written before the key existed: the first against its repeat)
    measure: str = "first_repeat_r"
    presentations: int = 2           # showings per case behind r
    presentation_pairs: int = 1
    icc_c1: float | None = None

    @classmethod
    def read(cls, d: Mapping, path: str) -> RetestView:
        return cls(n_pairs=int(_get(d, "n_pairs", path)), r=_num(d, "r", path), icc_a1=_num(d, "icc_a1", path),
                   mean_abs_diff=_num(d, "mean_abs_diff", path),
                   flag_detectable_below=_num(d, "flag_detectable_below", path),
                   measure=str(_get(d, "measure", path, "first_repeat_r")),
                   presentations=_count(d, "presentations", path) or 2,
                   presentation_pairs=_count(d, "presentation_pairs", path) or 1,
                   icc_c1=_num(d, "icc_c1", path, default=None))


@dataclass(frozen=True)
class ChanceFlagsView:
    """``panels[].chance_flags``: the tested flags chance alone would give, and those shown."""

    n_tests: int
    panelwise_rate: float | None
    expected_chance_flags: float | None
    flags_shown: int

    @classmethod
    def read(cls, d: Mapping, path: str) -> ChanceFlagsView:
        return cls(n_tests=int(_get(d, "n_tests", path)), panelwise_rate=_num(d, "panelwise_rate", path),
                   expected_chance_flags=_num(d, "expected_chance_flags", path),
                   flags_shown=int(_get(d, "flags_shown", path)))


@dataclass(frozen=True)
class LensView:
    r_a: float | None
    g: float | None
    c: float | None
    r_e: float | None
    r_s: float | None
    model_validity: float | None
    model_validity_cv: float | None
    verdict: str            # model_vs_rater.verdict, decided once in the lens model
    summary: str            # the sentence results.json carries for that verdict
    intervals: dict = field(default_factory=dict)  # "r_a"/"g"/"c"/"r_e" -> (low, high), None ends when absent
    small_sample_note: str | None = None  # the caution results.json carries when under 10 cases per term
    cases_per_term: float | None = None

    @classmethod
    def read(cls, d: Mapping, path: str) -> LensView:
        numbers = {k: _num(d, k, path) for k in ("r_a", "g", "c", "r_e", "r_s", "model_validity",
                                                 "model_validity_cv")}
        verdict = _get(_block(d, "model_vs_rater", path) or {}, "verdict", f"{path}.model_vs_rater")
        intervals = {k: (_num(d, f"{k}_ci_low", path), _num(d, f"{k}_ci_high", path))
                     for k in ("r_a", "g", "c", "r_e")}
        small = bool(_get(d, "small_sample", path))
        note = _get(d, "small_sample_note", path, default=None) if small else None
        return cls(**numbers, verdict=str(verdict), summary=str(_get(d, "summary", path)),
                   intervals=intervals, small_sample_note=None if note is None else str(note),
                   cases_per_term=_num(d, "cases_per_term", path))


@dataclass(frozen=True)
class SeverityView:
    offset: float | None
    se: float | None
    flags: tuple[str, ...]
    sd_ratio: float | None
    middle_share: float | None
    panel_middle_share: float | None

    @classmethod
    def read(cls, d: Mapping, path: str) -> SeverityView:
        range_use = _get(d, "range_use", path)
        middle = _get(d, "central_tendency", path)
        return cls(offset=_num(d, "offset", path), se=_num(d, "se", path),
                   flags=tuple(map(str, _list(d, "flags", path))),
                   sd_ratio=_num(range_use, "sd_ratio", f"{path}.range_use"),
                   middle_share=_num(middle, "middle_share", f"{path}.central_tendency"),
                   panel_middle_share=_num(middle, "panel_middle_share", f"{path}.central_tendency"))


@dataclass(frozen=True)
class AlignmentView:
    misallocation: float | None
    most_over: str | None
    most_under: str | None
    g_rubric: float | None
    shares: dict[str, float | None]          # the rater's weight shares on the rubric's basis

    @classmethod
    def read(cls, d: Mapping, path: str) -> AlignmentView:
        return cls(misallocation=_num(d, "misallocation", path),
                   shares=_numbers(_get(d, "shares", path), f"{path}.shares"),
                   most_over=_optional_text(_get(d, "most_over", path)),
                   most_under=_optional_text(_get(d, "most_under", path)), g_rubric=_num(d, "g_rubric", path))


@dataclass(frozen=True)
class DriftView:
    flagged: bool
    slope: float | None

    @classmethod
    def read(cls, d: Mapping, path: str) -> DriftView:
        return cls(flagged=bool(_get(d, "flagged", path)), slope=_num(d, "slope", path))


@dataclass(frozen=True)
class CutoffView:
    flagged: bool
    cue: str | None
    threshold: float | None

    @classmethod
    def read(cls, d: Mapping, path: str) -> CutoffView:
        return cls(flagged=bool(_get(d, "flagged", path)), cue=_optional_text(_get(d, "cue", path)),
                   threshold=_num(d, "threshold", path))


@dataclass(frozen=True)
class ExcludedView:
    delta_r2: float | None
    p_value: float | None
    p_adjusted: float | None
    flagged: bool


@dataclass(frozen=True)
class RaterView:
    """One rater in one phase, as the reports read it."""

    rater: str
    phase: str | None
    n_cases: int
    n_repeats: int
    n_presentations: int | None      # every presentation, the dropped third and later included
    most_presentations: int | None   # the most times one case was shown (None: not recorded)
    policy: PolicyView | None
    retest: RetestView | None
    agreement_r: float | None
    lens: LensView | None
    severity: SeverityView | None
    alignment: AlignmentView | None
    drift: DriftView | None
    cutoff: CutoffView | None
    ceiling_verdict: str | None
    group: str | None
    flags: tuple[str, ...]
    excluded: dict[str, ExcludedView]
    warnings: tuple[str, ...]
    unavailable: dict[str, str]
    # [judgment] repeats as used ("first-two" in results written before the key existed);
    # with the policy fitted to case means, the R_s ceiling the audit computed (Spearman-Brown)
    repeats_mode: str = "first-two"
    policy_on_means: bool = False
    ceiling: float | None = None

    def reason(self, section: str) -> str | None:
        """Why the audit left ``section`` empty, when it recorded a reason."""
        return self.unavailable.get(section)

    @classmethod
    def read(cls, d: Mapping, path: str) -> RaterView:
        def part(key, reader):
            block = _block(d, key, path)
            return None if block is None else reader(block, f"{path}.{key}")

        agreement = _block(d, "agreement", path)
        consistency = _block(d, "consistency", path)
        excluded = {}
        for attr, res in (_get(d, "excluded", path) or {}).items():
            where = f"{path}.excluded.{attr}"
            excluded[str(attr)] = ExcludedView(_num(res, "delta_r2", where), _num(res, "p_value", where),
                                               _num(res, "p_adjusted", where), bool(_get(res, "flagged", where)))
        unavailable = d.get("unavailable") or {}
        return cls(
            rater=str(_get(d, "rater", path)), phase=_optional_text(_get(d, "phase", path)),
            n_cases=int(_get(d, "n_cases", path)), n_repeats=int(_get(d, "n_repeats", path)),
            n_presentations=_count(d, "n_presentations", path),
            most_presentations=_count(d, "most_presentations", path),
            policy=part("policy", PolicyView.read), retest=part("retest", RetestView.read),
            agreement_r=None if agreement is None else _num(agreement, "r", f"{path}.agreement"),
            lens=part("lens", LensView.read), severity=part("severity", SeverityView.read),
            alignment=part("alignment", AlignmentView.read), drift=part("drift", DriftView.read),
            cutoff=part("cutoff", CutoffView.read),
            ceiling_verdict=None if consistency is None else _optional_text(
                _get(consistency, "verdict", f"{path}.consistency")),
            group=_optional_text(_get(d, "group", path)),
            flags=tuple(map(str, _list(d, "flags", path))), excluded=excluded,
            warnings=collect_warnings(d), unavailable={str(k): str(v) for k, v in unavailable.items()},
            repeats_mode=str(_get(d, "repeats_mode", path, "first-two")),
            policy_on_means=bool(consistency is not None and consistency.get("policy_on_means", False)),
            ceiling=None if consistency is None else _num(consistency, "ceiling", f"{path}.consistency",
                                                          default=None))


# ---------------------------------------------------------------- panels
@dataclass(frozen=True)
class IccView:
    estimates: dict[str, float | None]             # i1, a1, c1, ik, ak, ck
    intervals: dict[str, tuple[float, float]]       # form -> (low, high), where computed
    method: str | None
    ci_method: str | None


@dataclass(frozen=True)
class GroupView:
    group: str
    raters: tuple[str, ...]
    sets_apart: str | None
    importance: dict[str, float | None]


@dataclass(frozen=True)
class MergeView:
    merged_a: tuple[str, ...]
    merged_b: tuple[str, ...]
    r2: float | None
    step: float


@dataclass(frozen=True)
class GroupingView:
    r2_individual: float | None
    merges: tuple[MergeView, ...]
    rule: str | None
    grouped_raters: tuple[str, ...]   # raters given a group, in the grouping's order


@dataclass(frozen=True)
class DStudyRow:
    raters: int
    g_rel: float | None
    phi: float | None


@dataclass(frozen=True)
class PairView:
    rater_a: str
    rater_b: str
    n: int | None
    r: float | None
    g: float | None
    c: float | None
    main_source: str | None


@dataclass(frozen=True)
class ProxyView:
    attribute: str
    cue: str
    association: float | None
    strong: bool


@dataclass(frozen=True)
class PanelView:
    """One phase's panel-level results."""

    phase: str | None
    icc: IccView | None
    alpha: float | None
    variance_components: dict[str, float | None] | None
    variance_estimator: str | None
    d_study: tuple[DStudyRow, ...]
    readers_needed: dict[str, Any]
    flips: tuple[tuple[int, float], ...]        # (readers, flip rate)
    groups: tuple[GroupView, ...]
    grouping: GroupingView | None
    homogeneity: tuple[float | None, float | None] | None   # (statistic, p)
    pairs: tuple[PairView, ...]
    proxies: tuple[ProxyView, ...]
    files_needing_another_read: tuple[str, ...]
    warnings: tuple[str, ...]
    chance_flags: ChanceFlagsView | None = None

    @classmethod
    def read(cls, d: Mapping, path: str) -> PanelView:
        icc_block = _block(d, "icc", path)
        agreement = _block(d, "agreement", path)
        icc = None
        if icc_block is not None:
            detail = (agreement or {}).get("icc_detail") or {}
            intervals = {}
            for i, f in enumerate(detail.get("forms") or []):
                where = f"{path}.agreement.icc_detail.forms[{i}]"
                lo, hi = _num(f, "ci_low", where), _num(f, "ci_high", where)
                if lo is not None and hi is not None:
                    intervals[str(_get(f, "form", where))] = (lo, hi)
            forms = ("i1", "a1", "c1", "ik", "ak", "ck")
            icc = IccView(estimates={k: _num(icc_block, k, f"{path}.icc") for k in forms},
                          intervals=intervals, method=_optional_text(icc_block.get("method") or detail.get("method")),
                          ci_method=_optional_text(detail.get("ci_method")))
        vc = _block(d, "variance_components", path)
        grouping_block = _block(d, "grouping", path)
        grouping = None
        if grouping_block is not None:
            gp = f"{path}.grouping"
            merges = tuple(MergeView(tuple(map(str, _list(m, "merged_a", f"{gp}.merges[{i}]"))),
                                     tuple(map(str, _list(m, "merged_b", f"{gp}.merges[{i}]"))),
                                     _num(m, "r2", f"{gp}.merges[{i}]"), float(m.get("step", 0)))
                           for i, m in enumerate(_list(grouping_block, "merges", gp)))
            grouping = GroupingView(r2_individual=_num(grouping_block, "r2_individual", gp), merges=merges,
                                    rule=_optional_text(grouping_block.get("rule")),
                                    grouped_raters=tuple(str(_get(r, "rater", f"{gp}.raters[{i}]"))
                                                         for i, r in enumerate(_list(grouping_block, "raters", gp))
                                                         if r.get("group")))
        hom = _block(d, "homogeneity", path)
        rater_pairs = _block(d, "rater_pairs", path)
        pairs = []
        for i, p in enumerate(_list(rater_pairs, "pairs", f"{path}.rater_pairs") if rater_pairs is not None else []):
            where = f"{path}.rater_pairs.pairs[{i}]"
            n = _get(p, "n", where)
            pairs.append(PairView(str(_get(p, "rater_a", where)), str(_get(p, "rater_b", where)),
                                  None if n is None else int(n), _num(p, "r", where), _num(p, "g", where),
                                  _num(p, "c", where), _optional_text(_get(p, "main_source", where))))
        proxies = tuple(ProxyView(str(_get(p, "attribute", f"{path}.excluded_proxies[{i}]")),
                                  str(_get(p, "cue", f"{path}.excluded_proxies[{i}]")),
                                  _num(p, "association", f"{path}.excluded_proxies[{i}]"), bool(p.get("strong")))
                        for i, p in enumerate(_list(d, "excluded_proxies", path)))
        return cls(
            phase=_optional_text(_get(d, "phase", path)), icc=icc, alpha=_num(d, "alpha", path),
            variance_components=None if vc is None else {
                k: _num(vc, k, f"{path}.variance_components") for k in ("case", "rater", "residual")},
            variance_estimator=(vc.get("estimator") if vc is not None and isinstance(vc.get("estimator"), str)
                                else None),
            d_study=tuple(DStudyRow(int(_get(r, "raters", f"{path}.d_study[{i}]")),
                                    _num(r, "g_rel", f"{path}.d_study[{i}]"), _num(r, "phi", f"{path}.d_study[{i}]"))
                          for i, r in enumerate(_list(d, "d_study", path))),
            readers_needed=dict(_block(d, "readers_needed", path) or {}),
            flips=tuple((int(_get(f, "raters", f"{path}.flips[{i}]")), rate)
                        for i, f in enumerate(_list(d, "flips", path))
                        if (rate := _num(f, "flip_rate", f"{path}.flips[{i}]")) is not None),
            groups=tuple(GroupView(str(_get(g, "group", f"{path}.groups[{i}]")),
                                   tuple(map(str, _list(g, "raters", f"{path}.groups[{i}]"))),
                                   _optional_text(g.get("sets_apart")),
                                   _numbers(_get(g, "importance", f"{path}.groups[{i}]"),
                                            f"{path}.groups[{i}].importance"))
                         for i, g in enumerate(_list(d, "groups", path))),
            grouping=grouping,
            homogeneity=None if hom is None else (_num(hom, "statistic", f"{path}.homogeneity"),
                                                  _num(hom, "p_value", f"{path}.homogeneity")),
            pairs=tuple(pairs), proxies=proxies,
            files_needing_another_read=tuple(map(str, _list(d, "files_needing_another_read", path))),
            warnings=collect_warnings(d),
            chance_flags=(None if (chance := _block(d, "chance_flags", path)) is None
                          else ChanceFlagsView.read(chance, f"{path}.chance_flags")))


# ---------------------------------------------------------------- the whole result
@dataclass(frozen=True)
class PhaseCounts:
    phase: str | None
    n_raters: int
    n_cases: int
    n_judgments: int
    n_repeat_pairs: int


@dataclass(frozen=True)
class StudyWarning:
    message: str
    where: str          # "file f, row r, column c" (the parts recorded), or ""


@dataclass(frozen=True)
class ResultsView:
    """results.json as the reports read it."""

    study_name: str
    criterion_only_for_selected: bool
    scale: tuple[float, float] | None          # judgment scale (min, max), when recorded
    cut_off: float | None
    phases: tuple[str | None, ...]             # (None,) for a study without phases
    phase_order: tuple[str, ...]               # the phases as recorded
    phase_counts: tuple[PhaseCounts, ...]
    cues: tuple[str, ...]
    design_terms: tuple[str, ...]
    rubric_shares: dict[str, float]           # the rubric's share per cue ({} without a rubric)
    warnings: tuple[StudyWarning, ...]
    raters: tuple[RaterView, ...]
    panels: tuple[PanelView, ...]

    @classmethod
    def read(cls, results: Mapping) -> ResultsView:
        study = _get(results, "study", "results")
        judgment = results.get("judgment") or {}
        lo = _num(judgment, "min", "results.judgment", default=None)
        hi = _num(judgment, "max", "results.judgment", default=None)
        recorded = tuple(map(str, _list(results, "phases", "results")))
        # A study without phases records its one phase as UNNAMED_PHASE; the view reads
        # it as None so that no report prints a phase name for it.
        unnamed = recorded == (UNNAMED_PHASE,)

        def phase_of(value: Any) -> str | None:
            name = _optional_text(value)
            return None if unnamed and name == UNNAMED_PHASE else name

        summary = _get(results, "data_summary", "results")
        counts = tuple(PhaseCounts(phase_of(_get(s, "phase", f"results.data_summary.phases[{i}]")),
                                   *(int(_get(s, k, f"results.data_summary.phases[{i}]"))
                                     for k in ("n_raters", "n_cases", "n_judgments", "n_repeat_pairs")))
                       for i, s in enumerate(_list(summary, "phases", "results.data_summary", default=None)))
        warnings = []
        for i, w in enumerate(_list(results, "warnings", "results")):
            if isinstance(w, Mapping):
                bits = [f"{k} {w[k]}" for k in ("file", "row", "column") if w.get(k) is not None]
                warnings.append(StudyWarning(str(_get(w, "message", f"results.warnings[{i}]")), ", ".join(bits)))
            else:
                warnings.append(StudyWarning(str(w), ""))
        terms = _list(summary, "design_terms", "results.data_summary", default=None)
        raters = tuple(RaterView.read(e, f"results.raters[{i}]")
                       for i, e in enumerate(_list(results, "raters", "results")))
        raters = tuple(replace(r, phase=phase_of(r.phase)) for r in raters)
        if not terms:
            terms = next((list(r.policy.std_weights) for r in raters if r.policy and r.policy.std_weights), [])
        cues = list(_get(summary, "missing_per_cue", "results.data_summary", default=None) or [])
        if not cues:
            cues = next((list(r.policy.importance) for r in raters if r.policy and r.policy.importance), [])
        rubric = results.get("rubric")
        rubric_shares = {}
        if rubric is not None:
            shares = _numbers(_get(rubric, "shares", "results.rubric"), "results.rubric.shares")
            rubric_shares = {c: v for c, v in shares.items() if v is not None}
        return cls(
            study_name=str(_get(study, "name", "results.study")),
            criterion_only_for_selected=bool(study.get("criterion_only_for_selected", False)),
            scale=None if lo is None or hi is None else (lo, hi),
            cut_off=_num(judgment, "cut_off", "results.judgment", default=None),
            phases=(None,) if unnamed or not recorded else recorded, phase_order=recorded, phase_counts=counts,
            cues=tuple(map(str, cues)), design_terms=tuple(map(str, terms)), rubric_shares=rubric_shares,
            warnings=tuple(warnings), raters=raters,
            panels=tuple(replace(p, phase=phase_of(p.phase)) for p in (
                PanelView.read(p, f"results.panels[{i}]") for i, p in enumerate(_list(results, "panels", "results")))))

    # ------------------------------------------------------------ look-ups
    @property
    def named_phases(self) -> bool:
        """Whether the study declares phases (otherwise no report prints a phase)."""
        return self.phases != (None,)

    def rater_ids(self) -> list[str]:
        return list(dict.fromkeys(r.rater for r in self.raters))

    def entries_of(self, rater: str) -> list[RaterView]:
        """This rater's entries, in phase order."""
        order = {p: i for i, p in enumerate(self.phases)}
        found = [r for r in self.raters if r.rater == rater]
        return sorted(found, key=lambda r: order.get(r.phase, len(order)))

    def entries_in(self, phase) -> list[RaterView]:
        return [r for r in self.raters if r.phase == phase]

    def panel(self, phase) -> PanelView | None:
        return next((p for p in self.panels if p.phase == phase), None)


__all__ = ["AlignmentView", "CaseToRevisit", "CutoffView", "DriftView", "ExcludedView", "GroupView", "GroupingView",
           "IccView", "LensView", "PanelView", "PolicyView", "RaterView", "ResultsView", "ResultsViewError",
           "RetestView", "SeverityView", "collect_warnings"]
