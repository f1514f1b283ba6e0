"""Batched policy fits against statsmodels fitted one rater at a time.

Reference: statsmodels 0.14+ (Seabold & Perktold 2010), OLS, OLSInfluence,
variance_inflation_factor, linear_reset and Logit, run on each rater's own rows.
The panel mixes a categorical cue, a test-optional score with a missing
indicator and an incomplete design (raters see different cases; one never sees
a level of the categorical cue).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats.diagnostic import linear_reset
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor

from calibrate.policy.fit import fit_policies
from tests.policy_panels import mixed_panel, rater_matrix


@pytest.fixture(scope="module")
def panel():
    design, first = mixed_panel(seed=11)
    policies = fit_policies(design, first, scale="continuous", n_boot=0)
    return design, first, policies


def _reference(design, first, policy):
    columns = [c for c in policy.weights if np.isfinite(policy.weights[c])]
    X, y, _ = rater_matrix(design, first, policy.rater, columns)
    return columns, X, y, sm.OLS(y, sm.add_constant(X)).fit()


def test_every_rater_is_fitted_and_unseen_level_has_no_weight(panel):
    design, first, policies = panel
    assert [p.flags.count("not_fitted") for p in policies.raters] == [0] * 6
    last = policies["reader5"]
    assert np.isnan(last.weights["track=arts"])
    assert any("track=arts" in w for w in last.warnings)


def test_weights_se_r2_match_statsmodels(panel):
    design, first, policies = panel
    for policy in policies.raters:
        columns, X, y, ref = _reference(design, first, policy)
        ours = np.r_[policy.intercept, [policy.weights[c] for c in columns]]
        np.testing.assert_allclose(ours, ref.params, rtol=1e-8, atol=1e-10)
        ours_se = np.r_[policy.intercept_se, [policy.se[c] for c in columns]]
        np.testing.assert_allclose(ours_se, ref.bse, rtol=1e-8)
        np.testing.assert_allclose([policy.p_value[c] for c in columns], ref.pvalues[1:],
                                   rtol=1e-6, atol=1e-12)
        ci = ref.conf_int(alpha=0.05)[1:]
        np.testing.assert_allclose([policy.ci_low[c] for c in columns], ci[:, 0], rtol=1e-8)
        np.testing.assert_allclose([policy.ci_high[c] for c in columns], ci[:, 1], rtol=1e-8)
        assert policy.r2 == pytest.approx(ref.rsquared, rel=1e-8)
        assert policy.r2_adj == pytest.approx(ref.rsquared_adj, rel=1e-8)
        assert policy.r == pytest.approx(np.sqrt(ref.rsquared), rel=1e-8)
        assert policy.n_cases == y.size


def test_standardized_weights_utilization_structure(panel):
    design, first, policies = panel
    for policy in policies.raters:
        columns, X, y, ref = _reference(design, first, policy)
        Z = (X - X.mean(0)) / X.std(0)
        z_fit = sm.OLS((y - y.mean()) / y.std(), sm.add_constant(Z)).fit()
        np.testing.assert_allclose([policy.std_weights[c] for c in columns], z_fit.params[1:],
                                   rtol=1e-8, atol=1e-12)
        util = [np.corrcoef(X[:, j], y)[0, 1] for j in range(len(columns))]
        np.testing.assert_allclose([policy.utilization[c] for c in columns], util, rtol=1e-8)
        # Structure coefficient = correlation of the cue with the fitted judgment.
        structure = [np.corrcoef(X[:, j], ref.fittedvalues)[0, 1] for j in range(len(columns))]
        np.testing.assert_allclose([policy.structure[c] for c in columns], structure, rtol=1e-8)


def test_vif_and_condition_number(panel):
    design, first, policies = panel
    for policy in policies.raters:
        columns, X, y, ref = _reference(design, first, policy)
        exog = sm.add_constant(X)
        vif = [variance_inflation_factor(exog, j + 1) for j in range(len(columns))]
        np.testing.assert_allclose([policy.vif[c] for c in columns], vif, rtol=1e-8)
        scaled = (X - X.mean(0)) / np.sqrt(((X - X.mean(0)) ** 2).sum(0))
        assert policy.condition_number == pytest.approx(np.linalg.cond(scaled), rel=1e-8)
        # A one-column cue's generalized VIF is its VIF (Fox & Monette 1992, p. 180).
        assert policy.gvif["grades"] == pytest.approx(policy.vif["grades"], rel=1e-10)


def test_reset_matches_statsmodels(panel):
    design, first, policies = panel
    for policy in policies.raters:
        *_, ref = _reference(design, first, policy)
        test = linear_reset(ref, power=3, test_type="fitted", use_f=True)
        assert policy.reset["statistic"] == pytest.approx(float(test.fvalue), rel=1e-6)
        assert policy.reset["p_value"] == pytest.approx(float(test.pvalue), rel=1e-6)


def test_cases_to_look_at_again_are_largest_studentized_residuals(panel):
    design, first, policies = panel
    for policy in policies.raters:
        columns, X, y, ref = _reference(design, first, policy)
        t = OLSInfluence(ref).resid_studentized_external
        cases = first.loc[first["rater"] == policy.rater, "case"].to_numpy()
        top = np.argsort(-np.abs(t), kind="stable")[:5]
        assert [c.case for c in policy.look_again] == list(cases[top])
        np.testing.assert_allclose([c.studentized for c in policy.look_again], t[top], rtol=1e-8)
        np.testing.assert_allclose([c.predicted for c in policy.look_again],
                                   ref.fittedvalues[top], rtol=1e-10)


def test_logistic_weights_match_statsmodels_logit():
    design, first = mixed_panel(seed=5, n_cases=160, binary=True)
    policies = fit_policies(design, first, scale="binary", n_boot=0)
    for policy in policies.raters:
        columns = [c for c in policy.weights if np.isfinite(policy.weights[c])]
        X, y, _ = rater_matrix(design, first, policy.rater, columns)
        ref = sm.Logit(y, sm.add_constant(X)).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
        lg = policy.logistic
        assert lg is not None and lg.converged and not lg.separation
        ours = np.r_[lg.intercept, [lg.weights[c] for c in columns]]
        np.testing.assert_allclose(ours, ref.params, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose([lg.se[c] for c in columns], ref.bse[1:], rtol=1e-6)
        np.testing.assert_allclose([lg.odds_ratios[c] for c in columns], np.exp(ref.params[1:]),
                                   rtol=1e-7)
        prob = ref.predict()
        # Tjur (2009): mean fitted probability of the 1s minus that of the 0s.
        assert lg.tjur_r2 == pytest.approx(prob[y == 1].mean() - prob[y == 0].mean(), rel=1e-7)
        # The linear probability model gives R_s (DESIGN.md): OLS on the 0/1 decisions.
        lpm = sm.OLS(y, sm.add_constant(X)).fit()
        assert policy.r2 == pytest.approx(lpm.rsquared, rel=1e-8)
