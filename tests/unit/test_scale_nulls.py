"""The curvature test with a null that respects the scale (1-7, 0/1, continuous).

A small seeded version of benchmarks/bench_scale_nulls.py: 300 linear raters per setting;
the test's rate of p < .05 must have a 99.9% binomial interval (scipy, exact) that
overlaps the 4-6% band. The fitted rounded-normal policy must recover the planted
weights (the latent model is the data-generating one, so maximum likelihood is consistent).
"""

import numpy as np
import pytest
from scipy import stats

from calibrate.policy import diagnostics as dg
from calibrate.policy.linalg import grouped_sscp, ols_from_sscp
from calibrate.policy.linear_nulls import fit_linear_null, fit_rounded_normal
from tests.scale_raters import overlaps_band, scale_raters

WEIGHTS = np.array([0.5, 0.4, 0.3])


def _linear_raters(rng, n_raters, n_cases, mean, curve=0.0):
    X = rng.standard_normal((n_raters * n_cases, 3))
    groups = np.repeat(np.arange(n_raters), n_cases)
    signal = X @ WEIGHTS
    latent = mean + signal + curve * signal**2 + rng.standard_normal(X.shape[0])
    return X, np.clip(np.round(latent), 1, 7), groups


@pytest.mark.parametrize("mean", [2.5, 4.0, 5.5])
def test_size_on_a_rounded_one_to_seven_scale(mean):
    rng = np.random.default_rng(int(mean * 10))
    X, y, groups = _linear_raters(rng, 300, 40, mean)
    _, p = dg.scale_reset_p(X, y, groups, 300, scale_min=1, scale_max=7, n_sim=99, rng=rng)
    hits = int((p < 0.05).sum())
    ci = stats.binomtest(hits, 300).proportion_ci(confidence_level=0.999, method="exact")
    assert ci.low <= 0.06 and ci.high >= 0.04


def test_it_finds_a_planted_curve():
    rng = np.random.default_rng(7)
    X, y, groups = _linear_raters(rng, 100, 80, 4.0, curve=0.5)
    _, p = dg.scale_reset_p(X, y, groups, 100, scale_min=1, scale_max=7, n_sim=99, rng=rng)
    assert (p < 0.05).mean() > 0.5


def test_rounded_normal_fit_recovers_the_latent_policy():
    rng = np.random.default_rng(3)
    X, y, groups = _linear_raters(rng, 50, 400, 5.5)   # about a third of judgments at 7
    fit = fit_rounded_normal(X, y, groups, 50, scale_min=1, scale_max=7)
    assert np.median(fit.coef, axis=0) == pytest.approx(WEIGHTS, abs=0.03)
    assert np.median(fit.sigma) == pytest.approx(1.0, abs=0.05)
    assert np.median(fit.intercept) == pytest.approx(5.5, abs=0.05)


def test_same_seed_same_p_values():
    rng = np.random.default_rng(1)
    X, y, groups = _linear_raters(rng, 20, 30, 4.0)
    a = dg.scale_reset_p(X, y, groups, 20, scale_min=1, scale_max=7, n_sim=49, rng=5)
    b = dg.scale_reset_p(X, y, groups, 20, scale_min=1, scale_max=7, n_sim=49, rng=5)
    assert np.array_equal(a[1], b[1], equal_nan=True)


def test_rounded_normal_fit_matches_a_general_optimizer():
    # Independent reference: the interval-censored normal log-likelihood written out with
    # scipy.stats.norm and maximized by scipy.optimize (Nelder-Mead then BFGS), one rater.
    from scipy import optimize

    rng = np.random.default_rng(11)
    X, y, groups = _linear_raters(rng, 1, 60, 5.0)
    lower = np.where(y <= 1, -np.inf, y - 0.5)
    upper = np.where(y >= 7, np.inf, y + 0.5)
    W = np.column_stack([np.ones(y.size), X])

    def negative_loglik(theta):
        mu, sigma = W @ theta[:4], np.exp(theta[4])
        prob = stats.norm.cdf((upper - mu) / sigma) - stats.norm.cdf((lower - mu) / sigma)
        return -np.sum(np.log(np.maximum(prob, 1e-300)))

    start = np.r_[np.linalg.lstsq(W, y, rcond=None)[0], 0.0]
    rough = optimize.minimize(negative_loglik, start, method="Nelder-Mead",
                              options={"maxiter": 20000, "xatol": 1e-10, "fatol": 1e-12})
    best = optimize.minimize(negative_loglik, rough.x, method="BFGS", options={"gtol": 1e-9})
    fit = fit_rounded_normal(X, y, groups, 1, scale_min=1, scale_max=7)
    ours = np.r_[fit.intercept, fit.coef[0], np.log(fit.sigma)]
    assert ours == pytest.approx(best.x, abs=1e-4)
    assert negative_loglik(ours) <= best.fun + 1e-8


def test_draws_follow_the_scale():
    rng = np.random.default_rng(12)
    X, y, groups = _linear_raters(rng, 5, 40, 5.5)
    rounded = fit_linear_null(X, y, groups, 5, kind="rounded", scale_min=1, scale_max=7)
    draws = rounded.draw(np.random.default_rng(1), 50)
    assert draws.shape == (50, 200) and set(np.unique(draws)) <= set(range(1, 8))
    decisions = (y > 5).astype(float)
    binary = fit_linear_null(X, decisions, groups, 5, kind="binary")
    assert set(np.unique(binary.draw(np.random.default_rng(1), 20))) <= {0.0, 1.0}
    assert binary.usable.all()
    # decisions that one cue separates exactly leave nothing to simulate: not tested
    separated = (X[:, 0] > 0).astype(float)
    assert not fit_linear_null(X, separated, groups, 5, kind="binary").usable.any()
    _, p = dg.scale_reset_p(X, separated, groups, 5, kind="binary", n_sim=19, rng=1)
    assert np.isnan(p).all()


def test_size_on_binary_decisions_is_in_the_band():
    # Probit raters (the logistic null is not the generating model), 300 raters at 40 and
    # at 100 cases: the score test inside the logistic model, chi-square(2) table. (The
    # logistic bootstrap of the least-squares F that it replaces measured 1.6% at 40 cases.)
    for n_cases, seed in ((40, 13), (100, 15)):
        rng = np.random.default_rng(seed)
        X, y, groups = scale_raters(rng, "binary", 0.3, 300, n_cases)
        p = dg.logistic_reset_test(X, y, groups, 300).p_value
        assert np.isfinite(p).mean() > 0.99
        _, low, high = overlaps_band(p[np.isfinite(p)])
        assert low <= 0.06 and high >= 0.04


def test_binary_curvature_finds_a_strong_planted_curve():
    rng = np.random.default_rng(16)
    X = rng.standard_normal((100 * 150, 3))
    groups = np.repeat(np.arange(100), 150)
    signal = X @ WEIGHTS
    y = (signal + 0.6 * signal**2 - 0.3 + rng.standard_normal(signal.size) > 0).astype(float)
    p = dg.logistic_reset_test(X, y, groups, 100).p_value
    assert (p < 0.05).mean() > 0.5


def test_binary_score_statistic_matches_statsmodels():
    # Independent reference: statsmodels GLM(Binomial).fit() on the straight-line policy,
    # then GLMResults.score_test(exog_extra=[eta^2, eta^3]) with the raw (unstandardized)
    # powers of its fitted linear predictor: Rao's score test for the added columns.
    # For the logit link the observed and expected information agree, so the two must
    # match to rounding. Separated decisions are not tested.
    import statsmodels.api as sm

    rng = np.random.default_rng(21)
    X, y, groups = scale_raters(rng, "binary", 0.3, 4, 60, "curve")
    ours = dg.logistic_reset_test(X, y, groups, 4)
    for g in range(4):
        W = sm.add_constant(X[groups == g])
        null = sm.GLM(y[groups == g], W, family=sm.families.Binomial()).fit(tol=1e-12)
        eta = W @ null.params
        statistic, p_value = null.score_test(exog_extra=np.column_stack([eta**2, eta**3]))[:2]
        assert ours.statistic[g] == pytest.approx(float(np.squeeze(statistic)), rel=1e-6)
        assert ours.p_value[g] == pytest.approx(float(np.squeeze(p_value)), rel=1e-5)
    separated = (X[:, 0] > 0).astype(float)
    assert np.isnan(dg.logistic_reset_test(X, separated, groups, 4).p_value).all()


def test_size_of_the_f_table_on_continuous_judgments():
    # exact for normal errors (Ramsey 1969), so the F table is kept on a continuous scale
    rng = np.random.default_rng(14)
    X, y, groups = scale_raters(rng, "continuous", 4.0, 2000, 40)
    fit = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, 2000), np.arange(3), 3)
    fitted = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
    p = dg.reset_test(X, y, fitted, groups, 2000, fit).p_value
    _, low, high = overlaps_band(p)
    assert low <= 0.06 and high >= 0.04


def test_the_policy_fit_uses_the_score_test_on_binary_decisions():
    # fit_policies on 0/1 reports the score statistic and its chi-square p-value (no draws,
    # so no refinement), and leaves a rater whose decisions one cue separates untested.
    import pandas as pd

    from calibrate.data.cues import CueRule, build_cue_design
    from calibrate.policy.fit import fit_policies

    rng = np.random.default_rng(22)
    X, y, groups = scale_raters(rng, "binary", 0.3, 3, 50)
    ids = [f"c{i}" for i in range(50)]
    cases = pd.DataFrame(X[:50], columns=["cue1", "cue2", "cue3"], index=ids)
    design = build_cue_design(cases, [CueRule("cue1"), CueRule("cue2"), CueRule("cue3")])
    shared_X = np.tile(X[:50], (3, 1))
    y[100:] = (X[:50, 0] > 0).astype(float)   # the third rater: separated by cue 1
    first = pd.DataFrame({"rater": [f"r{g}" for g in groups], "case": ids * 3, "judgment": y})
    policies = fit_policies(design, first, scale="binary", n_boot=0, rng=0)
    expected = dg.logistic_reset_test(shared_X, y, groups, 3)
    for g in range(2):
        reset = policies[f"r{g}"].reset
        assert reset["statistic"] == pytest.approx(expected.statistic[g], rel=1e-9)
        assert reset["p_value"] == pytest.approx(expected.p_value[g], rel=1e-9)
    assert np.isnan(policies["r2"].reset["p_value"])


def test_a_noiseless_rater_on_a_rounded_scale_gets_a_p_value_and_no_warning():
    # A straight line that runs inside every rounding interval has no finite maximum of
    # the interval-censored likelihood (sigma -> 0); the fit holds sigma at a thousandth
    # of a step, so the test gives a p-value instead of dividing by zero (the suite turns
    # warnings into errors).
    rng = np.random.default_rng(1)
    n, groups_n = 40, 3
    X = rng.normal(size=(n * groups_n, 3))
    groups = np.repeat(np.arange(groups_n), n)
    y = np.clip(np.round(4 + X @ [0.5, 0.4, 0.3]), 1, 7)
    _, p = dg.scale_reset_p(X, y, groups, groups_n, scale_min=1, scale_max=7, n_sim=19, rng=1)
    assert np.all(np.isfinite(p)) and np.all((p > 0) & (p <= 1))
