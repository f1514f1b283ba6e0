"""The plan's expected precision of R_s (calibrate.design.plan.simulated_rs).

External check: the same simulated judgments fitted one draw at a time with statsmodels OLS
(Seabold & Perktold 2010), whose ``rsquared`` gives R_s; the batched QR path must give the
same values to 1e-10. A second check is an identity of the set-up: with many files the
simulated R_s centres on the planned 0.80.
"""

import numpy as np
import pandas as pd
import statsmodels.api as sm

from calibrate.design.plan import plan_exercise, simulated_rs


def test_batched_rs_equals_statsmodels_fitted_draw_by_draw():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(40, 4)) @ np.array([[1, .5, 0, 0], [0, 1, .3, 0], [0, 0, 1, 0], [0, 0, 0, 1.0]])
    draws = simulated_rs(X, np.random.default_rng(9), draws=50)
    # rebuild the same judgments and fit each with statsmodels
    rng2 = np.random.default_rng(9)
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    signal = Z.sum(axis=1)
    signal = signal / signal.std() * 0.8
    Y = signal[:, None] + rng2.standard_normal((40, 50)) * np.sqrt(1 - 0.8 ** 2)
    ref = [np.sqrt(sm.OLS(Y[:, j], sm.add_constant(X)).fit().rsquared) for j in range(50)]
    np.testing.assert_allclose(draws, ref, atol=1e-10)


def test_many_files_centre_on_the_planned_rs_and_few_files_widen_the_interval():
    rng = np.random.default_rng(5)
    big = simulated_rs(rng.normal(size=(2000, 3)), np.random.default_rng(1), draws=400)
    assert abs(np.median(big) - 0.80) < 0.01
    pool = pd.DataFrame({"file": [f"f{i}" for i in range(300)], **{c: rng.normal(size=300) for c in "abc"}})
    small = plan_exercise(pool, ["r1", "r2"], 30, seed=1)
    large = plan_exercise(pool, ["r1", "r2"], 120, seed=1)
    assert small.rs_interval_width > large.rs_interval_width > 0
    assert small.rs_detectable_change > large.rs_detectable_change
    # the detectable change is 2.80 * sqrt(2) * SD (80% power, 5% two-sided)
    assert np.isclose(small.rs_detectable_change, 2.8016 * np.sqrt(2) * small.rs_sd, rtol=1e-3)
    assert small.to_dict()["expected_r_s_precision"]["interval_width_95"] == small.rs_interval_width


def test_expected_se_formula_is_the_ols_standard_error_of_a_standardized_weight():
    # Exact identity, checked with statsmodels: with cues and judgments z-scored, OLS gives
    # SE(beta_j) = sqrt((1 - R^2) / (n - k - 1)) * sqrt(VIF_j), the formula the plan uses with
    # R^2 = 0.80^2 (from s^2 = SS_y (1 - R^2) / (n - k - 1) and SS_j (1 - R_j^2) = (n - 1) / VIF_j).
    from calibrate.design.plan import _vif

    rng = np.random.default_rng(11)
    n, k = 60, 3
    X = rng.normal(size=(n, k)) @ np.array([[1, .6, .2], [0, 1, .4], [0, 0, 1.0]])
    y = X @ np.array([.5, .3, .2]) + rng.normal(0, 1, n)
    z = lambda a: (a - a.mean(axis=0)) / a.std(axis=0, ddof=1)
    fit = sm.OLS(z(y), sm.add_constant(z(X))).fit()
    formula = np.sqrt((1 - fit.rsquared) / (n - k - 1) * _vif(X))
    np.testing.assert_allclose(fit.bse[1:], formula, rtol=1e-10)
