"""Policy homogeneity: do the raters weigh the cues differently?"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats
from statsmodels.stats.anova import anova_lm

from calibrate.panel.pairs import heterogeneity_wald, policy_homogeneity
from tests.disagreement_panels import case_pool, first_judgments

COMMON = np.array([0.08, 0.6, 0.7, -0.5])


def _long(design, first) -> pd.DataFrame:
    """First judgments with the design columns renamed x0..x3 (formula-safe)."""
    X = pd.DataFrame(design.matrix, index=list(design.case_ids),
                     columns=[f"x{j}" for j in range(design.n_columns)])
    return first.join(X, on="case").dropna().reset_index(drop=True)


def _panel(seed, *, weights=COMMON, noise=0.8, per_rater=70, n_raters=5):
    rng = np.random.default_rng(seed)
    design = case_pool(rng, 150)
    first = first_judgments(rng, design, per_rater=per_rater, weights=weights, noise=noise,
                            n_raters=n_raters)
    return design, first


def test_classical_f_matches_statsmodels_nested_models():
    # Reference: statsmodels anova_lm on the two OLS models (separate slopes per rater vs
    # common slopes with rater intercepts), fitted from the long table by formula.
    rng = np.random.default_rng(4)
    w = COMMON + rng.normal(scale=0.2, size=(5, 4))
    design, first = _panel(4, weights=w)
    result = policy_homogeneity(design, first, rng=1, n_resamples=99)
    data = _long(design, first)
    separate = " + ".join(f"C(rater):x{j}" for j in range(4))
    full = smf.ols(f"judgment ~ C(rater) + {separate}", data).fit()
    common = smf.ols("judgment ~ C(rater) + x0 + x1 + x2 + x3", data).fit()
    table = anova_lm(common, full)
    assert result.classical_statistic == pytest.approx(table.F.iloc[1], rel=1e-9)
    assert result.classical_p_value == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-7)
    assert result.overall.classical_df_den == table.df_resid.iloc[1]
    # per cue: the categorical cue 'letter' (x2, x3) gets common slopes, the rest stay separate
    partial = smf.ols("judgment ~ C(rater) + C(rater):x0 + C(rater):x1 + x2 + x3", data).fit()
    letter = next(t for t in result.per_cue if t.cue == "letter")
    assert letter.classical_statistic == pytest.approx(anova_lm(partial, full).F.iloc[1], rel=1e-9)
    assert letter.df == 2 * (5 - 1)


def test_wald_statistic_matches_statsmodels_weighted_fit():
    # Reference: statsmodels WLS of the interaction model with weights 1 / s_r^2 (each
    # rater's own residual variance from a statsmodels OLS fit) and the scale fixed at 1;
    # its Wald test of all rater x cue interactions is the statistic T.
    rng = np.random.default_rng(6)
    design, first = _panel(6, weights=COMMON + rng.normal(scale=0.1, size=(5, 4)),
                           noise=np.array([0.3, 0.6, 0.9, 1.2, 2.0]))
    result = policy_homogeneity(design, first, rng=1, n_resamples=99)
    data = _long(design, first)
    s2 = {}
    for rater, part in data.groupby("rater"):
        s2[rater] = sm.OLS(part.judgment, sm.add_constant(part[["x0", "x1", "x2", "x3"]])).fit().scale
    model = smf.wls("judgment ~ C(rater) * (x0 + x1 + x2 + x3)", data,
                    weights=1.0 / data.rater.map(s2))
    fit = model.fit(cov_type="fixed scale", cov_kwds={"scale": 1.0})
    names = list(fit.params.index)
    inter = [i for i, n in enumerate(names) if ":" in n]
    R = np.eye(len(names))[inter]
    wald = fit.wald_test(R, use_f=False, scalar=True)
    assert result.statistic == pytest.approx(float(wald.statistic), rel=1e-8)
    assert result.overall.p_value_chi2 == pytest.approx(float(wald.pvalue), rel=1e-6, abs=1e-300)


def test_wald_with_one_pooled_variance_is_the_classical_f():
    # Exact identity: with a common error variance s^2 = RSS_full / df_den, the Wald
    # statistic of q linear restrictions equals q times the nested-model F (e.g. Greene,
    # Econometric Analysis, the Wald/F relation for linear restrictions; from memory).
    design, first = _panel(8, weights=COMMON + np.random.default_rng(8).normal(0, .2, (5, 4)))
    result = policy_homogeneity(design, first, rng=1, n_resamples=99)
    data = _long(design, first)
    estimates, inverses, rss = [], [], 0.0
    for _, part in data.groupby("rater"):
        fit = sm.OLS(part.judgment, sm.add_constant(part[["x0", "x1", "x2", "x3"]])).fit()
        estimates.append(fit.params.to_numpy()[1:])
        inverses.append(fit.normalized_cov_params.to_numpy()[1:, 1:])
        rss += fit.ssr
    pooled = rss / result.overall.classical_df_den
    precisions = np.linalg.inv(np.array(inverses)) / pooled
    T = heterogeneity_wald(np.array(estimates), precisions)
    assert T / result.df == pytest.approx(result.classical_statistic, rel=1e-9)


def _null_panels(n_panels, seed):
    """Common policy, unequal noise paired with unequal case counts (noisy raters read less)."""
    rng = np.random.default_rng(seed)
    design = case_pool(rng, 200)
    per_rater = [20, 25, 30, 60, 100, 150]
    noise = np.array([3.0, 2.5, 2.0, 1.0, 0.6, 0.4])
    robust, classical = [], []
    for k in range(n_panels):
        first = first_judgments(rng, design, per_rater=per_rater, weights=COMMON, noise=noise)
        result = policy_homogeneity(design, first, rng=k, n_resamples=299)
        robust.append(result.p_value)
        classical.append(result.classical_p_value)
    return np.array(robust), np.array(classical)


def test_robust_p_values_are_uniform_under_a_common_policy_with_unequal_noise():
    # Planted truth: every rater uses the same weights, noise SD differs eightfold.
    # The parametric-bootstrap p-value (Krishnamoorthy, Lu & Mathew 2007) should be
    # uniform; the classical F, which pools one variance, should not (both shown).
    robust, classical = _null_panels(300, seed=2026)
    rejection = float(np.mean(robust < 0.05))
    mc_se = np.sqrt(0.05 * 0.95 / robust.size)
    assert abs(rejection - 0.05) < 3 * mc_se           # measured 0.047 (seed 2026); KS p 0.61
    assert stats.kstest(robust, "uniform").pvalue > 0.01
    assert np.mean(classical < 0.05) > 0.5             # measured 0.88: far too many
    assert stats.kstest(classical, "uniform").pvalue < 1e-6


def test_planted_difference_on_one_cue_is_found_on_that_cue():
    # Planted truth: raters differ only in the weight on 'essay' (column x1).
    weights = np.tile(COMMON, (6, 1))
    weights[:, 1] = [0.0, 0.3, 0.6, 0.9, 1.2, 1.5]
    design, first = _panel(31, weights=weights, n_raters=6, per_rater=90, noise=0.7)
    result = policy_homogeneity(design, first, rng=3, n_resamples=999)
    by_cue = {t.cue: t for t in result.per_cue}
    assert result.p_value < 0.01 and by_cue["essay"].p_value < 0.01
    assert by_cue["record"].p_value > 0.01 and by_cue["letter"].p_value > 0.01


def test_seeded_and_serialisable():
    design, first = _panel(2)
    a = policy_homogeneity(design, first, rng=5, n_resamples=199)
    b = policy_homogeneity(design, first, rng=np.random.default_rng(5), n_resamples=199)
    assert json.dumps(a.to_dict()) == json.dumps(b.to_dict())
    d = a.to_dict()
    assert {"statistic", "p_value", "method", "per_cue"} <= set(d)
    assert set(d["per_cue"]) == {"record", "essay", "letter"}
    assert len(a.to_frame()) == 4


def test_raters_who_cannot_be_fitted_are_left_out_by_name():
    design, first = _panel(3)
    tiny = first[first.rater == "reader004"].iloc[:5]
    first = pd.concat([first[first.rater != "reader004"], tiny])
    result = policy_homogeneity(design, first, rng=1, n_resamples=99)
    assert result.raters_left_out == ("reader004",) and result.n_raters == 4
    assert any("reader004" in w for w in result.warnings)


def test_a_single_rater_gives_nan_and_a_warning():
    design, first = _panel(3)
    result = policy_homogeneity(design, first[first.rater == "reader000"], rng=1)
    assert np.isnan(result.statistic) and np.isnan(result.p_value)
    assert any("at least two raters" in w for w in result.warnings)
    assert json.loads(json.dumps(result.to_dict()))["p_value"] is None
