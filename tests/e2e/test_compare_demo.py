"""On the demo, the planted training effect (error cut, weights moved toward the rubric for the
trained reviewers) is found for them and not for the controls."""

import json

import numpy as np
import pytest

from calibrate.data import load_study, write_demo
from calibrate.data.demo import REVIEWERS
from calibrate.training import compare


def _valid(out):
    import jsonschema

    from calibrate.output.tables import comparison_schema

    jsonschema.validate(json.loads(json.dumps(out.to_dict())), comparison_schema())


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    files = write_demo(tmp_path_factory.mktemp("demo"))
    return compare(load_study(files.spec), n_boot=400)


def test_trained_reviewers_moved_toward_the_rubric_and_controls_did_not(result):
    for r in result.raters:
        change = r.metrics["misallocation"]["changes"][0]
        assert r.trained == REVIEWERS[r.rater][1]
        if r.trained:
            assert change.ci_high < 0, r.rater
    controls = [r.metrics["misallocation"]["changes"][0] for r in result.raters if not r.trained]
    # Seven controls at the 5% level: at most one chance finding of a drop is expected.
    assert sum(c.ci_high < 0 for c in controls) <= 1
    arms = result.panel["metrics"]["misallocation"]
    assert arms["trained"]["changes"][0]["p_value"] < 0.01
    assert arms["control"]["changes"][0]["p_value"] > 0.05


def test_difference_in_differences_excludes_zero(result):
    effect = result.panel["training_effect"]["misallocation"]
    assert effect["ci_high"] < 0
    assert effect["from"] == "before" and effect["to"] == "after"


def test_comparison_is_plain_json_and_same_seed_same_bytes(result, tmp_path):
    text = json.dumps(result.to_dict(), sort_keys=True)
    assert "NaN" not in text
    files = write_demo(tmp_path / "again")
    again = compare(load_study(files.spec), n_boot=400)
    assert json.dumps(again.to_dict(), sort_keys=True) == text


def test_cautions_say_the_cases_differ(result):
    assert any("different cases" in c for c in result.cautions)
    assert not any("no control group" in c for c in result.cautions)
    frame = result.to_frame()
    assert set(frame["metric"]) == {"r", "retest_r", "misallocation", "g_rubric", "severity", "r_a", "g"}
    assert np.isfinite(frame["delta"]).all()


def test_values_equal_the_audit_functions(result, tmp_path):
    from calibrate.lens.model import lens_model
    from calibrate.lens.rubric import rubric_alignment
    from calibrate.training.phases import _fit_first

    files = write_demo(tmp_path / "d")
    table = load_study(files.spec)
    for ph in table.phases:
        align = rubric_alignment(table.phase_design(ph), _fit_first(table, ph), table.spec.rubric,
                                 basis=table.spec.rubric_basis)
        lens = lens_model(table.phase_design(ph), _fit_first(table, ph), table.criterion,
                          rubric=table.spec.rubric, n_boot=0)
        for r in result.raters:
            mine = align.for_rater(r.rater)
            assert r.metrics["misallocation"]["values"][ph.name] == pytest.approx(mine.misallocation, abs=1e-9)
            assert r.metrics["g_rubric"]["values"][ph.name] == pytest.approx(mine.g_rubric, abs=1e-9)
            assert r.metrics["g"]["values"][ph.name] == pytest.approx(lens.for_rater(r.rater).g, abs=1e-9)
            for cue, share in mine.shares.items():
                assert r.shares[cue]["values"][ph.name] == pytest.approx(share, abs=1e-9)
            assert r.metrics["g_rubric"]["changes"][0].method.startswith("case bootstrap")


def test_without_a_trained_list_all_count_as_trained_and_the_caution_says_so(tmp_path):
    import dataclasses

    files = write_demo(tmp_path / "d")
    table = load_study(files.spec)
    table = dataclasses.replace(table, spec=dataclasses.replace(table.spec, trained=None))
    out = compare(table, n_boot=100)
    assert out.has_control is False and all(r.trained for r in out.raters)
    assert out.panel["training_effect"] is None
    assert set(out.panel["metrics"]["r"]) == {"trained"}
    assert any("no control group" in c and "cannot be credited to the training alone" in c
               for c in out.cautions)
    _valid(out)
    assert set(out.panel["convergence"]["pairwise_distance"]) == {"all"}
    assert all(v["control"] is None for v in out.panel["cue_shift"].values())


def test_summary_and_verdicts_say_what_the_intervals_say(result):
    assert result.summary[0].startswith("From before to after the trained raters improved more than "
                                        "the controls on")
    assert "closeness to the rubric's weights" in result.summary[0]
    for r in result.raters:
        ch = r.metrics["misallocation"]["changes"][-1]
        expected = ("better" if ch.ci_high < 0 else "worse" if ch.ci_low > 0 else "no clear change")
        assert r.verdicts["misallocation"] == expected
        if r.trained:
            assert r.verdicts["misallocation"] == "better"


def test_training_report_first_page_answers_in_words(result):
    from calibrate.report.training import training_pdf
    from tests.pdf_text import page_texts

    doc = result.to_dict()
    doc["study"]["name"] = "Invented panel"
    pages = [" ".join(t.split()) for t in page_texts(training_pdf(doc))]
    first = pages[0]
    assert "Did the training work?" in first
    # A sentence each: it worked on the rubric (the planted effect), for the trained raters
    # and not the controls, and whether it lasts cannot be told without a follow-up.
    assert "Did it work? Yes, on closeness to the rubric's weights" in first
    assert "closeness to the rubric's weights 7 of 7 trained and" in first
    assert "Does it last? Cannot be told: the study ends with phase" in first
    assert "different case sets" in first and "institution's policies" in " ".join(pages)


def test_a_follow_up_phase_gives_every_change_and_whether_it_lasted(tmp_path):
    import shutil

    files = write_demo(tmp_path / "d")
    folder = files.spec.parent
    shutil.copy(folder / "judgments_spring.csv", folder / "judgments_followup.csv")
    text = files.spec.read_text()
    text = text.replace('{ path = "judgments_spring.csv", phase = "after" },',
                        '{ path = "judgments_spring.csv", phase = "after" },\n'
                        '  { path = "judgments_followup.csv", phase = "followup" },')
    text = text.replace('order = ["before", "after"]', 'order = ["before", "after", "followup"]')
    files.spec.write_text(text)
    out = compare(load_study(files.spec), n_boot=100)
    assert out.phases == ("before", "after", "followup")
    pairs = [(c.from_phase, c.to_phase) for c in out.raters[0].metrics["r"]["changes"]]
    assert pairs == [("before", "after"), ("after", "followup"), ("before", "followup")]
    # The follow-up repeats the after round exactly: no change at all, nothing slipped back.
    assert all(r.metrics["r"]["changes"][1].delta == pytest.approx(0, abs=1e-12) for r in out.raters)
    assert out.summary[-1] == ("From after to followup the trained raters did not slip back clearly "
                               "on any measure.")
    effect = out.panel["training_effect"]["misallocation"]
    assert (effect["from"], effect["to"]) == ("before", "followup") and effect["ci_high"] < 0
    # Does it last: the follow-up effect, end of training to follow-up, in the same form.
    follow = out.panel["follow_up_effect"]["misallocation"]
    assert (follow["from"], follow["to"]) == ("after", "followup")
    assert follow["estimate"] == pytest.approx(0, abs=1e-12)
    # The follow-up judged the same cases against the same outcome: the dependent test.
    assert out.raters[0].metrics["r_a"]["changes"][1].method.startswith("Williams' T2")
    assert out.raters[0].metrics["misallocation"]["changes"][1].comparable is True
    _valid(out)


def test_every_change_says_what_it_could_detect_and_whether_it_is_comparable(result):
    # The demo's two rounds read different applicants: R_s (adjusted) and severity are
    # comparable, the weight figures are not and say so; every change names its detectable size.
    for r in result.raters:
        for name, block in r.metrics.items():
            for ch in block["changes"]:
                assert ch.detectable > 0, (r.rater, name)
                assert ch.comparable is (name in ("r", "severity")), name
                assert (ch.note is None) is ch.comparable
        assert set(r.shares) == set(result.to_dict()["raters"][0]["shares"])
        assert r.metrics["r"]["changes"][0].method.startswith("change in Wherry-adjusted R_s")
        assert "Fisher z" in r.metrics["r_a"]["changes"][0].method  # different cases: independent
    panel = result.panel
    assert panel["agreement"]["same_cases"] is False
    assert panel["agreement"]["icc"]["changes"][0]["comparable"] is False
    assert set(panel["convergence"]["pairwise_distance"]) == {"trained", "control"}
    rubric = panel["convergence"]["distance_to_rubric"]
    # The planted effect: the trained raters' profiles moved toward the rubric, the controls' did not.
    assert rubric["trained"]["changes"][0]["ci_high"] < 0
    assert rubric["control"]["changes"][0]["ci_low"] < 0 < rubric["control"]["changes"][0]["ci_high"]
    assert set(panel["groups"]["values"]) == {"before", "after"}
    assert set(panel["cue_shift"]) == set(r.shares)
    assert panel["detectable"]["misallocation"]["panel"] > 0
    assert "follow_up_effect" not in panel  # two phases: nothing to say about lasting


def test_jobs_do_not_change_the_result(tmp_path):
    files = write_demo(tmp_path / "d")
    one = compare(load_study(files.spec), n_boot=60, jobs=1)
    two = compare(load_study(files.spec), n_boot=60, jobs=2)
    assert json.dumps(one.to_dict(), sort_keys=True) == json.dumps(two.to_dict(), sort_keys=True)


def test_without_rubric_or_criterion_the_figures_that_need_them_are_left_out(tmp_path):
    import re

    files = write_demo(tmp_path / "d")
    text = re.sub(r"\[rubric\][^\[]*", "", files.spec.read_text())
    text = text.replace('criterion = "first_year_result"\n', "").replace(
        "criterion_only_for_selected = true\n", "")
    files.spec.write_text(text)
    out = compare(load_study(files.spec), n_boot=50)
    _valid(out)
    assert set(out.raters[0].metrics) == {"r", "retest_r", "severity"}
    assert out.panel["convergence"]["distance_to_rubric"] is None
    assert all(v["rubric_share"] is None and v["toward_rubric"] is None
               for v in out.panel["cue_shift"].values())
    assert out.raters[0].shares  # the shares need no rubric


def test_a_raters_own_report_and_the_training_report_give_the_same_change(tmp_path):
    # the audit's per-rater changes (each rater's before/after section) use the same resamples
    # and seed as compare, so the interval and the word agree to the last digit
    from calibrate.analyses import _add_rater_changes

    table = load_study(write_demo(tmp_path / "d").spec)
    entries = [{"rater": r, "phase": ph.label} for ph in table.phases for r in ph.raters]
    _add_rater_changes(entries, table, table.spec.seed)
    full = {r["rater"]: r for r in compare(table, seed=table.spec.seed).to_dict()["raters"]}
    checked = 0
    for e in entries:
        for metric, items in (e["changes"] or {}).items():
            for ch in items:
                same = next(c for c in full[e["rater"]]["metrics"][metric]["changes"]
                            if (c["from"], c["to"]) == (ch["from"], ch["to"]))
                assert (ch["ci_low"], ch["ci_high"], ch["verdict"]) == (same["ci_low"], same["ci_high"],
                                                                        same["verdict"])
                checked += 1
    assert checked >= 14 * 3


def test_the_rs_training_effect_reads_one_quantity_throughout(result, tmp_path):
    # Welch's t, the baseline screen and the ANCOVA of R_s all read Wherry's adjusted R_s:
    # recomputed here from the printed (raw) R_s, each rater's cases and the design's terms,
    # the per-rater changes, the ANCOVA (statsmodels OLS) and the baseline difference agree.
    import pandas as pd
    import statsmodels.formula.api as smf

    from calibrate.data.rows import line_up
    from calibrate.training.phases import _fit_first, wherry_adjusted_r

    table = load_study(write_demo(tmp_path / "d").spec)
    adjusted = {}
    for ph in table.phases:
        first = _fit_first(table, ph)
        terms = line_up(table.phase_design(ph), first).X.shape[1]
        cases = first.groupby("rater").size()
        adjusted[ph.name] = np.array([wherry_adjusted_r(r.metrics["r"]["values"][ph.name], cases[r.rater], terms)
                                      for r in result.raters])
    before, after = adjusted["before"], adjusted["after"]
    deltas = np.array([r.metrics["r"]["changes"][0].delta for r in result.raters])
    assert deltas == pytest.approx(after - before, abs=1e-12)
    arm = np.array([r.trained for r in result.raters], dtype=float)
    effect = result.panel["training_effect"]["r"]
    fit = smf.ols("after ~ before + arm", pd.DataFrame({"after": after, "before": before, "arm": arm})).fit()
    assert effect["ancova"]["estimate"] == pytest.approx(fit.params["arm"], rel=1e-9)
    assert (effect["ancova"]["ci_low"], effect["ancova"]["ci_high"]) == pytest.approx(
        tuple(fit.conf_int().loc["arm"]), rel=1e-9)
    assert effect["baseline_difference"] == pytest.approx(before[arm == 1].mean() - before[arm == 0].mean(),
                                                          rel=1e-9)
    assert "Wherry-adjusted" in effect["method"]
