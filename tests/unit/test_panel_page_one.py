"""The chair's page 1 and the lens-model section say what their numbers say (issue 14, items 2-3).

Two small invented panels go through the real audit: one with a recorded outcome in which
every rater reads only 24 files (so `few_cases`, under 10 cases per weight, fires for
every rater), and one without an outcome in which three raters read 24 files and the
others 40 (it fires for some). A copy of each with every flag cleared gives the panel in
which none fires. For every variant page 1 of the panel summary is
rendered and its text read back; each sentence is checked against the figures in
results.json it states: the reason and figure given for every flagged rater, the
reliability of the decisions with its interval and words, "policies alike?", the lens
count, and the three next steps (which reader, which cue, how many readers per file).
"""

from __future__ import annotations

import copy
import re

import numpy as np
import pandas as pd
import pytest

from calibrate.analyses import audit
from calibrate.report import wording
from calibrate.report._read import ReportInput
from calibrate.report.builder import panel_pdf
from calibrate.report.panel import PanelReport
from calibrate.report.view import FlagFigure
from tests.cue_step_panels import claim_rate
from tests.helpers import write_study
from tests.pdf_text import page_texts

CUES = 'x1 = "numeric"\nx2 = "numeric"\nx3 = "numeric"'


def _study(tmp_path, name: str, *, criterion: bool, seed: int, few_for=()) -> ReportInput:
    """Eight raters read 40 files each, the raters in ``few_for`` only the first 24 (six
    shown twice): two lean on x3 instead of x1, one runs high, one is noisy; the outcome
    follows x1 and x2."""
    rng = np.random.default_rng(seed)
    n_cases = 40
    x = rng.normal(size=(n_cases, 3))
    cases = pd.DataFrame({"case": [f"f{i + 1:02d}" for i in range(n_cases)],
                          "x1": x[:, 0].round(3), "x2": x[:, 1].round(3), "x3": x[:, 2].round(3),
                          "outcome": (x @ np.array([0.7, 0.4, 0.0]) + rng.normal(0, 0.6, n_cases)).round(3)})
    rows = []
    for r in range(8):
        weights = np.array([0.1, 0.3, 0.8]) if r in (1, 5) else np.array([0.8, 0.4, 0.1])
        noise = 1.2 if r == 3 else 0.4
        shift = 1.2 if r == 6 else 0.0
        order = list(range(24 if r in few_for else n_cases)) + list(range(6))
        for seq, c in enumerate(order):
            score = np.clip(np.round(4 + 1.2 * (x[c] @ weights + shift) + noise * rng.normal()), 1, 7)
            rows.append({"rater": f"Reader{r + 1}", "case": cases["case"][c], "score": score, "seq": seq + 1})
    extra_columns = ('criterion = "outcome"\n' if criterion else "") + 'sequence = "seq"'
    path = write_study(tmp_path / name, pd.DataFrame(rows), cases=cases, cues=CUES,
                       extra_columns=extra_columns)
    result = audit(path, seed=seed, n_boot=200)
    return ReportInput(results=result.to_dict(), tables={})


@pytest.fixture(scope="module")
def panels(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("page_one")
    return {"criterion": _study(tmp, "with", criterion=True, seed=3, few_for=range(8)),
            "no_criterion": _study(tmp, "without", criterion=False, seed=4, few_for=(0, 1, 2))}


def _with_flags(data: ReportInput, pattern: str) -> ReportInput:
    """The audit's own results, or a copy with every flag cleared ("none")."""
    if pattern != "none":
        return data
    results = copy.deepcopy(data.results)
    for e in results["raters"]:
        e["flags"] = []
    return ReportInput(results=results, tables={})


def _page_one(data: ReportInput) -> str:
    return " ".join(page_texts(panel_pdf(data))[0].split())


def _flat(value: str) -> str:
    return " ".join(value.split())


VARIANTS = [("criterion", "all"), ("criterion", "none"), ("no_criterion", "some"), ("no_criterion", "none")]


@pytest.mark.parametrize(("label", "pattern"), VARIANTS)
def test_page_one_states_what_its_numbers_say(panels, label, pattern):
    data = _with_flags(panels[label], pattern)
    view = data.view
    page = _page_one(data)
    report = PanelReport(data)
    entries = view.entries_in(None)
    assert len(entries) == 8

    # flags that fire for every rater: once for the panel, never per rater
    shared = report.panel_wide(None)
    few_raters = {e.rater for e in entries if "few_cases" in e.flags}
    assert len(few_raters) == {"all": 8, "some": 3, "none": 0}[pattern]   # the pattern is really there
    for e in entries:
        if "few_cases" in e.flags:
            assert e.evidence["few_cases"].value < 10
    if pattern == "all":
        assert "few_cases" in shared
        sentence = wording.panel_wide_flag_sentence("few_cases", [e.evidence.get("few_cases") for e in entries], 8)
        assert _flat(sentence) in page
        values = [e.evidence["few_cases"].value for e in entries]
        assert wording.fmt(min(values), 1) in sentence and wording.fmt(max(values), 1) in sentence
        assert page.count(wording.flag_words("few_cases")) == 1
    else:
        assert "few_cases" not in shared
        assert "All 8 raters" not in page

    # every flag that has a figure in results.json carries it into the view
    for e in entries:
        for flag in e.flags:
            if flag not in ("not_fitted", "separation"):
                assert e.evidence[flag].value is not None or e.evidence[flag].p_adjusted is not None, flag

    # who needs a conversation: each flagged rater with each reason and its figure
    rows = report.conversation_rows()
    flagged = {e.rater for e, _ in rows}
    if pattern == "none":
        assert not rows and "No rater was flagged." in page
    for e, own in rows:
        assert not set(own) & set(shared)
        assert e.rater in page
        for flag in own:
            reason = wording.flag_reason(flag, e.evidence.get(flag))
            assert _flat(reason) in page, reason
            figure = e.evidence.get(flag)
            if figure is not None and figure.value is not None and figure.measure == "r_s":
                assert f"R_s = {wording.fmt(e.policy.r)}" in reason
            if figure is not None and figure.measure == "offset":
                assert wording.fmt(abs(e.severity.offset)) in reason
    if pattern == "some":
        few = {e.rater for e, own in rows if "few_cases" in own}
        assert few == few_raters == {"Reader1", "Reader2", "Reader3"}
    for e in entries:
        if e.rater not in flagged:
            assert not (set(e.flags) - set(shared))
    for code in ("cutoff_rule", "few_cases", "low_retest", "excluded_attribute", "central_tendency"):
        assert code not in page
    assert "phase" not in page.lower()     # a study without phases prints none

    # the decisions as the files were read, beside one reader alone
    panel = view.panel(None)
    ak, ak_ci = panel.icc.estimates["ak"], panel.icc.intervals["ak"]
    a1, a1_ci = panel.icc.estimates["a1"], panel.icc.intervals["a1"]
    k = panel.icc.readers_per_case
    decision = wording.decision_reliability_text(ak, ak_ci, k)
    assert _flat(decision) in page
    assert f"{wording.fmt(ak)}, 95% interval {wording.fmt(ak_ci[0])} to {wording.fmt(ak_ci[1])}" in decision
    assert wording.readers_text(k) in decision
    for value, interval in ((ak, ak_ci), (a1, a1_ci)):
        words = wording.icc_verdict(value, interval)
        ends = {wording.ICC_BANDS.words(interval[0]), wording.ICC_BANDS.words(interval[1])}
        assert set(words.split(" to ")) == ends
        assert wording.ICC_BANDS.words(value) in [b.words for b in wording.ICC_BANDS.bands
                                                  if interval[0] < b.high and interval[1] >= b.low]
    assert _flat(wording.single_reader_text(a1, a1_ci)) in page

    # policies alike? answered in words that follow the p-value
    p = panel.homogeneity[1]
    answer = wording.policies_alike_answer(p)
    assert _flat(answer) in page
    assert answer.startswith("No:") == (p < 0.05)
    assert "Policies alike? (p)" not in page

    # the lens result only when there is a criterion, and its counts
    lens = [e.lens for e in entries if e.lens is not None]
    if label == "criterion":
        assert lens
        sentence = PanelReport._lens_line([e for e in entries if e.lens is not None])
        assert _flat(sentence) in page
        better = sum(v.verdict == "model_better" for v in lens)
        assert sentence.startswith(f"{better} of {len(lens)} raters were out-predicted")
        for v in lens:
            if v.verdict == "model_better":
                assert v.gain_interval[0] > 0
    else:
        assert not lens and "Lens model" not in page and "out-predicted" not in page

    # three next steps, each drawn from the numbers
    _, steps = report.next_steps()
    assert len(steps) == 3
    for i, step in enumerate(steps, 1):
        assert _flat(f"{i}. {step}") in page
    talk = [(e, own) for e, own in rows if wording.flag_rank(own[0]) < len(wording.CONVERSATION_ORDER)]
    if talk:
        top = min(wording.flag_rank(own[0]) for _, own in talk)
        assert any(steps[0].startswith(f"Talk first with {e.rater}:") for e, own in talk
                   if wording.flag_rank(own[0]) == top)
    else:
        assert steps[0].startswith("No reader needs a conversation")
    cue, p_adj = wording.cue_to_discuss(panel.homogeneity_per_cue)
    smallest = min(p for _, p in panel.homogeneity_per_cue.values())
    assert panel.homogeneity_per_cue[cue][1] == smallest
    assert p_adj == pytest.approx(min(1.0, smallest * len(panel.homogeneity_per_cue)))
    assert cue in steps[1] and (steps[1].startswith("Agree as a panel") == (p_adj < 0.05))
    _check_readers_step(steps[2], panel)


def _check_readers_step(step: str, panel) -> None:
    """The readers-per-file step against the D-study: the target is the lowest not yet
    reached, the number of readers the first that reaches it, its reliability the table's."""
    phi = {row.raters: row.phi for row in panel.d_study}
    now = panel.icc.estimates["ak"]
    targets = sorted(float(t) for t in panel.readers_needed["phi"])
    unmet = [t for t in targets if now < t]
    if not unmet:
        assert step.startswith("Keep") and f"{wording.fmt(now)}" in step
        assert now >= targets[-1]
        sure = panel.icc.intervals["ak"][0] >= targets[-1]
        assert ("not yet sure" in step) == (not sure)
        return
    target = unmet[0]
    needed = panel.readers_needed["phi"][f"{target:.2f}"]
    if needed is None:
        assert step.startswith("No number of readers") and max(phi.values()) < target
        return
    if needed not in phi:
        assert f"Give each file {needed} readers (" in step and max(phi.values()) < target
        return
    assert phi[needed] >= target and all(phi[n] < target for n in phi if n < needed)
    assert f"Give each file {needed} readers (" in step or f"at least {needed} readers" in step
    assert f"to {wording.fmt(phi[needed])}" in step or f"reaches {wording.fmt(phi[needed])}" in step
    assert f"target {wording.fmt(target)}" in step


def test_the_lens_section_lists_every_rater_with_intervals(panels):
    data = panels["criterion"]
    texts = page_texts(panel_pdf(data))
    section = next(" ".join(t.split()) for t in texts if "Lens model: judgments against the outcome" in t)
    for e in data.view.raters:
        lens = e.lens
        assert e.rater in section
        for key, value in (("r_a", lens.r_a), ("g", lens.g), ("r_e", lens.r_e)):
            low, high = lens.intervals[key]
            assert f"{wording.fmt(value)} {wording.fmt(low)}, {wording.fmt(high)}" in section, (e.rater, key)
        assert wording.MODEL_VS_RATER_WORDS[lens.verdict] in section
    assert "Lens model: judgments against the outcome" not in " ".join(page_texts(panel_pdf(panels["no_criterion"])))


# ------------------------------------------------------------------ the verdict functions alone


def test_icc_words_follow_the_interval():
    assert wording.icc_verdict(0.80, (0.76, 0.85)) == "good"
    assert wording.icc_verdict(0.79, (0.75, 0.82)) == "good"
    assert wording.icc_verdict(0.77, (0.70, 0.83)) == "moderate to good"
    assert wording.icc_verdict(0.48, (0.30, 0.93)) == "poor to excellent"
    assert wording.icc_verdict(None, None) == "not available"


def test_policies_alike_never_says_yes():
    assert wording.policies_alike_answer(0.0005) == "No: the raters weigh the cues differently (p < 0.001)."
    assert wording.policies_alike_answer(0.031).startswith("No: ") and "p = 0.031" in \
        wording.policies_alike_answer(0.031)
    calm = wording.policies_alike_answer(0.4)
    assert calm.startswith("Not shown to differ") and "p = 0.400" in calm and "not proof" in calm


def test_panel_wide_flags_need_every_rater_and_two_of_them():
    assert wording.panel_wide_flags([("few_cases", "drift"), ("few_cases",)]) == ("few_cases",)
    assert wording.panel_wide_flags([("few_cases",), ()]) == ()
    assert wording.panel_wide_flags([("few_cases",)]) == ()
    figures = [FlagFigure("cases_per_term", 4.7), FlagFigure("cases_per_term", 4.7)]
    assert "(4.7 cases per weight for each)" in wording.panel_wide_flag_sentence("few_cases", figures, 2)
    figures = [FlagFigure("cases_per_term", 4.7), FlagFigure("cases_per_term", 6.25)]
    assert "(4.7 to 6.2 cases per weight)" in wording.panel_wide_flag_sentence("few_cases", figures, 2)


def test_readers_step_in_each_case():
    assert wording.readers_target({"0.70": 3, "0.80": 5}, 0.79) == (0.80, 5)
    assert wording.readers_target({"0.70": 3, "0.80": 5}, 0.65) == (0.70, 3)
    assert wording.readers_target({"0.70": 3, "0.80": 5}, 0.84) == (0.80, 5)
    step = wording.step_readers(4.0, 0.79, 0.80, 5, 0.82)
    assert step == ("Give each file 5 readers (4, one more): the reliability of the "
                    "decisions would rise from 0.79 to 0.82 (target 0.80).")
    assert wording.step_readers(4.0, 0.84, 0.80, 5, 0.86, (0.81, 0.87)).startswith(
        "Keep 4 readers per file: the decisions already reach a reliability of 0.84, 95% interval 0.81 to 0.87")
    assert "not yet sure" in wording.step_readers(4.0, 0.84, 0.80, 5, 0.86, (0.78, 0.87))
    # 4 > 3.6 readers on average: more readers, not 'at least'
    assert wording.step_readers(3.6, 0.72, 0.80, 4, 0.81).startswith(
        "Give each file 4 readers (now 3.6 readers per file on average):")
    assert wording.step_readers(4.3, 0.78, 0.80, 4, 0.80).startswith("Give every file at least 4 readers")
    assert wording.step_readers(2.0, 0.40, 0.80, None, None).startswith("No number of readers per file")
    beyond = wording.step_readers(4.0, 0.40, 0.80, 24, None)   # 24 readers: past the printed table
    assert beyond.startswith("Give each file 24 readers (4, 20 more)") and "from 24 readers" in beyond


def test_flag_reasons_carry_their_figure_and_interval():
    offset = FlagFigure("offset", -0.454, (-0.596, -0.312))
    assert wording.flag_reason("severe", offset) == (
        "judgments run lower than the panel's on the same cases (offset -0.45 scale points, "
        "95% interval -0.60 to -0.31)")
    attr = FlagFigure("added_r2", 0.0687, p_adjusted=1.9e-7, about="alumni_family")
    assert wording.flag_reason("excluded_attribute", attr).endswith("(alumni_family adds R² 0.069, p (Holm) <0.001)")
    assert wording.flag_reason("drift", None) == wording.flag_words("drift")
    for flag in wording.FLAG_WORDS:
        assert "_" not in wording.flag_words(flag)
    assert re.search(r"\d", wording.step_conversation("Wren", "drift", FlagFigure("drift_level", 1.43, (1.05, 1.82),
                                                                                 3e-9)))


def test_step_one_names_the_others_in_order():
    fig = FlagFigure("r_s", 0.44, (0.16, 0.61))
    assert wording.step_conversation("A", "inconsistent", fig).endswith("(R_s = 0.44, 95% interval 0.16 to 0.61).")
    assert wording.step_conversation("A", "inconsistent", fig, ["B"]).endswith(" Then B.")
    assert wording.step_conversation("A", "inconsistent", fig, ["B", "C"]).endswith(" Then B and C.")
    assert wording.step_conversation("A", "inconsistent", fig, list("BCDEF")).endswith(
        " Then B, C, D and 2 more (the every-rater table lists them all).")


def test_step_two_rarely_names_a_cue_when_raters_share_one_policy():
    """Seeded small version of benchmarks/bench_next_step_cue.py (400 panels: 2.8-4.5%)."""
    size, _ = claim_rate(30, n_raters=5, n_cases=20, n_cues=3, spread=0.0, seed=7, n_resamples=199)
    assert size <= 4 / 30
    _, power = claim_rate(10, n_raters=8, n_cases=30, n_cues=3, spread=0.45, seed=8, n_resamples=199)
    assert power >= 0.5


def test_every_flag_has_short_and_full_words():
    assert set(wording.FLAG_SHORT_WORDS) == set(wording.FLAG_WORDS)
    assert set(wording.CONVERSATION_ORDER) | set(wording.DATA_CONDITIONS) == set(wording.FLAG_WORDS)
    for flag in wording.FLAG_WORDS:
        assert "_" not in wording.flag_short(flag)


def test_a_shared_flag_about_judging_is_not_called_a_feature_of_the_study():
    drift = [FlagFigure("drift_level", 1.2, (0.5, 1.9), 0.001), FlagFigure("drift_level", 0.9, (0.2, 1.6), 0.01)]
    sentence = wording.panel_wide_flag_sentence("drift", drift, 2, "after")
    assert sentence.startswith("All 2 raters in phase after: judgments changed over the reading order.")
    assert "feature of the study" not in sentence and "stated once" in sentence


def test_flag_figures_read_the_figure_that_set_each_flag():
    from calibrate.report.view import flag_figures

    entry = {
        "n_cases": 18,
        "flags": ["drift", "excluded_attribute", "collinear_cues", "too_few_cases", "central_tendency"],
        "policy": {"gvif": {"a": 2.0, "b": 7.5}},
        "severity": {"central_tendency": {"middle_share": 0.52, "panel_middle_share": 0.31}},
        "drift": {"reasons": ["consistency"], "r_s_change": -0.2, "r_s_change_ci_low": -0.35,
                  "r_s_change_ci_high": -0.05, "consistency_p_adjusted": 0.01, "slope_per_session": 0.1},
        "excluded": {"x": {"flagged": True, "delta_r2": 0.02, "p_adjusted": 0.04},
                     "y": {"flagged": True, "delta_r2": 0.05, "p_adjusted": 0.001},
                     "z": {"flagged": False, "delta_r2": 0.09, "p_adjusted": 0.0001}},
    }
    found = flag_figures(entry, "results.raters[0]")
    assert found["drift"] == FlagFigure("drift_consistency", -0.2, (-0.35, -0.05), 0.01)
    assert found["excluded_attribute"] == FlagFigure("added_r2", 0.05, p_adjusted=0.001, about="y")
    assert found["collinear_cues"] == FlagFigure("vif", 7.5, about="b")
    assert found["too_few_cases"].value == 18
    assert wording.flag_figure_text(found["central_tendency"]) == (
        "52% of judgments in the middle of the scale, against 31% for the panel")
    assert flag_figures({"flags": []}, "r") == {}


def test_a_flag_shared_in_every_phase_is_said_once():
    figures = [FlagFigure("cases_per_term", 4.7)] * 4
    sentence = wording.panel_wide_flag_sentence("few_cases", figures, 2, every_phase=True)
    assert sentence.startswith("All 2 raters in every phase: few cases per cue")
