"""Run the analyses of a study: JudgmentTable in, :class:`AuditResult` out.

Pure: nothing is written here (see :mod:`calibrate.writing`), and nothing from the
reports or the CLI is imported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from .agreement.files import FileView, file_view
from .agreement.icc import AgreementResult, panel_agreement
from .agreement.readers import GStudyResult, generalizability
from .agreement.offsets import SeverityResult, severity
from .agreement.with_panel import PeerAgreementSet, agreement_with_panel
from .consistency.reading_order import DriftResult, drift
from .consistency.repeats import RetestSet, consistency_verdict, retest
from .data.ingest import JudgmentTable, PhaseData, load_study
from .data.spec import StudySpec, spec_record
from .data.summary import DataSummary, summarize
from .lens.cutoffs import CutoffResult, cutoff_check
from .lens.model import LensResult, lens_model
from .lens.rubric import AlignmentResult, ExcludedResult, excluded_check, rubric_alignment
from .panel.grouping import GroupingResult, group_raters
from .panel.pairs import ConflictResult, HomogeneityResult, pairwise_conflict, policy_homogeneity
from .policy.fit import POLICIES_SCHEMA, PolicySet, captured_policies, fit_policies
from .result_base import jsonable

RESULTS_SCHEMA = "calibrate.results/1"


@dataclass(frozen=True)
class PhaseAnalyses:
    """The result objects of every analysis of one phase (for reports and notebooks)."""

    phase: str
    policies: PolicySet | None
    retest: RetestSet
    agreement: AgreementResult | None
    peer_agreement: PeerAgreementSet | None
    severity: SeverityResult | None
    gstudy: GStudyResult | None
    files: FileView | None
    lens: LensResult | None
    alignment: AlignmentResult | None
    excluded: ExcludedResult | None
    cutoffs: CutoffResult | None
    drift: DriftResult | None
    conflict: ConflictResult | None
    homogeneity: HomogeneityResult | None
    grouping: GroupingResult | None
    verdicts: dict = field(default_factory=dict)


@dataclass(frozen=True)
class AuditResult:
    """Everything one audit found. ``to_dict()`` is results.json."""

    study_name: str
    seed: int
    inputs: tuple[dict, ...]
    phases: tuple[str, ...]
    warnings: tuple[dict, ...]
    summary: DataSummary
    raters: tuple[dict, ...]
    panels: tuple[dict, ...]
    tables: dict[str, pd.DataFrame] = field(default_factory=dict, repr=False)
    policies: dict = field(default_factory=dict, repr=False)
    analyses: dict[str, PhaseAnalyses] = field(default_factory=dict, repr=False)
    judgment: dict = field(default_factory=dict)
    rubric: dict | None = None
    criterion_only_for_selected: bool = False
    provenance: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return jsonable({
            "schema": RESULTS_SCHEMA,
            "tool_version": __version__,
            "seed": self.seed,
            "study": {"name": self.study_name,
                      "criterion_only_for_selected": self.criterion_only_for_selected},
            "judgment": self.judgment,
            "rubric": self.rubric,
            "inputs": list(self.inputs),
            "provenance": self.provenance,
            "phases": list(self.phases),
            "warnings": list(self.warnings),
            "data_summary": self.summary.to_dict(),
            "raters": list(self.raters),
            "panels": list(self.panels),
        })

    def rater_entry(self, rater: str, phase: str) -> dict:
        for entry in self.raters:
            if entry["rater"] == rater and entry["phase"] == phase:
                return entry
        raise KeyError((rater, phase))


# One stream of random numbers per analysis and phase, all derived from the study seed, so
# adding an analysis never changes the numbers of another.
_STREAMS = ("policy", "agreement", "gstudy", "lens", "cutoffs", "drift", "homogeneity", "grouping")


def _rng(seed: int, phase_index: int, name: str) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(phase_index,
                                                                         _STREAMS.index(name))))


def _lookup(result, rater: str):
    """``result.for_rater(rater)`` or None when the analysis has nothing for that rater."""
    if result is None:
        return None
    try:
        return result.for_rater(rater)
    except KeyError:
        return None


def _warn_texts(phase: str | None, name: str, result) -> list[dict]:
    """The analysis' warnings as study warnings; a study without phases names none."""
    texts = getattr(result, "warnings", ()) if result is not None else ()
    where = f"{name} ({phase})" if phase is not None else name
    return [{"severity": "warning", "message": f"{where}: {t}", "file": None, "row": None,
             "column": None} for t in texts]


def analyse_phase(table: JudgmentTable, ph: PhaseData, phase_index: int, *, seed: int,
                  n_boot: int = 1000, progress=None) -> PhaseAnalyses:
    """Run every analysis of one phase."""
    spec = table.spec
    design = table.phase_design(ph)  # this phase's cases: fill values and lens environment per phase
    scale = spec.judgment
    kind, lo, hi = scale.kind, scale.min, scale.max
    fit_first = ph.first.loc[ph.first["rater"].isin(ph.fit_raters),
                             ["rater", "case", "judgment"]].reset_index(drop=True)
    complete = set(np.asarray(design.case_ids)[design.complete_rows()])
    fit_first = fit_first.loc[fit_first["case"].isin(complete)].reset_index(drop=True)
    first = ph.first[["rater", "case", "judgment"]]
    step = progress or (lambda name: None)

    step("policies")
    ordinal = kind == "ordinal"  # its ends give the curvature test a scale-aware null
    policies = (fit_policies(design, fit_first, scale=kind, scale_min=lo if ordinal else None,
                             scale_max=hi if ordinal else None, n_boot=n_boot,
                             rng=_rng(seed, phase_index, "policy")) if len(fit_first) else None)
    step("test-retest")
    retest_set = retest(ph.repeats, scale=kind, scale_min=lo, scale_max=hi)
    step("agreement")
    several = first["rater"].nunique() >= 2
    agreement = (panel_agreement(first, scale=kind, scale_min=lo, scale_max=hi,
                                 rng=_rng(seed, phase_index, "agreement")) if several else None)
    peers = agreement_with_panel(first) if several else None
    sev = severity(first, scale=kind, scale_min=lo, scale_max=hi) if several else None
    gstudy = (generalizability(first, cut_off=scale.cut_off, rng=_rng(seed, phase_index, "gstudy"))
              if several else None)
    files = file_view(first, sev, cut_off=scale.cut_off) if sev is not None else None
    lens = alignment = excluded = None
    if table.criterion is not None and len(fit_first):
        step("lens model")
        lens = lens_model(design, fit_first, table.criterion,
                          criterion_selected=spec.criterion_only_for_selected,
                          rubric=spec.rubric, n_boot=n_boot, rng=_rng(seed, phase_index, "lens"))
    if spec.rubric and len(fit_first):
        alignment = rubric_alignment(design, fit_first, spec.rubric, basis=spec.rubric_basis)
    if spec.excluded and len(fit_first):
        step("excluded attributes")
        excluded = excluded_check(design, fit_first, table.cases[list(spec.excluded)], scale=kind)
    step("cut-off rules")
    cutoffs = (cutoff_check(design, fit_first, rng=_rng(seed, phase_index, "cutoffs"), scale=kind,
                            scale_min=lo, scale_max=hi) if len(fit_first) else None)
    drift_result = None
    if spec.role("sequence") is not None and len(fit_first):
        step("drift")
        ordered = ph.ordered.loc[ph.ordered["rater"].isin(ph.fit_raters)
                                 & ph.ordered["case"].isin(complete)].reset_index(drop=True)
        drift_result = drift(design, ordered[["rater", "case", "judgment", "position"]],
                             rng=_rng(seed, phase_index, "drift"))
    n_fit = fit_first["rater"].nunique()
    conflict = homogeneity = grouping = None
    if n_fit >= 2:
        step("conflict and homogeneity")
        conflict = pairwise_conflict(design, fit_first)
        homogeneity = policy_homogeneity(design, fit_first, rng=_rng(seed, phase_index, "homogeneity"))
        step("groups")
        grouping = group_raters(design, fit_first, rng=_rng(seed, phase_index, "grouping"))
    verdicts = {}
    if policies is not None:
        for pol in policies.raters:
            rt = _lookup(retest_set, pol.rater)
            if rt is None or not np.isfinite(rt.r):
                continue
            verdicts[pol.rater] = consistency_verdict(pol.r, rt.r, r_tt_ci=(rt.r_ci_low, rt.r_ci_high),
                                                      r_s_ci=tuple(pol.r_ci))
    return PhaseAnalyses(phase=ph.label, policies=policies, retest=retest_set, agreement=agreement,
                         peer_agreement=peers,
                         severity=sev, gstudy=gstudy, files=files, lens=lens, alignment=alignment,
                         excluded=excluded, cutoffs=cutoffs, drift=drift_result, conflict=conflict,
                         homogeneity=homogeneity, grouping=grouping, verdicts=verdicts)


def _unavailable_reasons(entry: dict, rater: str, ph: PhaseData, spec: StudySpec, counts: dict) -> dict:
    """Why each null section of a rater entry is null, in words a report can print.

    Only facts the audit knows are stated: a study without a criterion or rubric, no
    repeated case, a rater below the minimum of cases; otherwise the plain fact that the
    analysis gave no result for this rater (the data-quality notes say more).
    """
    generic = "the analysis gave no result for this rater in this phase (see the data-quality notes)"
    reasons = {}
    if entry["policy"] is None:
        reasons["policy"] = ("too few usable cases to fit a policy" if rater in ph.too_few
                             else "the policy could not be fitted (see the data-quality notes)")
    if entry["retest"] is None:
        reasons["retest"] = ("no case was judged twice" if counts["n_repeats"] == 0 else
                             f"test-retest could not be computed from {counts['n_repeats']} repeated case(s)")
    if entry["lens"] is None:
        reasons["lens"] = ("the study names no criterion" if "criterion" not in spec.columns else
                           "the lens model could not be fitted on this rater's cases with a criterion")
    if entry["alignment"] is None:
        reasons["alignment"] = "the study has no rubric" if not spec.rubric else generic
    for key in ("agreement", "severity", "drift", "cutoff"):
        if entry[key] is None:
            reasons[key] = generic
    return reasons


def _rater_entry(rater: str, ph: PhaseData, a: PhaseAnalyses, counts: dict, spec: StudySpec) -> dict:
    flags: list[str] = []
    if rater in ph.too_few:
        flags.append("too_few_cases")
    policy = None
    if a.policies is not None and rater in ph.fit_raters:
        try:
            pol = a.policies[rater]
        except KeyError:
            pol = None
        if pol is not None:
            policy = pol.policy_dict()
            flags += list(pol.flags)
    entry = {
        "rater": rater,
        "phase": ph.label,
        "n_cases": counts["n_cases"],
        "n_repeats": counts["n_repeats"],
        "n_presentations": counts["n_presentations"],
        "most_presentations": counts["most_presentations"],
        "policy": policy,
    }
    for key, result in (("retest", a.retest), ("agreement", a.peer_agreement), ("lens", a.lens), ("severity", a.severity),
                        ("alignment", a.alignment), ("drift", a.drift), ("cutoff", a.cutoffs)):
        item = _lookup(result, rater)
        entry[key] = None if item is None else item.to_dict()
        if item is not None:
            flags += list(getattr(item, "flags", ()) or ())
            if key == "drift" and item.flagged:
                flags.append("drift")
            if key == "cutoff" and getattr(item, "flagged", False):
                flags.append("cutoff_rule")
    verdict = a.verdicts.get(rater)
    entry["consistency"] = None if verdict is None else verdict.to_dict()
    entry["group"] = None if a.grouping is None else a.grouping.rater_group.get(rater)
    excl = _lookup(a.excluded, rater)
    entry["excluded"] = {} if excl is None else excl.to_dict()
    if excl is not None and any(t.get("flagged") for t in entry["excluded"].values()
                                if isinstance(t, dict)):
        flags.append("excluded_attribute")
    if counts["cases_per_term"] < 10 and "few_cases" not in flags and rater not in ph.too_few:
        flags.append("few_cases")
    entry["flags"] = list(dict.fromkeys(flags))  # unique, first-seen order
    reasons = _unavailable_reasons(entry, rater, ph, spec, counts)
    if reasons:
        entry["unavailable"] = reasons
    return entry


def _panel_entry(ph: PhaseData, a: PhaseAnalyses, connected: bool) -> dict:
    entry = {"phase": ph.label, "n_raters": len(ph.raters), "connected": connected}
    ag = a.agreement.to_dict() if a.agreement is not None else {}
    entry["icc"] = ag.get("icc")
    entry["alpha"] = ag.get("alpha")
    entry["agreement"] = ag or None
    g = a.gstudy.to_dict() if a.gstudy is not None else {}
    entry["variance_components"] = g.get("variance_components")
    entry["d_study"] = g.get("d_study", [])
    entry["readers_needed"] = g.get("readers_needed")
    entry["flips"] = g.get("flips", [])
    grouping = a.grouping.to_dict() if a.grouping is not None else {}
    entry["groups"] = grouping.get("groups", [])
    entry["grouping"] = grouping or None
    entry["homogeneity"] = a.homogeneity.to_dict() if a.homogeneity is not None else None
    entry["conflict"] = a.conflict.to_dict() if a.conflict is not None else None
    entry["lens_environment"] = (a.lens.to_dict().get("environment") if a.lens is not None else None)
    entry["excluded_proxies"] = (a.excluded.to_dict().get("proxies") if a.excluded is not None
                                 else None)
    entry["files_needing_another_read"] = (list(a.files.needs_another_read())
                                           if a.files is not None else [])
    return entry


def audit(study: JudgmentTable | StudySpec | str | Path, *, seed: int | None = None,
          n_boot: int = 1000, progress=None) -> AuditResult:
    """Audit a study: every analysis, for every phase.

    Parameters
    ----------
    study : a JudgmentTable (from :func:`calibrate.data.ingest.load_study`), a StudySpec or a spec path.
    seed : resampling seed; defaults to the spec's ``[study] seed``.
    n_boot : bootstrap resamples for the policy intervals.
    progress : optional callable taking a short step name (for a progress display).
    """
    table = study if isinstance(study, JudgmentTable) else load_study(study)
    spec = table.spec
    seed = spec.seed if seed is None else int(seed)
    summary = summarize(table)
    warnings = [w.to_dict() for w in table.warnings]
    raters: list[dict] = []
    panels: list[dict] = []
    analyses: dict[str, PhaseAnalyses] = {}
    tables: dict[str, pd.DataFrame] = {}
    policies_out: dict = {"schema": POLICIES_SCHEMA, "study": spec.name, "phases": {}}
    for index, (ph, ph_summary) in enumerate(zip(table.phases, summary.phases)):
        a = analyse_phase(table, ph, index, seed=seed, n_boot=n_boot, progress=progress)
        analyses[ph.label] = a
        per_rater = {r["rater"]: r for r in ph_summary.per_rater}
        for rater in ph.raters:
            raters.append(_rater_entry(rater, ph, a, per_rater[rater], spec))
        panels.append(_panel_entry(ph, a, ph_summary.connectedness.connected))
        for name, result in (("policies", a.policies), ("retest", a.retest),
                             ("agreement", a.agreement), ("peer_agreement", a.peer_agreement),
                             ("severity", a.severity),
                             ("gstudy", a.gstudy), ("files", a.files), ("lens", a.lens),
                             ("alignment", a.alignment), ("excluded", a.excluded),
                             ("cutoffs", a.cutoffs), ("drift", a.drift), ("conflict", a.conflict),
                             ("homogeneity", a.homogeneity), ("grouping", a.grouping)):
            warnings += _warn_texts(ph.name, name, result)
        _collect_tables(tables, ph, a)
        if a.policies is not None:
            policies_out["phases"][ph.label] = captured_policies(a.policies, table.phase_design(ph))
    tables = {"raters": _rater_table(raters), "data_summary": summary.to_frame(), **tables}
    return AuditResult(
        study_name=spec.name,
        seed=seed,
        inputs=table.inputs,
        phases=tuple(p.label for p in table.phases),
        warnings=tuple(warnings),
        summary=summary,
        raters=tuple(raters),
        panels=tuple(panels),
        tables=tables,
        policies=policies_out,
        analyses=analyses,
        judgment={"scale": spec.judgment.kind, "min": spec.judgment.min, "max": spec.judgment.max,
                  "cut_off": spec.judgment.cut_off, "labels": dict(spec.judgment.labels)},
        rubric=(None if not spec.rubric else {"basis": spec.rubric_basis, "shares": dict(spec.rubric)}),
        criterion_only_for_selected=spec.criterion_only_for_selected,
        provenance={"spec": spec_record(spec), "libraries": library_versions()},
    )


# The libraries whose versions can change a figure or a report; read from the installed
# distributions (no time, no host name), so a rerun in the same environment gives the same bytes.
_KEY_LIBRARIES = ("numpy", "scipy", "pandas", "statsmodels", "matplotlib", "reportlab", "openpyxl")


def library_versions() -> dict[str, str | None]:
    """Python's and the key libraries' versions (None for one not installed)."""
    import platform
    from importlib import metadata

    versions: dict[str, str | None] = {"python": platform.python_version(), "calibrate": __version__}
    for name in _KEY_LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    return versions


def _collect_tables(tables: dict[str, pd.DataFrame], ph: PhaseData, a: PhaseAnalyses) -> None:
    """Append this phase's tidy tables (a ``phase`` column first) to the study's tables."""
    frames: dict[str, pd.DataFrame | None] = {}
    if a.policies is not None:
        frames["policies"] = a.policies.to_frame()
        frames["policy_weights"] = a.policies.columns_frame()
        frames["policy_importance"] = a.policies.cues_frame()
    frames["retest"] = a.retest.to_frame()
    frames["repeat_pairs"] = ph.repeats.copy()
    frames["reading_order"] = ph.ordered[["rater", "case", "position", "judgment"]].copy()
    for name in ("peer_agreement", "severity", "files", "lens", "alignment", "excluded", "cutoffs", "drift",
                 "conflict", "grouping"):
        result = getattr(a, name)
        frames[name] = None if result is None else result.to_frame()
    if a.gstudy is not None:
        frames["readers_per_file"] = pd.DataFrame(a.gstudy.to_dict()["d_study"])
    if a.agreement is not None:
        detail = a.agreement.to_dict().get("icc_detail") or {}
        frames["agreement"] = pd.DataFrame(detail.get("forms", []))
    if a.grouping is not None:
        frames["group_merges"] = a.grouping.merge_frame()
        frames["groups"] = a.grouping.groups_frame()
    for name, frame in frames.items():
        if frame is None or frame.empty:
            continue
        frame = frame.copy()
        frame.insert(0, "phase", ph.label)
        tables[name] = frame if name not in tables else pd.concat([tables[name], frame],
                                                                   ignore_index=True)


def _rater_table(raters: list[dict]) -> pd.DataFrame:
    rows = []
    for e in raters:
        pol = e.get("policy") or {}
        rt = e.get("retest") or {}
        sev = e.get("severity") or {}
        rows.append({"rater": e["rater"], "phase": e["phase"], "n_cases": e["n_cases"],
                     "n_repeats": e["n_repeats"], "r_s": pol.get("r"), "r_cv": pol.get("r_cv"),
                     "retest_r": rt.get("r"), "severity_offset": sev.get("offset"),
                     "group": e["group"], "flags": " ".join(e["flags"])})
    return pd.DataFrame(rows)
