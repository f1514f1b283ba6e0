"""fit_policies: leave-one-out r, BCa, degenerate raters, errors, outputs.

Sources named per test: an explicit leave-one-out loop with numpy lstsq (the
definition of cross-validated r); scipy.stats.bootstrap(method="BCa") (Efron
1987) for the interval; numpy.quantile for the per-column quantiles.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.errors import CalibrateError, DataError
from calibrate.policy.fit import (
    POLICIES_SCHEMA,
    bca_interval,
    captured_policies,
    fit_policies,
)
from calibrate.policy.resampling import _column_quantiles
from tests.policy_panels import mixed_panel, rater_matrix

DESIGN_POLICY_KEYS = {"intercept", "weights", "std_weights", "importance", "importance_r2",
                      "r", "r_ci", "r2_adj", "r_cv"}


@pytest.fixture(scope="module")
def fitted():
    design, first = mixed_panel(seed=21)
    return design, first, fit_policies(design, first, scale="continuous", n_boot=200, rng=5)


def test_cross_validated_r_equals_explicit_leave_one_out(fitted):
    design, first, policies = fitted
    for policy in policies.raters:
        columns = [c for c in policy.weights if np.isfinite(policy.weights[c])]
        X, y, _ = rater_matrix(design, first, policy.rater, columns)
        A = np.column_stack([np.ones(y.size), X])
        loo = np.empty(y.size)
        for i in range(y.size):
            keep = np.arange(y.size) != i
            coef = np.linalg.lstsq(A[keep], y[keep], rcond=None)[0]
            loo[i] = A[i] @ coef
        assert policy.r_cv == pytest.approx(np.corrcoef(y, loo)[0, 1], rel=1e-9)
        look = {c.case: c.predicted_without for c in policy.look_again}
        cases = first.loc[first["rater"] == policy.rater, "case"].tolist()
        for case, value in look.items():
            assert value == pytest.approx(loo[cases.index(case)], rel=1e-9)


def test_column_quantiles_match_numpy():
    rng = np.random.default_rng(0)
    values = rng.normal(size=(101, 4))
    levels = np.array([0.025, 0.5, 0.9, 0.975])
    ours = _column_quantiles(values, np.full(4, 101), levels)
    expected = [np.quantile(values[:, j], levels[j]) for j in range(4)]
    np.testing.assert_allclose(ours, expected, rtol=1e-12)


def test_bca_agrees_with_scipy_for_a_skewed_mean():
    rng = np.random.default_rng(3)
    data = rng.exponential(size=40)
    n_boot = 40_000
    idx = rng.integers(0, data.size, size=(n_boot, data.size))
    boot = data[idx].mean(axis=1)[:, None]
    jack = ((data.sum() - data) / (data.size - 1))[:, None]
    lo, hi = bca_interval(np.array([data.mean()]), boot, jack, alpha=0.05)
    ref = sps.bootstrap((data,), np.mean, n_resamples=n_boot, method="BCa",
                        confidence_level=0.95, rng=np.random.default_rng(4)).confidence_interval
    # Two independent Monte Carlo runs of the same interval; the tolerance is
    # several times the resampling error of an interval end at 40,000 resamples.
    assert lo[0] == pytest.approx(ref.low, abs=0.01)
    assert hi[0] == pytest.approx(ref.high, abs=0.01)
    # BCa moves right of the percentile interval for a right-skewed mean.
    assert hi[0] > np.quantile(boot, 0.975)


def test_same_seed_same_numbers_and_json_safe(fitted):
    design, first, policies = fitted
    again = fit_policies(design, first, scale="continuous", n_boot=200, rng=5)
    assert json.dumps(again.to_dict(), sort_keys=True) == json.dumps(policies.to_dict(), sort_keys=True)
    other = fit_policies(design, first, scale="continuous", n_boot=200, rng=6)
    assert other.raters[0].r_ci != policies.raters[0].r_ci
    block = policies.raters[0].to_dict()["policy"]
    assert DESIGN_POLICY_KEYS <= set(block)
    assert set(block["weights"]) == set(design.columns)
    assert set(block["importance"]) == set(design.cues)
    lo, hi = block["r_ci"]
    assert lo < block["r"] < hi


def test_tables_are_tidy(fitted):
    design, _first, policies = fitted
    assert len(policies.to_frame()) == 6
    cols = policies.columns_frame()
    assert len(cols) == 6 * design.n_columns
    assert set(cols["cue"]) == set(design.cues)
    cues = policies.cues_frame()
    assert len(cues) == 6 * len(design.cues)
    assert cues.groupby("rater")["importance"].sum().round(10).eq(1.0).all()


def test_captured_policy_reproduces_fitted_values(fitted):
    design, first, policies = fitted
    captured = json.loads(json.dumps(captured_policies(policies, design)))
    assert captured["schema"] == POLICIES_SCHEMA
    test_cue = next(c for c in captured["design"]["cues"] if c["name"] == "test")
    assert test_cue["missing_indicator"] == "test:missing"
    assert test_cue["fill_value"] == pytest.approx(np.nanmean(
        pd.Series(design.matrix[design.matrix[:, design.columns.index("test:missing")] == 0,
                                design.columns.index("test")])))
    track = next(c for c in captured["design"]["cues"] if c["name"] == "track")
    assert track["reference_level"] == design.reference_levels["track"]
    entry = captured["policies"][0]
    X, y, names = rater_matrix(design, first, entry["rater"])
    predicted = entry["intercept"] + X @ np.array([entry["weights"][c] for c in names])
    refit = np.linalg.lstsq(np.column_stack([np.ones(y.size), X]), y, rcond=None)[0]
    np.testing.assert_allclose(predicted, np.column_stack([np.ones(y.size), X]) @ refit, rtol=1e-9)


def _tiny_design(n=30):
    rng = np.random.default_rng(0)
    cases = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n)},
                         index=[f"c{i}" for i in range(n)])
    return build_cue_design(cases, [CueRule("a"), CueRule("b")]), cases


def test_degenerate_raters_get_nan_and_a_warning():
    design, cases = _tiny_design()
    rng = np.random.default_rng(1)
    ids = list(cases.index)
    first = pd.concat([
        pd.DataFrame({"rater": "steady", "case": ids, "judgment": 3.0}),
        pd.DataFrame({"rater": "brief", "case": ids[:3], "judgment": [1.0, 2.0, 3.0]}),
        pd.DataFrame({"rater": "normal", "case": ids,
                      "judgment": cases["a"].to_numpy() + rng.normal(size=30)}),
    ])
    policies = fit_policies(design, first, scale="ordinal", n_boot=50, rng=0)
    for name, words in (("steady", "same"), ("brief", "Only 3 usable cases")):
        p = policies[name]
        assert "not_fitted" in p.flags and np.isnan(p.r) and np.isnan(p.weights["a"])
        assert any(words in w for w in p.warnings)
        assert json.dumps(p.to_dict())  # NaN became null
    assert np.isfinite(policies["normal"].r)


def test_planted_separation_is_reported():
    design, cases = _tiny_design(40)
    decision = (cases["a"] > 0).astype(float).to_numpy()
    first = pd.DataFrame({"rater": "strict", "case": cases.index, "judgment": decision})
    p = fit_policies(design, first, scale="binary", n_boot=0)["strict"]
    assert "separation" in p.flags and p.logistic.separation
    assert np.isnan(p.logistic.weights["a"])
    assert any("separate" in w for w in p.warnings)
    assert np.isfinite(p.r)  # the linear probability model still gives R_s


def test_user_errors_are_clear():
    design, cases = _tiny_design()
    good = pd.DataFrame({"rater": "x", "case": cases.index, "judgment": 1.0})
    with pytest.raises(DataError, match="lacks column"):
        fit_policies(design, good.drop(columns="judgment"), scale="continuous")
    with pytest.raises(DataError, match="Case 'ghost'"):
        fit_policies(design, pd.concat([good, pd.DataFrame(
            {"rater": ["x"], "case": ["ghost"], "judgment": [1.0]})]), scale="continuous")
    with pytest.raises(DataError, match="binary judgment"):
        fit_policies(design, good.assign(judgment=2.0), scale="binary")
    with pytest.raises(CalibrateError, match="'scale' option"):
        fit_policies(design, good, scale="nominal")
    with pytest.raises(CalibrateError, match="'n_boot' option"):
        fit_policies(design, good, scale="continuous", n_boot=-1)


def test_public_names_stay_importable_from_the_policy_module():
    # The split into policy_results, resampling and logistic keeps the old import paths.
    import calibrate.policy.logistic
    import calibrate.policy.results
    import calibrate.policy.resampling

    import calibrate.policy

    for name in ("PolicySet", "RaterPolicy", "LogisticPolicy", "CaseToReview"):
        assert getattr(calibrate.policy, name) is getattr(calibrate.policy.results, name)
    assert calibrate.policy.bca_interval is calibrate.policy.resampling.bca_interval
    assert set(calibrate.policy.__all__) >= {"fit_policies", "captured_policies", "bca_interval",
                                             "PolicySet", "RaterPolicy", "LogisticPolicy",
                                             "CaseToReview"}
    assert callable(calibrate.policy.logistic.fit_logistic)
