"""Scoring new files with a captured policy (calibrate.design.score).

External check: statsmodels OLS ``get_prediction().summary_frame(alpha=0.05)``
(Seabold & Perktold 2010) on the same rater's data gives the prediction and the
bounds of its 95% prediction interval (obs_ci_lower / obs_ci_upper).
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.design.score import PANEL, score_files
from calibrate.errors import DataError
from calibrate.policy.fit import captured_policies, fit_policies


def _study(seed=3):
    rng = np.random.default_rng(seed)
    n = 40
    cases = pd.DataFrame({
        "grades": rng.integers(1, 8, n).astype(float),
        "essay": rng.normal(5, 1.5, n),
        "track": rng.choice(["arts", "science", "trade"], n),
    }, index=[f"c{i:02d}" for i in range(n)])
    design = build_cue_design(cases, [CueRule("grades"), CueRule("essay"), CueRule("track", kind="categorical")])
    rows = []
    for rater, w in (("ana", (0.6, 0.3)), ("ben", (0.2, 0.7))):
        seen = cases.index[: 35] if rater == "ana" else cases.index[5:]
        for c in seen:
            y = 1 + w[0] * cases.loc[c, "grades"] + w[1] * cases.loc[c, "essay"] + (cases.loc[c, "track"] == "trade") * 0.5
            rows.append({"rater": rater, "case": c, "judgment": float(np.clip(np.round(y + rng.normal(0, 0.7)), 1, 7))})
    first = pd.DataFrame(rows)
    policy_set = fit_policies(design, first, scale="ordinal", n_boot=0, rng=1)
    return cases, design, first, {"phases": {"all": captured_policies(policy_set, design)}}


def test_score_matches_statsmodels_prediction_interval():
    cases, design, first, policies = _study()
    new = pd.DataFrame({"file": ["n1", "n2", "n3"], "grades": [2.0, 6.0, 9.0], "essay": [4.0, 6.5, 3.0],
                        "track": ["science", "arts", "trade"]})
    scored = score_files(policies, new, policy="ana")
    ana = first[first.rater == "ana"]
    X = pd.DataFrame(design.matrix[design.row_of(ana.case)], columns=design.columns)
    model = sm.OLS(ana.judgment.to_numpy(), sm.add_constant(X)).fit()
    Xnew = pd.DataFrame({c: (new.track == c.split("=")[1]).astype(float) if "=" in c else new[c]
                         for c in design.columns})
    frame = model.get_prediction(sm.add_constant(Xnew, has_constant="add")).summary_frame(alpha=0.05)
    np.testing.assert_allclose(scored.predicted, frame["mean"], atol=1e-8)
    np.testing.assert_allclose(scored.lower, frame["obs_ci_lower"], atol=1e-8)
    np.testing.assert_allclose(scored.upper, frame["obs_ci_upper"], atol=1e-8)
    # Contributions add up to the prediction (exact identity).
    np.testing.assert_allclose(scored.baseline + scored.contributions.sum(axis=1), scored.predicted, atol=1e-10)
    # grades = 9 lies above the 1-7 range the policy was fitted on.
    assert scored.outside_range == ((), (), ("grades",))
    assert list(scored.to_frame().columns[:5]) == ["file", "predicted", "interval_low", "interval_high",
                                                   "outside_fitted_range"]


def test_panel_policy_is_the_mean_of_the_raters():
    _, _, _, policies = _study()
    new = pd.DataFrame({"file": ["n1"], "grades": [4.0], "essay": [5.0], "track": ["arts"]})
    one = [score_files(policies, new, policy=r).predicted[0] for r in ("ana", "ben")]
    panel = score_files(policies, new, policy=PANEL)
    assert panel.predicted[0] == pytest.approx(np.mean(one), abs=1e-10)
    assert np.isnan(panel.lower[0])


def test_missing_cue_names_file_row_and_column():
    _, _, _, policies = _study()
    with pytest.raises(DataError, match="essay"):
        score_files(policies, pd.DataFrame({"file": ["n1"], "grades": [4.0], "track": ["arts"]}),
                    policy="ana", source="new.csv")
    with pytest.raises(DataError) as err:
        score_files(policies, pd.DataFrame({"file": ["n1", "n2"], "grades": [4.0, None], "essay": [1.0, 2.0],
                                            "track": ["arts", "arts"]}), policy="ana", source="new.csv")
    text = str(err.value)
    assert "new.csv" in text and "3" in text and "grades" in text


def test_score_command_writes_scores_and_refuses_to_overwrite(tmp_path):
    import json

    from click.testing import CliRunner

    from calibrate.cli import main

    _, _, _, policies = _study()
    (tmp_path / "policies.json").write_text(json.dumps({"schema": "calibrate.policies/2", **policies}))
    pd.DataFrame({"file": ["n1", "=n2"], "grades": [2, 12], "essay": [4.0, 5.0], "track": ["arts", "arts"]}
                 ).to_csv(tmp_path / "new.csv", index=False)
    args = ["score", str(tmp_path / "policies.json"), str(tmp_path / "new.csv"), "--rater", "ben"]
    run = CliRunner().invoke(main, args)
    assert run.exit_code == 0, run.output
    out = pd.read_csv(tmp_path / "scores.csv")
    assert out["file"].tolist() == ["n1", "'=n2"]          # formula escaped
    assert out["outside_fitted_range"].fillna("").tolist() == ["", "grades"]
    assert CliRunner().invoke(main, args).exit_code == 2    # exists, no --overwrite
    bad = CliRunner().invoke(main, args[:3] + ["--rater", "nobody", "--overwrite"])
    assert bad.exit_code == 2 and "nobody" in bad.output


def test_prediction_interval_coverage_small_seeded():
    """Small version of benchmarks/score_interval_coverage.py (figures in DEVELOPERS.md)."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))
    from score_interval_coverage import coverage

    # 150 raters x 20 new files = 3000 intervals: 95% +- 1.2 points at 3 SE.
    assert 0.935 <= coverage(150, 15, "1-7", seed=11) <= 0.965


def test_group_policy_is_the_fixed_effects_regression_of_its_members():
    # External check: statsmodels OLS with one intercept per rater (rater dummies, no common
    # constant) gives the pooled-within weights; the group's prediction for a new file is the
    # mean of the members' fixed effects plus those weights times the file's cues.
    cases, design, first, policies = _study()
    X = pd.DataFrame(design.matrix[design.row_of(first.case)], columns=design.columns)
    dummies = pd.get_dummies(first.rater).astype(float).reset_index(drop=True)
    model = sm.OLS(first.judgment.to_numpy(), pd.concat([X.reset_index(drop=True), dummies], axis=1)).fit()
    captured = policies["phases"]["all"]
    captured["groups"] = [{"group": "A", "raters": ["ana", "ben"],
                           "weights": {c: float(model.params[c]) for c in design.columns}}]
    new = pd.DataFrame({"file": ["n1", "n2"], "grades": [2.0, 6.0], "essay": [4.0, 6.5], "track": ["science", "trade"]})
    Xnew = pd.DataFrame({c: (new.track == c.split("=")[1]).astype(float) if "=" in c else new[c]
                         for c in design.columns})
    expected = Xnew.to_numpy() @ model.params[list(design.columns)].to_numpy() + model.params[["ana", "ben"]].mean()
    scored = score_files(policies, new, policy="group:A")
    np.testing.assert_allclose(scored.predicted, expected, atol=1e-8)
    np.testing.assert_allclose(scored.baseline + scored.contributions.sum(axis=1), scored.predicted, atol=1e-10)
    assert np.isnan(scored.lower).all()


def test_unknown_group_and_policies_without_groups_say_what_exists():
    from calibrate.errors import CalibrateError

    _, _, _, policies = _study()
    new = pd.DataFrame({"file": ["n1"], "grades": [4.0], "essay": [5.0], "track": ["arts"]})
    with pytest.raises(CalibrateError, match="hold no groups"):
        score_files(policies, new, policy="group:A")
    policies["phases"]["all"]["groups"] = [{"group": "A", "raters": ["ana"], "weights": {}}]
    with pytest.raises(CalibrateError, match="groups: A"):
        score_files(policies, new, policy="group:B")
