"""The tests across raters equal scipy's and statsmodels' on the same numbers; sizes under no change."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import stats

from calibrate.training import (ancova_difference, bootstrap_difference, fisher_z_difference,
                                paired_tests, welch_difference)

DELTAS = np.array([0.12, -0.03, 0.25, 0.08, 0.19, 0.02, 0.11, -0.06, 0.15])


def test_paired_tests_equal_scipy():
    out = paired_tests(DELTAS)
    t = stats.ttest_1samp(DELTAS, 0.0)
    w = stats.wilcoxon(DELTAS)
    ci = t.confidence_interval(0.95)
    assert out["t"] == pytest.approx(t.statistic)
    assert out["p_value"] == pytest.approx(t.pvalue)
    assert (out["ci_low"], out["ci_high"]) == pytest.approx((ci.low, ci.high))
    assert out["wilcoxon_statistic"] == pytest.approx(w.statistic)
    assert out["wilcoxon_p"] == pytest.approx(w.pvalue)
    assert out["effect_size_dz"] == pytest.approx(DELTAS.mean() / DELTAS.std(ddof=1))


def test_paired_t_on_changes_equals_scipy_ttest_rel():
    rng = np.random.default_rng(3)
    before = rng.normal(0.6, 0.1, 12)
    after = before + rng.normal(0.05, 0.08, 12)
    assert paired_tests(after - before)["p_value"] == pytest.approx(stats.ttest_rel(after, before).pvalue)


def test_welch_equals_scipy():
    a, b = DELTAS, np.array([0.01, -0.05, 0.04, 0.0, -0.02, 0.06])
    out = welch_difference(a, b)
    ref = stats.ttest_ind(a, b, equal_var=False)
    ci = ref.confidence_interval(0.95)
    assert out["p_value"] == pytest.approx(ref.pvalue)
    assert out["df"] == pytest.approx(ref.df)
    assert (out["ci_low"], out["ci_high"]) == pytest.approx((ci.low, ci.high))


def test_ancova_equals_statsmodels():
    rng = np.random.default_rng(5)
    base = rng.normal(0.4, 0.1, 16)
    arm = np.r_[np.ones(8), np.zeros(8)]
    final = 0.2 + 0.5 * base - 0.15 * arm + rng.normal(0, 0.05, 16)
    fit = smf.ols("final ~ base + arm", pd.DataFrame({"final": final, "base": base, "arm": arm})).fit()
    out = ancova_difference(base, final, arm)
    assert out["estimate"] == pytest.approx(fit.params["arm"])
    assert out["p_value"] == pytest.approx(fit.pvalues["arm"])
    assert (out["ci_low"], out["ci_high"]) == pytest.approx(tuple(fit.conf_int().loc["arm"]))


def _binomial_band(n, p=0.05, level=0.999):
    return stats.binom.ppf((1 - level) / 2, n, p) / n, stats.binom.ppf(1 - (1 - level) / 2, n, p) / n


def test_fisher_z_size_under_no_change():
    # 400 comparisons of retest correlations (true rho .7 in both phases) on 1-7 ratings with a
    # ceiling, 25 and 40 repeat pairs; the benchmark runs 2,000 (DEVELOPERS.md).
    rng = np.random.default_rng(20261202)
    hits = 0
    for _ in range(400):
        rs = []
        for n in (25, 40):
            true = rng.normal(0, 1, n)
            a = np.clip(np.round(4.8 + 1.2 * (true + rng.normal(0, 0.65, n))), 1, 7)
            b = np.clip(np.round(4.8 + 1.2 * (true + rng.normal(0, 0.65, n))), 1, 7)
            rs.append(np.corrcoef(a, b)[0, 1])
        hits += fisher_z_difference(rs[0], 25, rs[1], 40)[1] < 0.05
    low, high = _binomial_band(400)
    assert low <= hits / 400 <= high


def test_bootstrap_difference_of_identical_draws_has_no_change():
    draws = np.random.default_rng(1).normal(size=(3, 500))
    low, high, p = bootstrap_difference(draws, draws)
    assert np.allclose(low, 0) and np.allclose(high, 0)
    assert np.allclose(p, 1.0)
