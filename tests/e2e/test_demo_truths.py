"""The audit finds what the demo planted (calibrate/demo.py documents each truth).

One audit of the demo per test session (module fixture); each test reads one truth.
"""

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

from calibrate.analyses import audit
from calibrate.data.demo import DRIFTER, INCONSISTENT, LEANS_ON_EXCLUDED, REVIEWERS, write_demo
from calibrate.data.ingest import load_study


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    files = write_demo(tmp_path_factory.mktemp("demo"))
    table = load_study(files.spec)
    return audit(table).to_dict()


def _entries(results, phase):
    return [e for e in results["raters"] if e["phase"] == phase]


@pytest.mark.parametrize("phase", ["before", "after"])
def test_inconsistent_reviewer_has_the_lowest_r_s_and_retest(demo, phase):
    entries = _entries(demo, phase)
    assert min(entries, key=lambda e: e["policy"]["r"])["rater"] == INCONSISTENT
    assert min(entries, key=lambda e: e["retest"]["r"])["rater"] == INCONSISTENT
    assert "inconsistent" in next(e for e in entries if e["rater"] == INCONSISTENT)["flags"]


@pytest.mark.parametrize("phase", ["before", "after"])
def test_only_the_planted_reviewer_is_flagged_on_the_excluded_attribute(demo, phase):
    flagged = [e["rater"] for e in _entries(demo, phase) if "excluded_attribute" in e["flags"]]
    assert flagged == [LEANS_ON_EXCLUDED]
    entry = next(e for e in _entries(demo, phase) if e["rater"] == LEANS_ON_EXCLUDED)
    assert entry["excluded"]["alumni_family"]["p_adjusted"] < 0.05


@pytest.mark.parametrize("phase", ["before", "after"])
def test_only_the_drifting_reviewer_is_flagged_for_drift(demo, phase):
    flagged = [e["rater"] for e in _entries(demo, phase) if e["drift"] and e["drift"]["flagged"]]
    assert flagged == [DRIFTER]
    drift = next(e for e in _entries(demo, phase) if e["rater"] == DRIFTER)["drift"]
    assert drift["slope_per_session"] > 0.5  # planted: +1.5 points by the end of the session


def test_planted_policy_groups_are_recovered_and_stable(demo):
    entries = _entries(demo, "before")
    planted = [REVIEWERS[e["rater"]][0] for e in entries]
    found = [e["group"] for e in entries]
    assert adjusted_rand_score(planted, found) == 1.0
    panel = next(p for p in demo["panels"] if p["phase"] == "before")
    assert len(panel["groups"]) == 3
    assert all(g.get("survives", True) for g in panel["groups"])
    assert panel["grouping"]["stability"]["ari"]["estimate"] > 0.9


def test_the_lens_model_equation_holds_on_the_demo(demo):
    # Tucker (1964): r_a = G R_e R_s + C sqrt(1 - R_e^2) sqrt(1 - R_s^2), exact with both models
    # refitted on the rater's own criterion cases
    for e in demo["raters"]:
        lens = e["lens"]
        rebuilt = (lens["g"] * lens["r_e"] * lens["r_s"]
                   + lens["c"] * np.sqrt(1 - lens["r_e"] ** 2) * np.sqrt(1 - lens["r_s"] ** 2))
        assert rebuilt == pytest.approx(lens["r_a"], abs=1e-9)


def test_nobody_else_carries_a_flag(demo):
    planted = {INCONSISTENT: {"inconsistent", "low_retest", "wide_range"},
               LEANS_ON_EXCLUDED: {"excluded_attribute"}, DRIFTER: {"drift"}}
    # a planted leniency beyond the flag margin (5% of the 1-7 range = 0.3 points) may be
    # found, in its own direction: Willow's -0.4 is, once training has made her less noisy
    margin = 0.3
    for e in demo["raters"]:
        allowed = set(planted.get(e["rater"], set()))
        leniency = REVIEWERS[e["rater"]][2]
        if leniency < -margin:
            allowed.add("severe")
        if leniency > margin:
            allowed.add("lenient")
        assert set(e["flags"]) <= allowed, (e["rater"], e["phase"], e["flags"])


def test_training_made_trained_reviewers_more_consistent_and_closer_to_the_rubric(demo):
    # planted: trained reviewers' noise falls and their weights move 60% toward the rubric;
    # controls stay as they were
    by = {(e["rater"], e["phase"]): e for e in demo["raters"]}
    trained = [n for n, (_, t, _) in REVIEWERS.items() if t]
    controls = [n for n, (_, t, _) in REVIEWERS.items() if not t]

    def change(names, get):
        return float(np.mean([get(by[(n, "after")]) - get(by[(n, "before")]) for n in names]))

    r_s = lambda e: e["policy"]["r"]  # noqa: E731
    misallocation = lambda e: e["alignment"]["misallocation"]  # noqa: E731
    assert change(trained, r_s) > 0.02 and abs(change(controls, r_s)) < 0.02
    assert change(trained, misallocation) < -0.1 and abs(change(controls, misallocation)) < 0.05


def test_model_versus_rater_verdict_does_not_move_with_the_seed(demo, tmp_path):
    # Leave-one-out validity and an analytic interval: nothing random decides the verdict.
    table = load_study(write_demo(tmp_path).spec)
    other = audit(table, seed=demo["seed"] + 9_999, n_boot=200).to_dict()

    def verdicts(results):
        return {(e["rater"], e["phase"]): e["lens"]["model_vs_rater"] for e in results["raters"]
                if e.get("lens")}

    first, second = verdicts(demo), verdicts(other)
    assert first and first == second
