"""Every presentation of a case shown many times ([judgment] repeats = "all").

A simulated experiment (29 raters, 3 cues, 14 cases each shown 10 times;
tests/unit/presentation_simulation.py) checked against computations outside the project:
pingouin.intraclass_corr for the ICCs over presentations, numpy's corrcoef for the mean
pairwise r, statsmodels OLS for the policy fitted to case means; and a small seeded
version of benchmarks/bench_presentations.py for the coverage of the weights' intervals.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from calibrate import audit, load_study
from calibrate.consistency.presentations import (
    choose_block,
    harmonic_presentations,
    low_consistency_p,
    low_consistency_reach,
    presentation_consistency,
    spearman_brown,
)
from calibrate.consistency.repeats import presentation_pairs
from calibrate.data.cues import CueRule, build_cue_design
from calibrate.errors import SpecError
from calibrate.policy.fit import fit_policies
from tests.helpers import write_study
from tests.unit.presentation_simulation import CUES, TRUE_WEIGHTS, experiment


@pytest.fixture(scope="module")
def trial():
    return experiment(np.random.default_rng(20261203))


def test_consistency_over_presentations_matches_pingouin_and_numpy(trial):
    # pingouin.intraclass_corr(targets=case, raters=presentation): McGraw & Wong (1996)
    # ICC(A,1) and ICC(C,1) with their F intervals (pingouin rounds the intervals to 2 decimals)
    pingouin = pytest.importorskip("pingouin")
    judgments, _ = trial
    ours = presentation_consistency(judgments, rng=0)
    assert len(ours) == 29
    for rater, sub in judgments.groupby("rater"):
        mine = ours[rater]
        assert (mine.n_cases, mine.n_presentations, mine.n_presentation_pairs) == (14, 10, 45)
        ref = pingouin.intraclass_corr(sub, targets="case", raters="nth", ratings="judgment").set_index("Type")
        for label, est, lo, hi in (("ICC(A,1)", mine.icc_a1, mine.icc_a1_ci_low, mine.icc_a1_ci_high),
                                   ("ICC(C,1)", mine.icc_c1, mine.icc_c1_ci_low, mine.icc_c1_ci_high)):
            assert est == pytest.approx(ref.loc[label, "ICC"], abs=1e-10)
            assert lo == pytest.approx(ref.loc[label, "CI95"][0], abs=0.005 + 1e-9)
            assert hi == pytest.approx(ref.loc[label, "CI95"][1], abs=0.005 + 1e-9)
        # mean Pearson r over the 45 pairs of presentations, from numpy's correlation matrix
        wide = sub.pivot(index="case", columns="nth", values="judgment").to_numpy()
        corr = np.corrcoef(wide, rowvar=False)
        assert mine.mean_r == pytest.approx(corr[np.triu_indices(10, 1)].mean(), abs=1e-10)
        # the interval the audit shows beside the mean r is ICC(C,1)'s; the BCa is off by default
        assert mine.icc_c1_ci_low < mine.mean_r < mine.icc_c1_ci_high
        assert np.isnan(mine.mean_r_ci_low) and np.isnan(mine.mean_r_ci_high)


def test_optional_bca_interval_of_the_mean_r_brackets_it(trial):
    # the bootstrap from case-count weights equals resampling the rows (checked to 1e-12)
    from calibrate.consistency.presentations import _boot_mean_r, mean_pairwise_r, presentation_blocks

    judgments, _ = trial
    x = np.stack(list(presentation_blocks(judgments).values()))
    draws = np.random.default_rng(3).integers(0, 14, size=(40, 14))
    assert np.allclose(_boot_mean_r(x, draws), mean_pairwise_r(x[:, draws, :]), atol=1e-12, rtol=0)
    for c in presentation_consistency(judgments.query("rater in ['p01', 'p02']"), rng=5, n_boot=499).values():
        assert c.mean_r_ci_low < c.mean_r < c.mean_r_ci_high


def test_low_consistency_test_agrees_with_its_interval(trial):
    # the one-sided F test of ICC(C,1) >= .70 is below 2.5% exactly when the F interval's
    # upper end lies below .70 (McGraw & Wong 1996, Table 7 and 8)
    judgments, _ = trial
    for c in presentation_consistency(judgments, rng=0).values():
        p = low_consistency_p(c.f_c1, c.n_cases, c.n_presentations)
        assert (p < 0.025) == (c.icc_c1_ci_high < 0.70)
    reach = low_consistency_reach(14, 10, level=0.025)
    f_at_reach = (1 + 9 * reach) / (1 - reach)        # MSR / MSE that gives ICC(C,1) = reach
    assert low_consistency_p(f_at_reach, 14, 10) == pytest.approx(0.025, abs=1e-9)


def test_unequal_presentations_use_the_block_with_the_most_judgments():
    assert choose_block(np.array([10, 10, 10, 2, 2, 2, 2, 2, 2])) == 10   # 30 judgments against 18
    assert choose_block(np.array([3, 3, 2, 2, 2, 2, 2])) == 2               # 14 against 6
    assert choose_block(np.array([1, 1])) == 0
    rows = [("a", f"c{c}", j, float(c + j % 2)) for c in range(5) for j in range(3 if c < 4 else 6)]
    got = presentation_consistency(pd.DataFrame(rows, columns=["rater", "case", "nth", "judgment"]), rng=1)
    assert (got["a"].n_cases, got["a"].n_presentations) == (5, 3)


def test_spearman_brown_and_the_harmonic_mean_of_showings():
    assert spearman_brown(0.5, 1) == pytest.approx(0.5)
    assert spearman_brown(0.5, 3) == pytest.approx(0.75)           # 3 * .5 / (1 + 2 * .5)
    assert harmonic_presentations(np.array([1, 2, 2])) == pytest.approx(1.5)


def test_every_presentation_pair_is_listed_once():
    pres = pd.DataFrame({"rater": ["a"] * 3, "case": ["c"] * 3, "nth": [0, 1, 2], "judgment": [1.0, 2.0, 3.0]})
    pairs = presentation_pairs(pres)
    assert pairs[["first", "second"]].values.tolist() == [[1.0, 2.0], [1.0, 3.0], [2.0, 3.0]]


def test_policy_on_case_means_matches_statsmodels_and_the_fit_on_every_presentation(trial):
    # statsmodels OLS on the 14 case means (its t intervals count cases), and the identity that
    # with equal showings per case OLS on all 140 presentations has the same weights
    sm = pytest.importorskip("statsmodels.api")
    judgments, cases = trial
    means = judgments.groupby(["rater", "case"], as_index=False)["judgment"].mean()
    design = build_cue_design(cases, [CueRule(c) for c in CUES])
    fitted = fit_policies(design, means, scale="continuous", n_boot=0)
    for pol in fitted.raters[:5]:
        mine = means[means["rater"] == pol.rater]
        X = sm.add_constant(cases.loc[mine["case"], list(CUES)].to_numpy())
        ref = sm.OLS(mine["judgment"].to_numpy(), X).fit()
        ci = ref.conf_int(0.05)
        every = judgments[judgments["rater"] == pol.rater]
        all_fit = sm.OLS(every["judgment"].to_numpy(),
                         sm.add_constant(cases.loc[every["case"], list(CUES)].to_numpy())).fit()
        for i, cue in enumerate(CUES, start=1):
            assert pol.weights[cue] == pytest.approx(ref.params[i], abs=1e-10)
            assert pol.weights[cue] == pytest.approx(all_fit.params[i], abs=1e-10)
            assert pol.ci_low[cue] == pytest.approx(ci[i, 0], abs=1e-8)
            assert pol.ci_high[cue] == pytest.approx(ci[i, 1], abs=1e-8)


def test_weight_intervals_over_presentations_cover_small_seeded_version():
    # the benchmark (benchmarks/bench_presentations.py) runs 203 and 1,160 raters; here
    # 3 panels of 29 raters, 261 intervals: a 95% interval gives 0.91-0.98 about 99% of the time
    rng = np.random.default_rng(7)
    hits = []
    for _ in range(3):
        judgments, cases = experiment(rng, rounded=True)
        means = judgments.groupby(["rater", "case"], as_index=False)["judgment"].mean()
        design = build_cue_design(cases, [CueRule(c) for c in CUES])
        for pol in fit_policies(design, means, scale="continuous", n_boot=0).raters:
            hits += [pol.ci_low[c] <= w <= pol.ci_high[c] for c, w in zip(CUES, TRUE_WEIGHTS)]
    assert len(hits) == 261 and 0.91 <= np.mean(hits) <= 0.98


def _experiment_study(tmp_path, trial, extra_judgment=""):
    judgments, cases = trial
    table = judgments.drop(columns="nth").rename(columns={"judgment": "score", "sequence": "seq"})
    table["score"] = np.clip(np.round(table["score"]), 1, 7)
    return write_study(tmp_path, table, cases=cases.reset_index(), cues="\n".join(f'{c} = "numeric"' for c in CUES),
                       extra_columns='sequence = "seq"', extra_judgment=extra_judgment)


def test_audit_uses_every_presentation_and_says_which_measure(tmp_path, trial):
    path = _experiment_study(tmp_path, trial)
    table = load_study(path)
    ph = table.phases[0]
    assert ph.repeat_mode == "all" and len(ph.ordered) == 29 * 140
    result = audit(table, n_boot=0)
    data = json.loads(json.dumps(result.to_dict()))
    jsonschema = pytest.importorskip("jsonschema")
    from calibrate.output.tables import results_schema

    jsonschema.validate(data, results_schema())
    assert data["judgment"]["repeats"] == "all"
    grouped = [w for w in data["warnings"] if "shown more than twice" in w["message"]]
    assert len(grouped) == 1 and "406 rater-case pair(s) (29 rater(s))" in grouped[0]["message"]
    independent = presentation_consistency(ph.presentations, rng=1)
    for e in data["raters"]:
        rt, c = e["retest"], independent[e["rater"]]
        assert (e["n_presentations"], e["most_presentations"], e["repeats_mode"]) == (140, 10, "all")
        assert (rt["measure"], rt["presentations"], rt["presentation_pairs"], rt["n_pairs"]) == (
            "mean_pairwise_r", 10, 45, 14)
        assert rt["r"] == pytest.approx(c.mean_r, abs=1e-10)
        assert rt["icc_a1"] == pytest.approx(c.icc_a1, abs=1e-10)
        assert rt["icc_c1"] == pytest.approx(c.icc_c1, abs=1e-10)
        assert rt["icc_c1_ci"] == pytest.approx([c.icc_c1_ci_low, c.icc_c1_ci_high], abs=1e-10)
        assert rt["r_ci"] == rt["icc_c1_ci"] and "ICC(C,1)" in rt["r_ci_method"]
        assert e["consistency"]["policy_on_means"] is True
        assert e["consistency"]["ceiling"] == pytest.approx(np.sqrt(spearman_brown(c.icc_c1, 10)), abs=1e-10)
    # drift reads every judgment in order
    assert len(result.tables["reading_order"]) == 29 * 140


def test_first_two_keeps_the_old_reading(tmp_path, trial):
    path = _experiment_study(tmp_path, trial, extra_judgment='repeats = "first-two"')
    table = load_study(path)
    ph = table.phases[0]
    assert ph.repeat_mode == "first-two" and len(ph.ordered) == 29 * 28
    assert (ph.first["case_mean"] == ph.first["judgment"]).all()


def test_an_unknown_repeats_value_is_refused(tmp_path, trial):
    path = _experiment_study(tmp_path, trial, extra_judgment='repeats = "every"')
    with pytest.raises(SpecError, match=r"\[judgment\] repeats must be one of 'all', 'first-two'; got 'every'"):
        load_study(path)


def test_row_order_does_not_change_the_figures_over_showings(tmp_path, trial):
    # the reading order comes from the sequence column, so shuffled rows give the same audit
    path = _experiment_study(tmp_path / "sorted", trial)
    table = pd.read_csv(path.parent / "judgments.csv")
    shuffled = write_study(tmp_path / "shuffled", table.sample(frac=1.0, random_state=4),
                           cases=trial[1].reset_index(), cues="\n".join(f'{c} = "numeric"' for c in CUES),
                           extra_columns='sequence = "seq"')
    a, b = (audit(load_study(p), n_boot=0) for p in (path, shuffled))
    for x, y in zip(a.to_dict()["raters"], b.to_dict()["raters"]):
        assert x["retest"] == y["retest"] and x["policy"]["weights"] == y["policy"]["weights"]


def test_the_chair_is_told_which_showings_were_used():
    from types import SimpleNamespace

    from calibrate.report import wording

    def entry(mode, most, measure):
        retest = SimpleNamespace(measure=measure)
        return SimpleNamespace(repeats_mode=mode, most_presentations=most, n_repeats=3, retest=retest)

    assert wording.panel_repeats_note([entry("first-two", 2, "first_repeat_r")]) is None
    dropped = wording.panel_repeats_note([entry("first-two", 4, "first_repeat_r")])
    assert "up to 4 times" in dropped and "left out of every figure" in dropped
    every = wording.panel_repeats_note([entry("all", 10, "mean_pairwise_r"), entry("all", 10, "first_repeat_r")])
    assert "up to 10 times and every showing is used" in every
    assert "for 1 of the 2 raters with repeats" in every and "for the other 1, the first judgment" in every


def test_the_repeats_setting_survives_a_round_trip_through_toml(tmp_path, trial):
    import tomllib

    from calibrate.data.spec import parse_spec

    path = _experiment_study(tmp_path, trial, extra_judgment='repeats = "first-two"')
    spec = load_study(path).spec
    assert spec.judgment.repeats == "first-two"
    text = spec.to_toml(relative_to=tmp_path)
    assert 'repeats = "first-two"' in text
    assert parse_spec(tomllib.loads(text), base_dir=tmp_path).judgment.repeats == "first-two"
