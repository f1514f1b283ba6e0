"""Rubric alignment: shares on the rubric's basis, misallocation, most over/under, g_rubric."""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from calibrate.errors import DataError
from calibrate.lens.rubric import rubric_alignment
from tests.simulated_panels import linear_panel

RUBRIC = {"grades": 0.5, "essay": 0.3, "years": 0.2}


def _exact_weights(panel, basis, rubric=RUBRIC):
    """Raw weights with which a rater applies the rubric exactly on the given basis."""
    columns = panel.design.columns
    w = np.array([rubric.get(c, 0.0) for c in columns])
    if basis == "standardized":
        judged = np.unique(np.concatenate(list(panel.rater_rows.values())))
        w = w / panel.design.matrix[judged].std(axis=0, ddof=1)
    return w


@pytest.mark.parametrize("basis", ["standardized", "raw"])
def test_a_rater_applying_the_rubric_exactly_scores_near_zero(basis):
    # Planted truth (issue 4): misallocation below 0.01 for an exact rater, on an
    # incomplete design where each rater sees a different subset of cases. Two raters
    # are noise-free; six add noise of 1% of a cue SD (rounding-level slips).
    probe = linear_panel(np.random.default_rng(41), n_cases=200, n_raters=8, per_rater=50,
                         weights=np.zeros(3), noise=0.0)
    weights = _exact_weights(probe, basis)
    panel = linear_panel(np.random.default_rng(41), n_cases=200, n_raters=8, per_rater=50,
                         weights=weights, noise=np.r_[0.0, 0.0, np.full(6, 0.01)])
    result = rubric_alignment(panel.design, panel.first, RUBRIC, basis=basis)
    values = np.array([r.misallocation for r in result.raters])
    assert values[:2].max() < 1e-9
    assert values.max() < 0.01, values
    assert result.raters[0].most_over is None and result.raters[0].most_under is None
    assert result.raters[0].g_rubric == pytest.approx(1.0, abs=1e-12)


def test_planted_shares_and_most_over_under():
    # Planted: standardized weights (0.2, 0.2, 0.6) against the rubric (0.5, 0.3, 0.2):
    # misallocation = 1/2 (0.3 + 0.1 + 0.4) = 0.4 (hand arithmetic).
    probe = linear_panel(np.random.default_rng(3), n_cases=300, n_raters=3, per_rater=300,
                         weights=np.zeros(3), noise=0.0)
    weights = _exact_weights(probe, "standardized", {"grades": .2, "essay": .2, "years": .6})
    panel = linear_panel(np.random.default_rng(3), n_cases=300, n_raters=3, per_rater=300,
                         weights=weights, noise=0.0)
    r = rubric_alignment(panel.design, panel.first, RUBRIC, basis="standardized").raters[0]
    assert r.misallocation == pytest.approx(0.4, abs=1e-9)
    assert (r.most_over, r.most_under) == ("years", "grades")
    assert list(r.shares.values()) == pytest.approx([0.2, 0.2, 0.6], abs=1e-9)


def test_negative_weight_keeps_its_sign_and_g_rubric_matches_statsmodels():
    # Independent reference: statsmodels OLS fitted values against the rubric composite.
    rng = np.random.default_rng(9)
    panel = linear_panel(rng, n_cases=120, n_raters=4, per_rater=70,
                         weights=np.array([0.05, -0.5, 0.2]), noise=0.7)
    result = rubric_alignment(panel.design, panel.first, RUBRIC, basis="raw")
    composite_w = np.array([0.5, 0.3, 0.2])
    for name, rows in panel.rater_rows.items():
        X = panel.design.matrix[rows]
        y = panel.first.loc[panel.first.rater == name, "judgment"].to_numpy()
        fit = sm.OLS(y, sm.add_constant(X)).fit()
        ours = result.for_rater(name)
        assert ours.g_rubric == pytest.approx(np.corrcoef(fit.fittedvalues, X @ composite_w)[0, 1], abs=1e-10)
        b = fit.params[1:]
        assert list(ours.shares.values()) == pytest.approx(b / np.abs(b).sum(), abs=1e-10)
        assert ours.shares["essay"] < 0
        expected = 0.5 * np.abs(b / np.abs(b).sum() - composite_w).sum()
        assert ours.misallocation == pytest.approx(expected, abs=1e-10)


def test_categorical_cue_share_is_the_sum_of_its_dummies():
    # Documented rule: a categorical cue's share is sum |dummy weight| on the basis, positive.
    rng = np.random.default_rng(12)
    panel = linear_panel(rng, n_cases=200, n_raters=2, per_rater=150,
                         weights=np.array([0.05, 0.4, 0.2, 0.6, -0.6]), noise=0.3, categorical=True)
    result = rubric_alignment(panel.design, panel.first, {**RUBRIC, "letter": 0.2}, basis="raw")
    assert any("categorical" in w for w in result.warnings)
    r = result.raters[0]
    X = panel.design.matrix[panel.rater_rows["rater0000"]]
    y = panel.first.loc[panel.first.rater == "rater0000", "judgment"].to_numpy()
    b = sm.OLS(y, sm.add_constant(X)).fit().params[1:]
    magnitudes = np.r_[np.abs(b[:3]), np.abs(b[3:]).sum()]
    assert r.shares["letter"] == pytest.approx(magnitudes[3] / magnitudes.sum(), abs=1e-10)
    assert r.shares["letter"] > 0
    payload = json.loads(json.dumps(result.to_dict()))
    assert set(payload["raters"][0]) >= {"misallocation", "most_over", "most_under", "g_rubric"}
    assert set(result.to_frame().columns) >= {"rater", "cue", "share", "rubric_share"}


@pytest.mark.parametrize("rubric, basis, message", [
    ({"grades": 1.0}, "zscore", "basis"),
    ({"height": 1.0}, "raw", "not in the cue design"),
    ({"grades": 0.0}, "raw", "all zero"),
])
def test_bad_rubrics_are_data_errors(rubric, basis, message):
    panel = linear_panel(np.random.default_rng(1), n_cases=40, n_raters=2, per_rater=30,
                         weights=np.ones(3), noise=1.0)
    with pytest.raises(DataError, match=message):
        rubric_alignment(panel.design, panel.first, rubric, basis=basis)


def test_rater_with_too_few_cases_gets_nan_and_a_warning():
    panel = linear_panel(np.random.default_rng(2), n_cases=40, n_raters=2, per_rater=30,
                         weights=np.ones(3), noise=1.0)
    few = pd.DataFrame({"rater": "short", "case": list(panel.design.case_ids[:3]), "judgment": [1., 2., 4.]})
    result = rubric_alignment(panel.design, pd.concat([panel.first, few]), RUBRIC, basis="raw")
    short = result.for_rater("short")
    assert np.isnan(short.misallocation) and short.warnings
