"""training-report.pdf and its words: every contract section rendered from a hand-made
comparison.json, sections left out with a reason when a key is absent, and no sentence
that contradicts its interval over many simulated comparisons."""

from __future__ import annotations

import copy
import itertools

import pytest

from calibrate.report.comparison_view import ABSENT_REASON, ComparisonView, ComparisonViewError
from calibrate.report.training import training_pdf
from calibrate.training.verdicts import METRIC_WORDS, answers, rater_change_sentence
from tests.comparison_fixtures import METRICS, full_comparison
from tests.pdf_text import page_texts

# Good direction of each metric, written out here apart from the code under test.
GOOD = {"r": 1, "retest_r": 1, "misallocation": -1, "g_rubric": 1, "r_a": 1, "g": 1}
CONTRACT_PANEL_KEYS = ("agreement", "convergence", "groups", "cue_shift", "detectable", "follow_up_effect")


def _clear(metric, low, high, sign):
    """The interval excludes zero on the side ``sign`` of the metric's good direction."""
    if metric not in GOOD or low is None or high is None:
        return False
    return (low > 0 if GOOD[metric] * sign > 0 else high < 0)


def _flat(pdf: bytes) -> list[str]:
    return [" ".join(t.split()) for t in page_texts(pdf)]


def test_full_contract_renders_every_section():
    doc = full_comparison(3, n_phases=3, effect=0.12, fade=0.3, trained_start_worse=True)
    pages = _flat(training_pdf(doc))
    first, everything = pages[0], " ".join(pages)
    for question in ("Did it work?", "For whom?", "Does it last?"):
        assert question in first
    assert "regression to the mean" in first
    for heading in ("Each rater across the phases", "Does it last? after to followup", "Is the panel converging?",
                    "Agreement across the panel", "Cue by cue: toward the rubric or away from it",
                    "What this design could have seen", "Cautions"):
        assert heading in everything, heading
    assert ABSENT_REASON not in everything        # every key present: nothing left out
    assert "institution's policies and applicable law" in everything
    assert "Not comparable as it stands: different cases in each phase" in everything
    assert "mean of the controls" in everything   # the legend tells the arms apart


def test_a_comparison_without_the_new_keys_leaves_each_section_out_with_a_reason():
    doc = full_comparison(4, n_phases=3)
    for key in CONTRACT_PANEL_KEYS:
        doc["panel"].pop(key)
    for key in ("answers", "better"):
        doc.pop(key)
    for r in doc["raters"]:
        r.pop("shares")
        for block in r["metrics"].values():
            for ch in block["changes"]:
                for key in ("detectable", "comparable", "note", "verdict"):
                    ch.pop(key)
    everything = " ".join(_flat(training_pdf(doc)))
    for section in ("The spread of the raters' weight profiles", "The change in ICC and Krippendorff's alpha",
                    "Groups of raters who weigh the cues alike", "The shift of each cue's share",
                    "The smallest detectable change", "The difference in differences over the follow-up"):
        assert f"{section}: left out; {ABSENT_REASON}" in everything, section
    assert "An invented summary line." in everything   # compare's summary stands in for the answers
    assert "The answers for whom and whether it lasts: left out" in everything


def test_the_first_page_prints_the_answers_compare_wrote():
    doc = full_comparison(7, n_phases=3, trained_start_worse=True)
    first = _flat(training_pdf(doc))[0]
    for key in ("worked", "for_whom", "lasts", "regression_to_mean"):
        assert " ".join(doc["answers"][key].split()) in first, key


def test_a_missing_required_key_is_named():
    doc = full_comparison(5)
    del doc["panel"]["training_effect"]
    with pytest.raises(ComparisonViewError, match=r"comparison.panel.training_effect is missing"):
        ComparisonView.read(doc)


def _clause(sentence: str, lead: str, stop: str) -> str:
    start = sentence.find(lead)
    if start < 0:
        return ""
    end = sentence.find(stop, start + len(lead))
    return sentence[start + len(lead): end if end >= 0 else None]


CASES = list(itertools.product([0.15, -0.15, 0.0], [True, False], [2, 3], [0.0, 1.0]))


@pytest.mark.parametrize("effect,control,n_phases,fade", CASES)
def test_no_sentence_contradicts_its_interval(effect, control, n_phases, fade):
    for seed in range(4):
        doc = full_comparison(seed, n_phases=n_phases, has_control=control, effect=effect, fade=fade,
                              trained_start_worse=bool(seed % 2))
        said = answers(doc)
        worked, whom, lasts = said["worked"], said["for_whom"], said["lasts"]
        first, last = doc["phases"][0], doc["phases"][-1]
        panel = doc["panel"]
        # Did it work: a metric is credited only when the difference in differences (and the
        # ANCOVA beside it) excludes zero in the good direction; never without a control group.
        credited = _clause(worked, "Yes, on ", ":")
        for m in GOOD:
            named = METRIC_WORDS[m] in credited
            if not control:
                assert "Yes" not in worked and "cannot be credited" in worked or "No clear sign" in worked
                continue
            e = panel["training_effect"][m]
            ok = _clear(m, e["ci_low"], e["ci_high"], 1) and _clear(m, e["ancova"]["ci_low"],
                                                                    e["ancova"]["ci_high"], 1)
            assert named == ok, (m, e, worked)
            behind = METRIC_WORDS[m] in _clause(worked, "fell behind the controls on ", ".")
            bad = _clear(m, e["ci_low"], e["ci_high"], -1) and _clear(m, e["ancova"]["ci_low"],
                                                                      e["ancova"]["ci_high"], -1)
            assert behind == bad, (m, e, worked)
        # For whom: the counts are the raters whose own interval excludes zero for the better.
        for m in GOOD:
            changes = [(r["trained"], next(c for c in r["metrics"][m]["changes"]
                                           if (c["from"], c["to"]) == (first, last))) for r in doc["raters"]]
            n_t = sum(_clear(m, c["ci_low"], c["ci_high"], 1) for t, c in changes if t)
            n_all_t = sum(t for t, _ in changes)
            if control:
                n_c = sum(_clear(m, c["ci_low"], c["ci_high"], 1) for t, c in changes if not t)
                assert (f"{METRIC_WORDS[m]} {n_t} of {n_all_t} trained and {n_c} of "
                        f"{len(changes) - n_all_t} controls") in whom
            else:
                assert f"{METRIC_WORDS[m]} {n_t} of {n_all_t}" in whom
        # Does it last: "yes" only with the gain still clear at the end and no clear slip back;
        # "slipped back" only where the follow-up interval excludes zero the wrong way.
        if n_phases < 3:
            assert lasts.startswith("Does it last? Cannot be told")
            continue
        end = doc["phases"][-2]
        held = _clause(lasts, "Does it last? On ", ", yes")
        slipped = _clause(lasts, "On ", " it slipped back") if "slipped back" in lasts else ""
        if "yes:" in lasts:
            slipped = _clause(lasts[lasts.find("yes:"):], "On ", " it slipped back")
        for m in GOOD:
            if control:
                f = panel["follow_up_effect"][m]
                g = panel["training_effect"][m]
                gain = _clear(m, g["ci_low"], g["ci_high"], 1) and _clear(m, g["ancova"]["ci_low"],
                                                                          g["ancova"]["ci_high"], 1)
            else:
                arm = panel["metrics"][m]["trained"]["changes"]
                f = next(c for c in arm if (c["from"], c["to"]) == (end, last))
                g = next(c for c in arm if (c["from"], c["to"]) == (first, last))
                gain = _clear(m, g["ci_low"], g["ci_high"], 1)
            slip = _clear(m, f["ci_low"], f["ci_high"], -1)
            if "yes:" in lasts:
                assert (METRIC_WORDS[m] in held) == (gain and not slip), (m, lasts)
            else:
                assert not (gain and not slip), (m, lasts)
            assert (METRIC_WORDS[m] in slipped) == slip, (m, lasts)
        # Regression to the mean: said when the trained started worse on a metric where the arms differed.
        rtm = said["regression_to_mean"]
        if control:
            expected = any(panel["training_effect"][m]["arms_differ_at_baseline"]
                           and panel["training_effect"][m]["baseline_difference"] * GOOD[m] < 0 for m in GOOD)
            assert (rtm is not None) == expected
        else:
            assert "Without a control group" in rtm


def test_the_rater_sentence_follows_its_interval():
    base = {"from": "before", "to": "after", "value_from": 0.71, "value_to": 0.83, "delta": 0.12}
    up = rater_change_sentence("r", {**base, "ci_low": 0.04, "ci_high": 0.20})
    assert up == ("From before to after, your judgments followed your own rule more closely: R_s 0.71 -> 0.83, "
                  "change (of R_s adjusted for the number of cases) +0.12, 95% interval +0.04 to +0.20.")
    assert "no clear change" in rater_change_sentence("r", {**base, "ci_low": -0.01, "ci_high": 0.20})
    # misallocation: lower is closer to the rubric
    closer = rater_change_sentence("misallocation", {**base, "value_from": 0.4, "value_to": 0.2, "delta": -0.2,
                                                     "ci_low": -0.3, "ci_high": -0.1})
    assert "moved closer to the rubric's" in closer


def test_same_comparison_same_bytes():
    doc = full_comparison(6, n_phases=3)
    assert training_pdf(copy.deepcopy(doc)) == training_pdf(doc)


@pytest.mark.parametrize("metric", [m for m in METRICS if m in GOOD])
def test_every_directed_metric_has_task_words(metric):
    sentence = rater_change_sentence(metric, {"from": "a", "to": "b", "value_from": 0.5, "value_to": 0.6,
                                              "delta": 0.1, "ci_low": 0.05, "ci_high": 0.15})
    assert sentence.startswith("From a to b, your ") or sentence.startswith("From a to b, the weight")


def test_a_slope_panel_over_a_narrow_range_still_labels_two_lines():
    # a range such as R_s 0.71 to 0.89 once gave a single labelled line, so the slopes could
    # not be read against the scale
    from reportlab.graphics.shapes import String

    from calibrate.report.training_charts import slope_panel

    d = slope_panel("R_s", ("before", "after"), [((0.71, 0.89), True), ((0.75, 0.85), False)], width=160)
    labels = [s.text for s in d.contents if isinstance(s, String) and s.text.replace(".", "").replace("-", "").isdigit()]
    assert len(labels) >= 2, labels


def test_an_interval_end_that_is_not_zero_never_prints_as_zero():
    # A "better" change whose interval is [0.004, 0.09] must not read "[0.00, +0.09]".
    from calibrate.report.training import _interval
    from calibrate.formatting import signed
    from calibrate.training.verdicts import rater_change_sentence
    assert _interval(0.004, 0.09) == "[+0.004, +0.09]"
    assert signed(-0.0003, end=True) == "-0.0003"
    assert signed(0.0, end=True) == "0.00"
    sentence = rater_change_sentence("r", {"from": "before", "to": "after", "value_from": 0.6,
                                           "value_to": 0.7, "delta": 0.05, "ci_low": 0.002,
                                           "ci_high": 0.09, "verdict": "better"})
    assert "+0.002 to +0.09" in sentence


def test_the_cue_shift_chart_says_not_tested_where_no_test_ran():
    # "no clear change" is a test's verdict; a cue whose paired test could not run says so.
    from reportlab.graphics.shapes import String

    from calibrate.report.training_charts import cue_shift_chart
    d = cue_shift_chart(["grades", "essay"], rubric={"grades": 0.3, "essay": 0.2},
                        trained={"grades": (0.2, 0.25), "essay": (0.2, 0.2)}, control=None,
                        toward={"grades": None, "essay": "untested"}, first="before", last="after",
                        width=400)
    words = [s.text for s in d.contents if isinstance(s, String)]
    assert "no clear change" in words and "not tested" in words


@pytest.mark.parametrize("has_control", [True, False])
def test_the_report_prints_compares_words_word_for_word(has_control):
    # The readings beside what the design could detect, and the follow-up's verdicts, are
    # comparison.json's (verdicts.annotate), printed as they stand.
    from calibrate.formatting import signed

    doc = full_comparison(9, n_phases=3, effect=0.15, fade=0.6, has_control=has_control)
    everything = " ".join(_flat(training_pdf(doc)))
    readings = [entry["reading"] for entry in doc["panel"]["detectable"].values()]
    assert readings and all(" ".join(r.split()) in everything for r in readings)
    end, later = doc["phases"][-2:]
    cells = [(ch, ch["verdict"]) for arms in doc["panel"]["metrics"].values() for ch in arms["trained"]["changes"]
             if (ch["from"], ch["to"]) == (end, later)]
    cells += [({**e, "delta": e["estimate"]}, e["verdict"])
              for e in (doc["panel"].get("follow_up_effect") or {}).values()]
    assert {word for _, word in cells} - {"no clear change"}  # some cell carries a word
    for ch, word in cells:
        shown = (f"{signed(ch['delta'])} [{signed(ch['ci_low'], end=True)}, {signed(ch['ci_high'], end=True)}] "
                 f"{word}")
        assert shown in everything, shown
