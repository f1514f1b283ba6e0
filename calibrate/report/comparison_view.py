"""A typed, read-only view of comparison.json for the training report.

Like :mod:`calibrate.report.view` for results.json: the keys every comparison carries
(``schema``, ``phases``, ``raters[].metrics``, ``panel.metrics``, ``panel.training_effect``,
``summary``, ``cautions``) are required and a missing one raises
:class:`ComparisonViewError` naming its path. The sections added later (shares per cue,
panel agreement, convergence, groups, cue shift, follow-up effect, detectable change) are
optional: absent, the view holds ``None`` and :data:`ABSENT_REASON` says why, so the
report leaves the section out with one line instead of failing.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ..errors import CalibrateError
from . import view as _results
from .view import ResultsViewError

#: The one line a report prints for a section whose key comparison.json does not hold.
ABSENT_REASON = "this comparison.json does not hold these figures (made by a version of compare without them)"


class ComparisonViewError(CalibrateError, KeyError):
    """comparison.json lacks a key the training report needs, or holds a wrong kind of value."""

    def __init__(self, path: str, problem: str = "is missing"):
        self.path = path
        super().__init__(f"comparison.json: {path} {problem}; the training report cannot be built "
                         "from it. Re-run calibrate compare with this version of calibrate.")

    def __str__(self) -> str:  # KeyError would quote the message
        return self.args[0]


def _for_comparison(reader):
    """One of results.json's readers, its errors re-raised under comparison.json's name."""
    @functools.wraps(reader)
    def read(*args, **kwargs):
        try:
            return reader(*args, **kwargs)
        except ResultsViewError as err:
            raise ComparisonViewError(err.path, err.problem) from None
    return read


_get = _for_comparison(_results._get)
_number = _for_comparison(_results._number)
_num = _for_comparison(_results._num)
_numbers = _for_comparison(_results._numbers)


# ---------------------------------------------------------------- pieces
@dataclass(frozen=True)
class ChangeView:
    """One change ``{from, to, delta, ci_low, ci_high, p_value, method}`` and, where the
    comparison records them, what the design could detect and whether it is comparable."""

    from_phase: str
    to_phase: str
    delta: float | None
    ci_low: float | None
    ci_high: float | None
    p_value: float | None
    method: str | None
    detectable: float | None = None
    comparable: bool | None = None     # None: comparison.json does not say
    note: str | None = None
    verdict: str | None = None         # the word compare wrote (None: an older comparison.json)

    @classmethod
    def read(cls, d: Mapping, path: str, *, estimate_key: str = "delta") -> ChangeView:
        comparable = d.get("comparable")
        note = d.get("note")
        return cls(from_phase=str(_get(d, "from", path)), to_phase=str(_get(d, "to", path)),
                   delta=_num(d, estimate_key, path), ci_low=_num(d, "ci_low", path),
                   ci_high=_num(d, "ci_high", path), p_value=_num(d, "p_value", path, default=None),
                   method=None if d.get("method") is None else str(d["method"]),
                   detectable=_num(d, "detectable", path, default=None),
                   comparable=None if comparable is None else bool(comparable),
                   note=None if note is None else str(note),
                   verdict=None if d.get("verdict") is None else str(d["verdict"]))


@dataclass(frozen=True)
class SeriesView:
    """``{values{PHASE: v}, changes[...]}``: a metric (or a share, or a panel figure) per phase."""

    values: dict[str, float | None]
    changes: tuple[ChangeView, ...]

    @classmethod
    def read(cls, d: Mapping, path: str) -> SeriesView:
        changes = _get(d, "changes", path, default=[]) or []
        return cls(values=_numbers(_get(d, "values", path), f"{path}.values"),
                   changes=tuple(ChangeView.read(c, f"{path}.changes[{i}]") for i, c in enumerate(changes)))

    def change(self, from_phase: str, to_phase: str) -> ChangeView | None:
        return next((c for c in self.changes if c.from_phase == from_phase and c.to_phase == to_phase), None)


@dataclass(frozen=True)
class RaterChangeView:
    rater: str
    trained: bool
    metrics: dict[str, SeriesView]
    shares: dict[str, SeriesView] | None     # None: not in this comparison.json

    @classmethod
    def read(cls, d: Mapping, path: str) -> RaterChangeView:
        metrics = _get(d, "metrics", path)
        shares = d.get("shares")
        return cls(rater=str(_get(d, "rater", path)), trained=bool(_get(d, "trained", path)),
                   metrics={str(k): SeriesView.read(v, f"{path}.metrics.{k}") for k, v in metrics.items()},
                   shares=None if shares is None else {
                       str(k): SeriesView.read(v, f"{path}.shares.{k}") for k, v in shares.items()})


@dataclass(frozen=True)
class EffectView:
    """The difference in differences of one metric (``panel.training_effect[NAME]``)."""

    change: ChangeView                     # delta holds the estimate
    ancova: ChangeView | None              # the ANCOVA estimate, when recorded
    arms_differ_at_baseline: bool
    baseline_difference: float | None      # trained minus controls at the first phase

    @classmethod
    def read(cls, d: Mapping, path: str) -> EffectView:
        ancova = d.get("ancova")
        return cls(change=ChangeView.read(d, path, estimate_key="estimate"),
                   ancova=None if not ancova else ChangeView.read(
                       {"from": d.get("from"), "to": d.get("to"), **ancova}, f"{path}.ancova",
                       estimate_key="estimate"),
                   arms_differ_at_baseline=bool(d.get("arms_differ_at_baseline", False)),
                   baseline_difference=_num(d, "baseline_difference", path, default=None))


@dataclass(frozen=True)
class CueShiftView:
    rubric_share: float | None
    trained: dict[str, float | None]
    control: dict[str, float | None] | None
    toward_rubric: bool | None
    toward_tested: bool = True  # False: the paired test could not run (older files: assumed run)


@dataclass(frozen=True)
class MergeStep:
    from_phase: str
    to_phase: str
    merged: bool
    adjusted_rand: float | None


@dataclass(frozen=True)
class PanelChangeView:
    metrics: dict[str, dict[str, SeriesView]]            # metric -> arm -> series
    training_effect: dict[str, EffectView] | None        # None: no control group
    follow_up_effect: dict[str, EffectView] | None | object   # ABSENT when the key is missing
    agreement: dict[str, SeriesView] | None              # "icc", "alpha"
    same_cases: bool | None
    convergence: dict[str, dict[str, SeriesView] | None] | None   # name -> arm -> series
    groups: tuple[dict[str, int | None], tuple[MergeStep, ...]] | None
    cue_shift: dict[str, CueShiftView] | None
    detectable: dict[str, tuple[float | None, float | None]] | None   # metric -> (per rater, panel)
    detectable_reading: dict[str, str] | None = None   # metric -> compare's words beside it


ABSENT = object()   # a key comparison.json does not hold (unlike null: held, and empty)


def _effects(block: Any, path: str) -> dict[str, EffectView] | None:
    if block is None:
        return None
    return {str(k): EffectView.read(v, f"{path}.{k}") for k, v in block.items()}


def _read_panel(d: Mapping, path: str) -> PanelChangeView:
    metrics = {str(name): {str(arm): SeriesView.read(s, f"{path}.metrics.{name}.{arm}")
                           for arm, s in arms.items()}
               for name, arms in _get(d, "metrics", path).items()}
    effect = _effects(_get(d, "training_effect", path), f"{path}.training_effect")
    follow = _effects(d["follow_up_effect"], f"{path}.follow_up_effect") if "follow_up_effect" in d else ABSENT
    agreement = same_cases = None
    if d.get("agreement") is not None:
        ag = d["agreement"]
        agreement = {k: SeriesView.read(ag[k], f"{path}.agreement.{k}") for k in ("icc", "alpha")
                     if ag.get(k) is not None}
        same_cases = None if ag.get("same_cases") is None else bool(ag["same_cases"])
    convergence = None
    if d.get("convergence") is not None:
        convergence = {}
        for name, arms in d["convergence"].items():
            convergence[str(name)] = None if arms is None else {
                str(arm): SeriesView.read(s, f"{path}.convergence.{name}.{arm}") for arm, s in arms.items()}
    groups = None
    if d.get("groups") is not None:
        g = d["groups"]
        counts = {str(k): (None if v is None else int(v)) for k, v in _get(g, "values", f"{path}.groups").items()}
        steps = tuple(MergeStep(str(_get(m, "from", f"{path}.groups.merged[{i}]")),
                                str(_get(m, "to", f"{path}.groups.merged[{i}]")), bool(m.get("merged")),
                                _num(m, "adjusted_rand", f"{path}.groups.merged[{i}]", default=None))
                      for i, m in enumerate(g.get("merged") or []))
        groups = (counts, steps)
    shift = None
    if d.get("cue_shift") is not None:
        shift = {}
        for cue, s in d["cue_shift"].items():
            where = f"{path}.cue_shift.{cue}"
            control = s.get("control")
            toward = s.get("toward_rubric")
            shift[str(cue)] = CueShiftView(
                rubric_share=_num(s, "rubric_share", where, default=None),
                trained=_numbers(_get(_get(s, "trained", where), "values", f"{where}.trained"), f"{where}.trained"),
                control=None if control is None else _numbers(_get(control, "values", f"{where}.control"),
                                                              f"{where}.control"),
                toward_rubric=None if toward is None else bool(toward),
                toward_tested=bool(s.get("toward_tested", True)))
    detectable = reading = None
    if d.get("detectable") is not None:
        detectable = {str(k): (_num(v, "per_rater", f"{path}.detectable.{k}", default=None),
                               _num(v, "panel", f"{path}.detectable.{k}", default=None))
                      for k, v in d["detectable"].items()}
        reading = {str(k): str(v["reading"]) for k, v in d["detectable"].items() if v.get("reading") is not None}
    return PanelChangeView(metrics=metrics, training_effect=effect, follow_up_effect=follow,
                           agreement=agreement, same_cases=same_cases, convergence=convergence,
                           groups=groups, cue_shift=shift, detectable=detectable,
                           detectable_reading=reading)


@dataclass(frozen=True)
class ComparisonView:
    """comparison.json as the training report reads it."""

    study_name: str
    phases: tuple[str, ...]
    has_control: bool
    raters: tuple[RaterChangeView, ...]
    unmatched: tuple[str, ...]
    panel: PanelChangeView
    summary: tuple[str, ...]
    cautions: tuple[str, ...]
    answers: dict[str, str | None] | None = None   # worked, for_whom, lasts, regression_to_mean
    better: dict[str, str | None] | None = None    # figure -> "higher" / "lower" / None

    @classmethod
    def read(cls, comparison: Mapping) -> ComparisonView:
        _get(comparison, "schema", "comparison")
        phases = tuple(map(str, _get(comparison, "phases", "comparison")))
        if len(phases) < 2:
            raise ComparisonViewError("comparison.phases", "holds fewer than two phases")
        raters = tuple(RaterChangeView.read(r, f"comparison.raters[{i}]")
                       for i, r in enumerate(_get(comparison, "raters", "comparison")))
        has_control = bool(comparison.get("has_control", any(not r.trained for r in raters)))
        return cls(study_name=str(_get(_get(comparison, "study", "comparison"), "name", "comparison.study")),
                   phases=phases, has_control=has_control, raters=raters,
                   unmatched=tuple(str(u.get("rater")) for u in comparison.get("unmatched") or []),
                   panel=_read_panel(_get(comparison, "panel", "comparison"), "comparison.panel"),
                   summary=tuple(map(str, _get(comparison, "summary", "comparison"))),
                   cautions=tuple(map(str, _get(comparison, "cautions", "comparison"))),
                   answers=None if comparison.get("answers") is None else {
                       str(k): None if v is None else str(v) for k, v in comparison["answers"].items()},
                   better=None if comparison.get("better") is None else {
                       str(k): None if v is None else str(v) for k, v in comparison["better"].items()})

    @property
    def metrics(self) -> tuple[str, ...]:
        """The per-rater metrics present, in comparison.json's order."""
        return tuple(self.raters[0].metrics) if self.raters else tuple(self.panel.metrics)

    def arm(self, trained: bool) -> tuple[RaterChangeView, ...]:
        return tuple(r for r in self.raters if r.trained == trained)


__all__ = ["ABSENT", "ABSENT_REASON", "ChangeView", "ComparisonView", "ComparisonViewError", "CueShiftView",
           "EffectView", "MergeStep", "PanelChangeView", "RaterChangeView", "SeriesView"]
