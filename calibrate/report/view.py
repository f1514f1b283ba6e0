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
        self.problem = problem  # comparison_view re-raises it under comparison.json's name
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


def _optional_int(value: Any) -> int | None:
    return None if value is None else int(value)


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
    importance_interval_note: str | None = None            # the shares are rough with few cases

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
                   importance=_numbers(_get(d, "importance", path), f"{path}.importance"), look_again=cases,
                   importance_interval_note=_optional_text(d.get("importance_interval_note")))


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
    gain: float | None = None              # model_vs_rater.gain: leave-one-out model validity - r_a
    gain_interval: tuple[float | None, float | None] = (None, None)   # its 95% interval (Zou 2007)

    @classmethod
    def read(cls, d: Mapping, path: str) -> LensView:
        numbers = {k: _num(d, k, path) for k in ("r_a", "g", "c", "r_e", "r_s", "model_validity",
                                                 "model_validity_cv")}
        versus = _block(d, "model_vs_rater", path) or {}
        verdict = _get(versus, "verdict", f"{path}.model_vs_rater")
        vpath = f"{path}.model_vs_rater"
        intervals = {k: (_num(d, f"{k}_ci_low", path), _num(d, f"{k}_ci_high", path))
                     for k in ("r_a", "g", "c", "r_e")}
        small = bool(_get(d, "small_sample", path))
        note = _get(d, "small_sample_note", path, default=None) if small else None
        return cls(**numbers, verdict=str(verdict), summary=str(_get(d, "summary", path)),
                   intervals=intervals, small_sample_note=None if note is None else str(note),
                   cases_per_term=_num(d, "cases_per_term", path),
                   gain=_num(versus, "gain", vpath, default=None),
                   gain_interval=(_num(versus, "ci_low", vpath, default=None),
                                  _num(versus, "ci_high", vpath, default=None)))


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
class ChangeIntoPhase:
    """``raters[].changes[METRIC][k]``: the rater's change into this phase from an earlier one."""

    from_phase: str
    to_phase: str
    value_from: float | None
    value_to: float | None
    delta: float | None
    ci_low: float | None
    ci_high: float | None
    verdict: str
    sentence: str       # the words results.json carries for this change

    @classmethod
    def read(cls, d: Mapping, path: str) -> ChangeIntoPhase:
        return cls(from_phase=str(_get(d, "from", path)), to_phase=str(_get(d, "to", path)),
                   value_from=_num(d, "value_from", path), value_to=_num(d, "value_to", path),
                   delta=_num(d, "delta", path), ci_low=_num(d, "ci_low", path), ci_high=_num(d, "ci_high", path),
                   verdict=str(_get(d, "verdict", path)), sentence=str(_get(d, "sentence", path)))


def _changes(d: Mapping, path: str) -> dict[str, tuple[ChangeIntoPhase, ...]] | None:
    """The entry's ``changes`` (absent in results from before they were recorded: None)."""
    block = d.get("changes")
    if block is None:
        return None
    return {str(m): tuple(ChangeIntoPhase.read(c, f"{path}.changes.{m}[{i}]") for i, c in enumerate(items))
            for m, items in block.items()}


@dataclass(frozen=True)
class FlagFigure:
    """The figure behind one flag, as the chair's first page states it (numbers only;
    :func:`calibrate.report.wording.flag_reason` puts the words on them).

    ``measure`` names the figure (one of :data:`FLAG_MEASURES`), ``about`` the cue or
    attribute it concerns, ``interval`` its 95% interval where the audit computed one,
    ``p_adjusted`` the Holm-adjusted p of a tested flag, ``reference`` a figure it is set
    against (the panel's share of middle judgments)."""

    measure: str
    value: float | None
    interval: tuple[float, float] | None = None
    p_adjusted: float | None = None
    about: str | None = None
    reference: float | None = None


FLAG_MEASURES = ("r_s", "retest_r", "offset", "drift_level", "drift_consistency", "cutoff", "added_r2",
                 "bend_test", "cases_per_term", "n_cases", "sd_ratio", "middle_share", "vif")


def _pair(value: Any, path: str) -> tuple[float, float] | None:
    """A [low, high] list as an interval, or None when absent or open."""
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        return None
    low, high = (_number(v, path) for v in value)
    return None if low is None or high is None else (low, high)


def _ends(block: Mapping, low: str, high: str, path: str) -> tuple[float, float] | None:
    a, b = _num(block, low, path, default=None), _num(block, high, path, default=None)
    return None if a is None or b is None else (a, b)


def flag_figures(d: Mapping, path: str) -> dict[str, FlagFigure]:
    """Per flag of a rater entry, the figure that set it. Best effort: a figure an older
    results.json lacks is None, and the sentence then names the flag without a number."""
    flags = set(map(str, _list(d, "flags", path)))
    policy = d.get("policy") or {}
    retest = d.get("retest") or {}
    severity = d.get("severity") or {}
    drift = d.get("drift") or {}
    cutoff = d.get("cutoff") or {}
    found: dict[str, FlagFigure] = {}
    pp, sp = f"{path}.policy", f"{path}.severity"
    if "inconsistent" in flags:
        found["inconsistent"] = FlagFigure("r_s", _num(policy, "r", pp, default=None),
                                           _pair(policy.get("r_ci"), f"{pp}.r_ci"))
    if "low_retest" in flags:
        n_pairs = retest.get("n_pairs")
        found["low_retest"] = FlagFigure("retest_r", _num(retest, "r", f"{path}.retest", default=None),
                                         _pair(retest.get("r_ci"), f"{path}.retest.r_ci"),
                                         about=None if n_pairs is None else str(int(n_pairs)))
    for flag in ("lenient", "severe"):
        if flag in flags:
            found[flag] = FlagFigure("offset", _num(severity, "offset", sp, default=None),
                                     _ends(severity, "ci_low", "ci_high", sp))
    for flag in ("narrow_range", "wide_range"):
        if flag in flags:
            found[flag] = FlagFigure("sd_ratio", _num(severity.get("range_use") or {}, "sd_ratio",
                                                      f"{sp}.range_use", default=None))
    if "central_tendency" in flags:
        middle = severity.get("central_tendency") or {}
        found["central_tendency"] = FlagFigure(
            "middle_share", _num(middle, "middle_share", f"{sp}.central_tendency", default=None),
            reference=_num(middle, "panel_middle_share", f"{sp}.central_tendency", default=None))
    if "drift" in flags:
        dp = f"{path}.drift"
        if "consistency" in (drift.get("reasons") or ()) and "leniency" not in (drift.get("reasons") or ()):
            found["drift"] = FlagFigure("drift_consistency", _num(drift, "r_s_change", dp, default=None),
                                        _ends(drift, "r_s_change_ci_low", "r_s_change_ci_high", dp),
                                        _num(drift, "consistency_p_adjusted", dp, default=None))
        else:
            found["drift"] = FlagFigure("drift_level", _num(drift, "slope_per_session", dp, default=None),
                                        _ends(drift, "ci_low", "ci_high", dp),
                                        _num(drift, "p_adjusted", dp, default=None))
    if "cutoff_rule" in flags:
        found["cutoff_rule"] = FlagFigure("cutoff", _num(cutoff, "threshold", f"{path}.cutoff", default=None),
                                          p_adjusted=_num(cutoff, "p_adjusted", f"{path}.cutoff", default=None),
                                          about=_optional_text(cutoff.get("cue")))
    if "excluded_attribute" in flags:
        tested = [(str(a), r) for a, r in (d.get("excluded") or {}).items() if isinstance(r, Mapping)
                  and r.get("flagged")]
        if tested:
            attr, res = min(tested, key=lambda t: (t[1].get("p_adjusted") is None, t[1].get("p_adjusted") or 0))
            where = f"{path}.excluded.{attr}"
            found["excluded_attribute"] = FlagFigure("added_r2", _num(res, "delta_r2", where, default=None),
                                                     p_adjusted=_num(res, "p_adjusted", where, default=None),
                                                     about=attr)
    if "curvature" in flags:
        reset = policy.get("reset") or {}
        found["curvature"] = FlagFigure("bend_test", _num(reset, "statistic", f"{pp}.reset", default=None),
                                        p_adjusted=_num(reset, "p_adjusted", f"{pp}.reset", default=None))
    if "few_cases" in flags:
        found["few_cases"] = FlagFigure("cases_per_term", _num(policy, "cases_per_weight", pp, default=None))
    if "too_few_cases" in flags:
        found["too_few_cases"] = FlagFigure("n_cases", _num(d, "n_cases", path, default=None))
    if "collinear_cues" in flags:
        vif = {str(k): v for k, v in (policy.get("gvif") or policy.get("vif") or {}).items()
               if isinstance(v, (int, float)) and math.isfinite(v)}
        if vif:
            cue = max(vif, key=vif.get)
            found["collinear_cues"] = FlagFigure("vif", float(vif[cue]), about=cue)
    return found


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
    changes: dict[str, tuple[ChangeIntoPhase, ...]] | None = None   # with 2+ phases, into this phase
    evidence: dict[str, FlagFigure] = field(default_factory=dict)   # flag -> the figure that set it
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
            changes=_changes(d, path),
            evidence=flag_figures(d, path),

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
    readers_per_case: float | None = None   # k of the k-reader forms: harmonic mean readers per file


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


def _category_rows(agreement: Mapping | None, path: str) -> tuple:
    """(label, estimate, ci_low, ci_high) of Fleiss' kappa and Gwet's AC1, where the scale has categories."""
    rows = []
    for i, c in enumerate(_list(agreement or {}, "category_detail", path)):
        where = f"{path}.category_detail[{i}]"
        estimate = _num(c, "estimate", where)
        if estimate is not None:
            rows.append((str(_get(c, "label", where)), estimate, _num(c, "ci_low", where), _num(c, "ci_high", where)))
    return tuple(rows)


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
    # the chance of changing side with one more reading that lists a file (optional: older
    # results folders lack it)
    files_change_level: float | None = None
    homogeneity_per_cue: dict[str, tuple[float | None, float | None]] = field(default_factory=dict)
    alpha_interval: tuple[float, float] | None = None
    categories: tuple[tuple[str, float, float | None, float | None], ...] = ()  # (label, est, lo, hi)
    pairs_threshold: str | None = None    # shared cases a pair needs, in words
    pairs_left_out: str | None = None     # why pairs are left out, in words

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
                          ci_method=_optional_text(detail.get("ci_method")),
                          readers_per_case=_num(detail, "readers_per_case", f"{path}.agreement.icc_detail",
                                                default=None))
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
            files_change_level=_num(d, "files_change_level", path, default=None),
            warnings=collect_warnings(d),
            alpha_interval=_ends((agreement or {}).get("alpha_detail") or {}, "ci_low", "ci_high",
                                 f"{path}.agreement.alpha_detail"),
            homogeneity_per_cue={} if hom is None else {
                str(cue): (_num(t, "statistic", f"{path}.homogeneity.per_cue.{cue}", default=None),
                           _num(t, "p_value", f"{path}.homogeneity.per_cue.{cue}", default=None))
                for cue, t in (hom.get("per_cue") or {}).items() if isinstance(t, Mapping)},
            chance_flags=(None if (chance := _block(d, "chance_flags", path)) is None
                          else ChanceFlagsView.read(chance, f"{path}.chance_flags")),
            categories=_category_rows(agreement, f"{path}.agreement"),
            pairs_threshold=None if rater_pairs is None else _optional_text(rater_pairs.get("threshold")),
            pairs_left_out=None if rater_pairs is None else _optional_text(rater_pairs.get("left_out")))


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
    # optional (results folders of earlier versions lack them): the note's stable kind and
    # what it is about; calibrate.notes groups the notes by kind
    kind: str | None = None
    rater: str | None = None
    case: str | None = None
    phase: str | None = None
    file: str | None = None
    row: int | None = None
    column: str | None = None

    def as_note(self) -> dict:
        return {"message": self.message, "kind": self.kind, "rater": self.rater,
                "case": self.case, "phase": self.phase, "file": self.file, "row": self.row,
                "column": self.column}


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
                warnings.append(StudyWarning(str(_get(w, "message", f"results.warnings[{i}]")), ", ".join(bits),
                                             *(_optional_text(w.get(k)) for k in ("kind", "rater", "case")),
                                             phase_of(w.get("phase")), _optional_text(w.get("file")),
                                             _optional_int(w.get("row")), _optional_text(w.get("column"))))
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


__all__ = ["AlignmentView", "CaseToRevisit", "ChangeIntoPhase", "CutoffView", "DriftView", "ExcludedView", "FlagFigure", "GroupView", "GroupingView",
           "IccView", "LensView", "PanelView", "PolicyView", "RaterView", "ResultsView", "ResultsViewError",
           "RetestView", "SeverityView", "collect_warnings"]
