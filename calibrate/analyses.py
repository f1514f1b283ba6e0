"""Run the analyses of a study: JudgmentTable in, :class:`AuditResult` out.

Pure: nothing is written here (see :mod:`calibrate.writing`), and nothing from the
reports or the CLI is imported.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field, replace
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from .at_a_glance import glance_html, glance_text
from .errors import CalibrateError, check_seed
from .agreement.files import FileView, file_view
from .agreement.icc import AgreementResult, panel_agreement
from .agreement.readers import GStudyResult, generalizability
from .agreement.offsets import SeverityResult, severity
from .agreement.with_panel import PeerAgreementSet, agreement_with_panel
from .consistency.reading_order import DriftResult, drift
from .consistency.presentations import harmonic_presentations, presentation_consistency, spearman_brown
from .consistency.repeats import (RetestSet, consistency_verdict, over_presentations, presentation_pairs,
                                  retest)
from .data.ingest import JudgmentTable, PhaseData, load_study
from .notes import analysis_note, notes_frame
from .data.spec import StudySpec, spec_record
from .data.summary import DataSummary, summarize
from .lens.cutoffs import CutoffResult, cutoff_check
from .lens.model import LensResult, lens_model
from .lens.rubric import AlignmentResult, ExcludedResult, excluded_check, rubric_alignment
from .panel.grouping import GroupingResult, group_raters
from .panel.pairs import RaterPairsResult, HomogeneityResult, compare_rater_pairs, policy_homogeneity
from .policy.fit import CURVATURE_NOTE, POLICIES_SCHEMA, PolicySet, captured_policies, fit_policies
from .pvalues import holm_adjust
from .result_base import collector_paused, jsonable
from .training import compare
from .training.verdicts import rater_change_sentence
from .threads import one_blas_thread

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
    rater_pairs: RaterPairsResult | None
    homogeneity: HomogeneityResult | None
    grouping: GroupingResult | None
    verdicts: dict = field(default_factory=dict)
    chance_flags: "ChanceFlags | None" = None


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

    def __repr__(self) -> str:
        return glance_text(self)

    def _repr_html_(self) -> str:
        return glance_html(self)

    def table(self, name: str) -> pd.DataFrame:
        """One tidy table (a copy) by name: ``result.table("policies")``; names in ``result.tables``."""
        if not isinstance(name, str) or name not in self.tables:
            names = sorted(self.tables)
            close = difflib.get_close_matches(str(name), names, n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            raise CalibrateError(f"This audit has no table {name!r}.{hint} Its tables: {', '.join(names)} "
                                 "(a table is absent when its analysis did not run on this study).")
        return self.tables[name].copy()

    def rater_entry(self, rater: str, phase: str) -> dict:
        for entry in self.raters:
            if entry["rater"] == rater and entry["phase"] == phase:
                return entry
        raise KeyError((rater, phase))


# One stream of random numbers per analysis and phase, all derived from the study seed, so
# adding an analysis never changes the numbers of another.
_STREAMS = ("policy", "agreement", "gstudy", "lens", "cutoffs", "drift", "homogeneity", "grouping",
            "presentations")


def _rng(seed: int, phase_index: int, name: str) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(phase_index,
                                                                         _STREAMS.index(name))))


def _items_by_rater(result) -> dict:
    """Rater -> the result's item for that rater (the first, as ``for_rater`` finds it); empty
    without a result. Built once per phase: ``for_rater`` searches the tuple, and once per
    rater that made the entries of 2,000 raters quadratic (4-5 s CPU of lookups)."""
    found: dict = {}
    for item in () if result is None else result.raters:
        found.setdefault(item.rater, item)
    return found


def _warn_texts(phase: str | None, name: str, result) -> list[dict]:
    """The analysis' notes as study warnings, each with its kind: first the notes about one
    rater (from the per-rater results, with the rater named), then the panel's own notes
    (a panel note that only repeats a rater's is not written twice). A study without phases
    names none."""
    if result is None:
        return []
    out, per_rater = [], set()
    for item in getattr(result, "raters", ()) or ():
        rater = getattr(item, "rater", None)
        for text in getattr(item, "warnings", ()) or ():
            if rater is None:
                continue
            per_rater.add(f"Rater '{rater}': {text}")
            out.append(analysis_note(name, text, phase=phase, rater=str(rater)))
    for text in getattr(result, "warnings", ()) or ():
        if text not in per_rater:
            out.append(analysis_note(name, text, phase=phase))
    return out


def _reduced_form_warnings(phase: str | None, name: str, texts) -> list[dict]:
    """The reduced forms an analysis ran in on a large panel, as study warnings."""
    return [analysis_note(name, f"{t} (--full-extras runs it in full.)", phase=phase) for t in texts]


def analyse_phase(table: JudgmentTable, ph: PhaseData, phase_index: int, *, seed: int,
                  n_boot: int = 1000, progress=None, full_extras: bool = False) -> PhaseAnalyses:
    """Run every analysis of one phase."""
    spec = table.spec
    design = table.phase_design(ph)  # this phase's cases: fill values and lens environment per phase
    scale = spec.judgment
    kind, lo, hi = scale.kind, scale.min, scale.max
    # With [judgment] repeats = "all" every policy-based analysis reads each case's mean
    # judgment over its presentations (DEVELOPERS.md, "Cases shown many times": the mean's OLS
    # standard errors count cases, and covered 95% where cluster-robust ones did not);
    # agreement, severity and the per-file view keep each rater's first reading.
    fit_first = ph.first.loc[ph.first["rater"].isin(ph.fit_raters), ["rater", "case", "case_mean"]]
    fit_first = fit_first.rename(columns={"case_mean": "judgment"}).reset_index(drop=True)
    complete = set(np.asarray(design.case_ids)[design.complete_rows()])
    fit_first = fit_first.loc[fit_first["case"].isin(complete)].reset_index(drop=True)
    if not spec.cues:  # agreement-only study: every analysis that models judgments on cues is left out
        fit_first = fit_first.iloc[:0]
    first = ph.first[["rater", "case", "judgment"]]
    step = progress or (lambda name: None)

    # Every tested flag of the phase is decided in one Holm family (control_chance_flags);
    # the Monte Carlo tests must reach p-values below alpha / m to be able to flag at all.
    n_tests = planned_tests(fit_first["rater"].nunique(), sequence=spec.role("sequence") is not None,
                            n_excluded=len(spec.excluded), repeats=len(ph.repeats) > 0)
    resolution = CHANCE_ALPHA / max(n_tests, 1)
    step("policies")
    means = ph.repeat_mode == "all" and bool((ph.first["shown"] > 1).any())
    # means of whole steps (or shares of 0/1 decisions) are fitted as continuous judgments
    fit_kind = "continuous" if means else kind
    ordinal = fit_kind == "ordinal"  # its ends give the curvature test a scale-aware null
    policies = (fit_policies(design, fit_first, scale=fit_kind, scale_min=lo if ordinal else None,
                             scale_max=hi if ordinal else None, n_boot=n_boot,
                             rng=_rng(seed, phase_index, "policy"),
                             curvature_resolution=resolution, scale_down=not full_extras)
                if len(fit_first) else None)
    step("test-retest")
    retest_set = retest(ph.repeats, scale=kind, scale_min=lo, scale_max=hi)
    if ph.repeat_mode == "all" and len(ph.presentations):
        over = presentation_consistency(ph.presentations, rng=_rng(seed, phase_index, "presentations"))
        if over:
            every_pair = retest(presentation_pairs(ph.presentations), scale=kind, scale_min=lo, scale_max=hi)
            retest_set = over_presentations(retest_set, every_pair, over)
    step("agreement")
    several = first["rater"].nunique() >= 2
    agreement = (panel_agreement(first, scale=kind, scale_min=lo, scale_max=hi,
                                 rng=_rng(seed, phase_index, "agreement"), full_extras=full_extras)
                 if several else None)
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
                          rubric=spec.rubric, n_boot=n_boot, rng=_rng(seed, phase_index, "lens"),
                          scale_down=not full_extras)
    if spec.rubric and len(fit_first):
        alignment = rubric_alignment(design, fit_first, spec.rubric, basis=spec.rubric_basis)
    if spec.excluded and len(fit_first):
        step("excluded attributes")
        excluded = excluded_check(design, fit_first, table.cases[list(spec.excluded)], scale=fit_kind)
    step("cut-off rules")
    cutoff_draws = int(min(max(999, np.ceil(10.0 / resolution) - 1), CUTOFF_MAX_DRAWS))
    cutoffs = (cutoff_check(design, fit_first, rng=_rng(seed, phase_index, "cutoffs"), scale=fit_kind,
                            scale_min=lo, scale_max=hi, n_sim=cutoff_draws, scale_down=not full_extras)
               if len(fit_first) else None)
    drift_result = None
    if spec.role("sequence") is not None and len(fit_first):
        step("drift")
        ordered = ph.ordered.loc[ph.ordered["rater"].isin(ph.fit_raters)
                                 & ph.ordered["case"].isin(complete)].reset_index(drop=True)
        drift_result = drift(design, ordered[["rater", "case", "judgment", "position"]],
                             rng=_rng(seed, phase_index, "drift"), scale_down=not full_extras)
    n_fit = fit_first["rater"].nunique()
    rater_pairs = homogeneity = grouping = None
    if n_fit >= 2:
        step("rater pairs and homogeneity")
        rater_pairs = compare_rater_pairs(design, fit_first)
        homogeneity = policy_homogeneity(design, fit_first, rng=_rng(seed, phase_index, "homogeneity"))
        step("groups")
        grouping = group_raters(design, fit_first, rng=_rng(seed, phase_index, "grouping"),
                                scale_down=not full_extras)
    policies, cutoffs, drift_result, excluded, retest_set, chance = control_chance_flags(
        policies, cutoffs, drift_result, excluded, retest_set)
    verdicts = {}
    if policies is not None:
        retest_of = _items_by_rater(retest_set)
        for pol in policies.raters:
            rt = retest_of.get(pol.rater)
            if rt is None or not np.isfinite(rt.r):
                continue
            r_tt, r_tt_ci = rt.r, (rt.r_ci_low, rt.r_ci_high)
            if rt.measure != "first_repeat_r":
                # over presentations the bound is read from ICC(C,1), whose F interval covers
                r_tt, r_tt_ci = rt.icc_c1, (rt.icc_c1_ci_low, rt.icc_c1_ci_high)
            m = 1.0
            if means:
                # R_s is fitted to case means, so its ceiling is the reliability of a mean of
                # the presentations (Spearman-Brown at the harmonic mean of showings per case)
                shown = ph.first.loc[(ph.first["rater"] == pol.rater) & ph.first["case"].isin(complete), "shown"]
                m = harmonic_presentations(shown.to_numpy(float))
                r_tt, r_tt_ci = spearman_brown(r_tt, m), tuple(spearman_brown(v, m) for v in r_tt_ci)
            verdicts[pol.rater] = replace(
                consistency_verdict(pol.r, r_tt, r_tt_ci=r_tt_ci, r_s_ci=tuple(pol.r_ci)),
                policy_on_means=means, presentations_per_case=m)
    return PhaseAnalyses(phase=ph.label, policies=policies, retest=retest_set, agreement=agreement,
                         peer_agreement=peers,
                         severity=sev, gstudy=gstudy, files=files, lens=lens, alignment=alignment,
                         excluded=excluded, cutoffs=cutoffs, drift=drift_result, rater_pairs=rater_pairs,
                         homogeneity=homogeneity, grouping=grouping, verdicts=verdicts,
                         chance_flags=chance)


#: The sections of a rater entry that model judgments on the cues (null in a study without cues).
CUE_SECTIONS = ("policy", "lens", "alignment", "drift", "cutoff")
NO_CUES_REASON = "the study lists no cues; this analysis models the judgments on the cues in [cues]"


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
    if not spec.cues:  # an agreement-only study: the cue analyses were never run
        reasons.update({key: NO_CUES_REASON for key in CUE_SECTIONS if entry[key] is None})
    return reasons


#: The sections of a rater entry read from one per-rater result each: (entry key, analysis).
_ENTRY_SECTIONS = (("retest", "retest"), ("agreement", "peer_agreement"), ("lens", "lens"),
                   ("severity", "severity"), ("alignment", "alignment"), ("drift", "drift"),
                   ("cutoff", "cutoffs"))


def _rater_entries(ph: PhaseData, a: PhaseAnalyses, per_rater: dict, spec: StudySpec) -> list[dict]:
    """The results.json entry of every rater of the phase, in ``ph.raters`` order."""
    items = {key: _items_by_rater(getattr(a, name)) for key, name in
             (("policy", "policies"), *_ENTRY_SECTIONS, ("excluded", "excluded"))}
    fit = frozenset(ph.fit_raters)
    return [_rater_entry(rater, ph, a, per_rater[rater], spec, items, rater in fit) for rater in ph.raters]


def _rater_entry(rater: str, ph: PhaseData, a: PhaseAnalyses, counts: dict, spec: StudySpec,
                 items: dict[str, dict], fitted: bool) -> dict:
    """One rater's entry; ``items`` holds each analysis' per-rater items by rater
    (:func:`_items_by_rater`), ``fitted`` whether the rater is among the phase's fit raters."""
    flags: list[str] = []
    if rater in ph.too_few:
        flags.append("too_few_cases")
    policy = None
    pol = items["policy"].get(rater) if fitted else None
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
        "repeats_mode": ph.repeat_mode,
        "policy": policy,
    }
    for key, _name in _ENTRY_SECTIONS:
        item = items[key].get(rater)
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
    excl = items["excluded"].get(rater)
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


#: The pair-level grouping table (how often two raters shared a group) is written for
#: panels up to this many grouped raters (19,900 pairs), on larger ones on request
#: (``full_extras``): it grows with raters squared (about 2 million rows at 2,000 raters).
GROUP_PAIRS_MAX_RATERS = 200


def _group_pairs_written(a: PhaseAnalyses, full_extras: bool) -> bool:
    n = a.grouping.n_pairs if a.grouping is not None else 0
    return n > 0 and (full_extras or n <= GROUP_PAIRS_MAX_RATERS * (GROUP_PAIRS_MAX_RATERS - 1) // 2)


def _reduced_forms_by_analysis(a: PhaseAnalyses, full_extras: bool) -> dict[str, list[str]]:
    """Plain statements of every extra that ran in a reduced form on this panel size, under
    the analysis that ran it (results.json lists them; the audit warns each once)."""
    out = {name: list(result.reduced_forms) for name, result in
           (("policies", a.policies), ("cutoffs", a.cutoffs), ("grouping", a.grouping),
            ("agreement", a.agreement), ("drift", a.drift), ("lens", a.lens)) if result is not None}
    if a.grouping is not None and a.grouping.n_pairs and not _group_pairs_written(a, full_extras):
        out["grouping"].append(f"How often each pair of raters shared a group ({a.grouping.n_pairs:,} pairs) "
                               f"is left out of the tables on panels of more than {GROUP_PAIRS_MAX_RATERS} "
                               "grouped raters; each group's stability is in results.json.")
    return out


def _reduced_forms(a: PhaseAnalyses, full_extras: bool) -> list[str]:
    return [t for texts in _reduced_forms_by_analysis(a, full_extras).values() for t in texts]


def _panel_entry(ph: PhaseData, a: PhaseAnalyses, connected: bool, full_extras: bool = False) -> dict:
    entry = {"phase": ph.label, "n_raters": len(ph.raters), "connected": connected}
    ag = a.agreement.to_dict() if a.agreement is not None else {}
    entry["icc"] = ag.get("icc")
    entry["alpha"] = ag.get("alpha")
    entry["fleiss_kappa"] = ag.get("fleiss_kappa")
    entry["gwet_ac1"] = ag.get("gwet_ac1")
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
    entry["rater_pairs"] = a.rater_pairs.to_dict() if a.rater_pairs is not None else None
    entry["lens_environment"] = (a.lens.to_dict().get("environment") if a.lens is not None else None)
    entry["excluded_proxies"] = (a.excluded.to_dict().get("proxies") if a.excluded is not None
                                 else None)
    entry["chance_flags"] = a.chance_flags.to_dict() if a.chance_flags is not None else None
    entry["files_needing_another_read"] = (list(a.files.needs_another_read())
                                           if a.files is not None else [])  # most likely to change first
    entry["files_change_level"] = a.files.change_level if a.files is not None else None
    entry["files_may_change"] = a.files.n_may_change() if a.files is not None else None
    entry["group_pairs_table"] = "group_pairs" if _group_pairs_written(a, full_extras) else None
    entry["reduced_forms"] = _reduced_forms(a, full_extras)
    return entry


def audit(study: JudgmentTable | StudySpec | str | Path, *, seed: int | None = None,
          n_boot: int = 1000, progress=None, full_extras: bool = False) -> AuditResult:
    """Audit a study: every analysis, for every phase.

    Parameters
    ----------
    study : a JudgmentTable (from :func:`calibrate.data.ingest.load_study`), a StudySpec, a spec
        dict or a spec path.
    seed : resampling seed; defaults to the spec's ``[study] seed``.
    n_boot : bootstrap resamples for the policy intervals.
    progress : optional callable taking a short step name (for a progress display).
    full_extras : run the heavy extras in full on any panel size (every reduced form README
        "Large panels" lists: grouping stability and its simulated test, the pair-level
        grouping table, the importance and curvature draws, the cut-off check's stopping
        rule, the agreement's simulated panels and bootstrap, the drift and lens-model
        resamples). By default large panels get a reduced form, stated in each panel's
        ``reduced_forms`` and warned.
    """
    _check_options(seed, n_boot)
    table = study if isinstance(study, JudgmentTable) else load_study(study)
    with one_blas_thread():
        return _audit(table, seed=seed, n_boot=n_boot, progress=progress, full_extras=full_extras)


def _audit(table: JudgmentTable, *, seed, n_boot, progress, full_extras) -> AuditResult:
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
        a = analyse_phase(table, ph, index, seed=seed, n_boot=n_boot, progress=progress,
                          full_extras=full_extras)
        analyses[ph.label] = a
        per_rater = {r["rater"]: r for r in ph_summary.per_rater}
        with collector_paused():  # plain dicts and lists: no cycles to collect
            raters += _rater_entries(ph, a, per_rater, spec)
            panels.append(_panel_entry(ph, a, ph_summary.connectedness.connected, full_extras))
        for name, result in (("policies", a.policies), ("retest", a.retest),
                             ("agreement", a.agreement), ("peer_agreement", a.peer_agreement),
                             ("severity", a.severity),
                             ("gstudy", a.gstudy), ("files", a.files), ("lens", a.lens),
                             ("alignment", a.alignment), ("excluded", a.excluded),
                             ("cutoffs", a.cutoffs), ("drift", a.drift), ("rater_pairs", a.rater_pairs),
                             ("homogeneity", a.homogeneity), ("grouping", a.grouping)):
            warnings += _warn_texts(ph.name, name, result)
        # Every reduced form is warned once, here, under the analysis that ran it.
        for name, texts in _reduced_forms_by_analysis(a, full_extras).items():
            warnings += _reduced_form_warnings(ph.name, name, texts)
        _collect_tables(tables, ph, a, full_extras)
        if a.policies is not None:
            with collector_paused():
                policies_out["phases"][ph.label] = captured_policies(a.policies, table.phase_design(ph))
            if a.grouping is not None:  # each group's common equation, for `calibrate score --group`
                policies_out["phases"][ph.label]["groups"] = [
                    {"group": g.group, "raters": list(g.raters), "weights": dict(g.weights)}
                    for g in a.grouping.groups]
    _add_rater_changes(raters, table, seed)
    tables = {"raters": _rater_table(raters), "data_summary": summary.to_frame(), **tables,
              "notes": notes_frame(warnings, unnamed_phase=(table.phases[0].label if len(table.phases) == 1
                                                            and table.phases[0].name is None else None))}
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
                  "cut_off": spec.judgment.cut_off, "labels": dict(spec.judgment.labels),
                  "repeats": table.phases[0].repeat_mode if table.phases else "first-two"},
        rubric=(None if not spec.rubric else {"basis": spec.rubric_basis, "shares": dict(spec.rubric)}),
        criterion_only_for_selected=spec.criterion_only_for_selected,
        provenance={"spec": spec_record(spec), "libraries": library_versions()},
    )


# Each rater's before/after figures in the audit: the comparison's per-rater changes with the
# same case resamples and seed as ``calibrate compare``, so a rater's own report and the
# training report give the same interval and the same word for the same change (with 400
# resamples they differed in the second decimal, and a word could flip at an interval's edge).
CHANGE_RESAMPLES = 1000
CHANGE_METRICS = ("r", "retest_r", "misallocation", "g_rubric", "r_a", "g")


def _add_rater_changes(raters: list[dict], table: JudgmentTable, seed: int) -> None:
    """Give every rater entry ``changes``: with two phases or more, this rater's change into
    this phase from each earlier one (metric -> list), with its interval, verdict and sentence;
    null otherwise (the reason in ``unavailable``)."""
    named = [p.name for p in table.phases if p.name is not None]
    if len(named) < 2:
        for entry in raters:
            entry["changes"] = None
        return
    comparison = compare(table, seed=seed, n_boot=CHANGE_RESAMPLES).to_dict()
    by_rater = {r["rater"]: r for r in comparison["raters"]}
    for entry in raters:
        found = by_rater.get(entry["rater"])
        if found is None or entry["phase"] == named[0]:
            entry["changes"] = None
            entry.setdefault("unavailable", {})["changes"] = (
                "the first phase has no earlier one to compare with" if found is not None
                else "this rater is not in every phase")
            continue
        changes = {}
        for metric in CHANGE_METRICS:
            block = found["metrics"].get(metric)
            if block is None:
                continue
            into = []
            for ch in block["changes"]:
                if ch["to"] != entry["phase"]:
                    continue
                item = {**ch, "value_from": block["values"].get(ch["from"]),
                        "value_to": block["values"].get(ch["to"])}
                item["sentence"] = rater_change_sentence(metric, item)
                into.append(item)
            changes[metric] = into
        entry["changes"] = changes


def _check_options(seed, n_boot) -> None:
    """The audit's own options, checked before any work (a user error, not a traceback)."""
    check_seed(seed)
    if (isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer))
            or not (int(n_boot) == 0 or int(n_boot) >= 20)):
        raise CalibrateError(f"n_boot (bootstrap resamples for the policy intervals) must be a whole "
                             f"number of 20 or more (1000 by default), or 0 for no intervals; got {n_boot!r}.")


# The libraries whose versions can change a figure or a report; read from the installed
# distributions (no time, no host name), so a rerun in the same environment gives the same bytes.
# numba: the compiled grouping and cut-off search of panels of 200 or 400 raters and more.
_KEY_LIBRARIES = ("numpy", "scipy", "pandas", "statsmodels", "matplotlib", "reportlab", "openpyxl", "numba")


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


def _collect_tables(tables: dict[str, pd.DataFrame], ph: PhaseData, a: PhaseAnalyses,
                    full_extras: bool = False) -> None:
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
                 "rater_pairs", "grouping"):
        result = getattr(a, name)
        frames[name] = None if result is None else result.to_frame()
    if a.gstudy is not None:
        frames["readers_per_file"] = pd.DataFrame(a.gstudy.to_dict()["d_study"])
    if a.agreement is not None:
        detail = a.agreement.to_dict().get("icc_detail") or {}
        categories = [{"form": c["coefficient"], "label": c["label"], "estimate": c["estimate"],
                       "ci_low": c["ci_low"], "ci_high": c["ci_high"], "method": c["method"]}
                      for c in a.agreement.to_dict().get("category_detail", [])]
        frames["agreement"] = pd.DataFrame(detail.get("forms", []) + categories)
    if a.chance_flags is not None:
        frames["chance_flags"] = a.chance_flags.to_frame()
    if a.grouping is not None:
        frames["group_merges"] = a.grouping.merge_frame()
        frames["groups"] = a.grouping.groups_frame()
        if _group_pairs_written(a, full_extras):
            frames["group_pairs"] = a.grouping.pairs_frame()
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


# --------------------------------------------------------------------------- chance flags

#: Flags that come from a test of every rater; one Holm family per phase controls them.
TESTED_FLAGS = ("curvature", "cutoff_rule", "drift", "excluded_attribute", "low_retest")
#: Flags from a fixed rule (thresholds of our own, see README "Flags"); not in the family.
RULE_FLAGS = ("inconsistent", "lenient", "severe", "narrow_range", "wide_range", "central_tendency")
#: Flags that state a condition of the data, not the outcome of a test.
DATA_CONDITIONS = ("too_few_cases", "not_fitted", "few_cases", "collinear_cues", "separation")
CHANCE_ALPHA = 0.05
CHANCE_SCHEME = ("Holm (1979) step-down at 5% across every tested flag of the phase together: "
                 "all raters x (curvature, cutoff_rule, drift on leniency and on consistency, "
                 "excluded_attribute per attribute, low_retest)")
CUTOFF_MAX_DRAWS = 99_999
_POLICY_FLAG_ORDER = ["not_fitted", "few_cases", "collinear_cues", "curvature", "inconsistent", "separation"]


@dataclass(frozen=True)
class ChanceFlags:
    """Every tested flag of one phase, decided together (Holm 1979 across all of them).

    Under Holm at ``alpha`` the chance that a panel of raters none of whom has the
    tested property shows at least one tested flag is at most ``alpha``, whatever the
    dependence between the tests (Holm 1979, Scand. J. Statist. 6:65-70); the expected
    number of such flags is about ``alpha`` as well (Bonferroni's first step gives
    exactly ``m * alpha / m``; Holm's later steps add terms of order ``alpha^2``).
    """

    alpha: float
    tests: pd.DataFrame   # rater, flag, test, p_value, p_panel, flagged

    @property
    def n_tests(self) -> int:
        return int(len(self.tests))

    def flagged(self, rater: str, flag: str, test: str | None = None) -> bool:
        if test is not None:
            return (rater, flag, test) in self._flagged_tests
        return (rater, flag) in self._flagged_pairs

    @cached_property
    def _flagged_tests(self) -> frozenset:
        shown = self.tests[self.tests["flagged"]]
        return frozenset(shown[["rater", "flag", "test"]].itertuples(index=False, name=None))

    @cached_property
    def _flagged_pairs(self) -> frozenset:
        return frozenset((r, f) for r, f, _ in self._flagged_tests)

    def level_for(self, rater: str, flag: str) -> float:
        """The p-value at or below which this rater's ``flag`` test would have been flagged.

        With ``k`` other tests of the phase flagged, Holm flags this one exactly when
        its p-value is at most ``alpha / (m - k)`` (the others held as they are).
        """
        others = sum(1 for r, f, _ in self._flagged_tests if (r, f) != (rater, flag))
        return self.alpha / max(self.n_tests - others, 1)

    def to_dict(self) -> dict:
        shown = self.tests[self.tests["flagged"]]
        per_flag = {f: int((self.tests["flag"] == f).sum()) for f in TESTED_FLAGS}
        return jsonable({
            "scheme": "holm",
            "method": CHANCE_SCHEME,
            "alpha": self.alpha,
            "n_tests": self.n_tests,
            "tests_per_flag": per_flag,
            "n_raters_tested": int(self.tests["rater"].nunique()),
            "panelwise_rate": self.alpha if self.n_tests else 0.0,
            "expected_chance_flags": self.alpha if self.n_tests else 0.0,
            "flags_shown": int(len(shown[["rater", "flag"]].drop_duplicates())),
            "raters_flagged": int(shown["rater"].nunique()),
            "tested_flags": list(TESTED_FLAGS),
            "rule_flags": list(RULE_FLAGS),
            "data_conditions": list(DATA_CONDITIONS),
        })

    def to_frame(self) -> pd.DataFrame:
        return self.tests.copy()


def _tested_p_values(policies, cutoffs, drift_result, excluded, retest_set) -> list[tuple]:
    """(rater, flag, test, p-value) of every test behind a tested flag in one phase."""
    rows = []
    if policies is not None:
        rows += [(p.rater, "curvature", "reset", p.reset["p_value"]) for p in policies.raters
                 if "not_fitted" not in p.flags]
    if cutoffs is not None:
        rows += [(r.rater, "cutoff_rule", "step", r.p_value) for r in cutoffs.raters]
    if drift_result is not None:
        for r in drift_result.raters:
            rows += [(r.rater, "drift", "leniency", r.p_value),
                     (r.rater, "drift", "consistency", r.consistency_p_value)]
    if excluded is not None:
        rows += [(r.rater, "excluded_attribute", t.attribute, t.p_value)
                 for r in excluded.raters for t in r.tests]
    rows += [(r.rater, "low_retest", "fisher_z" if r.measure == "first_repeat_r" else "f_icc_c1", r.low_p)
             for r in retest_set.raters]
    return rows


def control_chance_flags(policies, cutoffs, drift_result, excluded, retest_set, *,
                         alpha: float = CHANCE_ALPHA):
    """Decide every tested flag of a phase together; return the updated results and the record.

    Each result object keeps its own per-family ``p_adjusted`` computation for
    stand-alone use; here ``p_adjusted`` and ``flagged`` are replaced by the
    phase-wide Holm values, so results.json, the tables and the reports all read one
    decision.
    """
    rows = [r for r in _tested_p_values(policies, cutoffs, drift_result, excluded, retest_set)
            if np.isfinite(r[3])]
    tests = pd.DataFrame(rows, columns=["rater", "flag", "test", "p_value"])
    tests["p_panel"] = holm_adjust(tests["p_value"].to_numpy(float)) if rows else []
    tests["flagged"] = tests["p_panel"] < alpha
    record = ChanceFlags(alpha=alpha, tests=tests)
    panel_p = {(r, f, t): q for r, f, t, q in tests[["rater", "flag", "test", "p_panel"]].itertuples(index=False)}
    nan = float("nan")

    if policies is not None:
        updated = []
        for p in policies.raters:
            q = panel_p.get((p.rater, "curvature", "reset"), nan)
            flags = [f for f in p.flags if f != "curvature"]
            notes = [w for w in p.warnings if not w.startswith(CURVATURE_NOTE.split("{")[0])]
            if q < alpha:
                flags = sorted(flags + ["curvature"], key=_POLICY_FLAG_ORDER.index)
                notes.append(CURVATURE_NOTE.format(p=q, scope="across every tested flag of the phase"))
            updated.append(replace(p, flags=tuple(flags), warnings=tuple(notes),
                                   reset={**p.reset, "p_adjusted": q}))
        policies = replace(policies, raters=tuple(updated),
                           warnings=tuple(f"Rater '{p.rater}': {w}" for p in updated for w in p.warnings))
    if cutoffs is not None:
        cutoffs = replace(cutoffs, raters=tuple(
            replace(r, p_adjusted=panel_p.get((r.rater, "cutoff_rule", "step"), nan),
                    flagged=record.flagged(r.rater, "cutoff_rule")) for r in cutoffs.raters))
    if drift_result is not None:
        updated = []
        for r in drift_result.raters:
            q_len = panel_p.get((r.rater, "drift", "leniency"), nan)
            q_con = panel_p.get((r.rater, "drift", "consistency"), nan)
            reasons = tuple(label for label, q in (("leniency", q_len), ("consistency", q_con)) if q < alpha)
            updated.append(replace(r, p_adjusted=q_len, consistency_p_adjusted=q_con,
                                   flagged=bool(reasons), reasons=reasons))
        drift_result = replace(drift_result, raters=tuple(updated),
                               method=drift_result.method.replace(
                                   "Holm across raters and both tests",
                                   "Holm across every tested flag of the phase, both drift tests included"))
    if excluded is not None:
        updated = []
        for r in excluded.raters:
            tests_r = tuple(replace(t, p_adjusted=panel_p.get((r.rater, "excluded_attribute", t.attribute), nan),
                                    flagged=record.flagged(r.rater, "excluded_attribute", t.attribute))
                            for t in r.tests)
            flags = ("excluded_attribute",) if any(t.flagged for t in tests_r) else ()
            updated.append(replace(r, tests=tests_r, flags=flags))
        excluded = replace(excluded, raters=tuple(updated))
    retest_set = replace(retest_set, raters=tuple(
        replace(r, flags=("low_retest",) if record.flagged(r.rater, "low_retest") else (),
                flag_detectable_below=r.reach(record.level_for(r.rater, "low_retest")))
        for r in retest_set.raters))
    return policies, cutoffs, drift_result, excluded, retest_set, record


def planned_tests(n_raters: int, *, sequence: bool, n_excluded: int, repeats: bool) -> int:
    """How many tests the phase's Holm family will hold (before the tests are run)."""
    return n_raters * (2 + 2 * sequence + n_excluded + repeats)
