"""The pieces behind compare's new figures, each against something outside the project:
statsmodels' adjusted R^2, scipy's normal and t quantiles and pdist, the audit's own
agreement coefficients, and small seeded simulations of what the benchmark measures."""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import pdist

from calibrate.training.panel_change import (agreement_draws, detectable_change,
                                             detectable_correlation_change, distance_to_rubric,
                                             noise_corrected_distance_to_rubric, noise_corrected_spread,
                                             pairwise_distance, pairwise_squared_distance,
                                             squared_distance_to_rubric)
from calibrate.training.phases import comparability, wherry_adjusted_r
from calibrate.training.tests_of_change import correlation_bootstrap_difference


def test_wherry_adjusted_r_equals_statsmodels_adjusted_r_squared():
    import statsmodels.api as sm

    rng = np.random.default_rng(4)
    X = rng.normal(size=(40, 4))
    y = X @ [0.8, 0.5, 0.3, 0.0] + rng.normal(size=40)
    fit = sm.OLS(y, sm.add_constant(X)).fit()
    assert wherry_adjusted_r(np.sqrt(fit.rsquared), 40, 4) == pytest.approx(math.sqrt(fit.rsquared_adj))
    assert wherry_adjusted_r(0.1, 12, 4) == 0.0  # a negative adjusted R^2 reads as zero
    assert np.isnan(wherry_adjusted_r(0.5, 5, 4))  # too few cases to adjust


def test_detectable_change_is_the_power_identity():
    # A normal test: a true change of (z_.975 + z_.80) SE is detected with probability .80
    # (ignoring the far tail), by scipy's normal distribution.
    se = 0.04
    d = detectable_change(se)
    assert d == pytest.approx(2.8016 * se, rel=1e-4)
    assert stats.norm.sf(stats.norm.ppf(0.975) - d / se) == pytest.approx(0.80)
    # A t test on 9 df: the noncentral t gives about .80 at (t_.975 + t_.80) SE.
    d9 = detectable_change(se, 9)
    power = stats.nct.sf(stats.t.ppf(0.975, 9), 9, d9 / se)
    assert 0.77 < power < 0.81
    assert math.isnan(detectable_change(float("nan"))) and math.isnan(detectable_change(0.0))


def test_detectable_correlation_rise_has_80_percent_power_on_the_z_scale():
    r0, se_z = 0.6, math.sqrt(1 / 22 + 1 / 37)
    rise = detectable_correlation_change(r0, se_z)
    z_shift = (math.atanh(r0 + rise) - math.atanh(r0)) / se_z
    assert stats.norm.sf(stats.norm.ppf(0.975) - z_shift) == pytest.approx(0.80)


def test_fisher_z_detects_the_detectable_rise_about_80_percent_of_the_time():
    # Seeded small version of benchmarks/bench_training.py (500 runs there): bivariate
    # normal pairs, 25 vs 40, true rho from .60 to .60 + the detectable rise.
    from calibrate.training import fisher_z_difference

    rng = np.random.default_rng(15)
    r0 = 0.6
    r1 = r0 + detectable_correlation_change(r0, math.sqrt(1 / 22 + 1 / 37))

    def sample_r(rho, n):
        x = rng.normal(size=n)
        y = rho * x + math.sqrt(1 - rho ** 2) * rng.normal(size=n)
        return np.corrcoef(x, y)[0, 1]

    runs = 300
    hits = sum(fisher_z_difference(sample_r(r0, 25), 25, sample_r(r1, 40), 40)[1] < 0.05
               for _ in range(runs))
    ci = stats.binomtest(hits, runs).proportion_ci(0.999)
    assert ci.low <= 0.80 <= ci.high


def test_pairwise_distance_equals_scipy_pdist_and_rubric_distance_is_mean_misallocation():
    rng = np.random.default_rng(2)
    shares = rng.dirichlet(np.ones(5), size=6)
    assert pairwise_distance(shares) == pytest.approx(0.5 * pdist(shares, "cityblock").mean())
    draws = np.stack([shares, shares[::-1]], axis=1)  # (G, 2, C): two "resamples"
    assert pairwise_distance(draws) == pytest.approx([float(pairwise_distance(shares))] * 2)
    rubric = np.full(5, 0.2)
    assert distance_to_rubric(shares, rubric) == pytest.approx(
        np.mean(0.5 * np.abs(shares - rubric).sum(axis=1)))


def test_agreement_estimates_equal_the_audits_coefficients():
    from calibrate.agreement import panel_agreement

    rng = np.random.default_rng(8)
    case = rng.normal(size=30)
    rows = [{"rater": f"r{j}", "case": f"c{i}",
             "judgment": float(np.clip(np.round(4 + 1.2 * case[i] + 0.3 * j + rng.normal()), 1, 7))}
            for j in range(5) for i in range(30) if (i + j) % 4]
    first = pd.DataFrame(rows)
    out = agreement_draws(first, scale="ordinal", scale_min=1, scale_max=7, n_boot=50,
                          rng=np.random.default_rng(1))
    audit = panel_agreement(first, scale="ordinal", scale_min=1, scale_max=7, n_boot=0)
    assert out["icc"][0] == pytest.approx(audit.icc_values()["a1"])
    assert out["alpha"][0] == pytest.approx(audit.alpha.estimate)
    assert out["icc"][1].shape == (50,) and np.isfinite(out["alpha"][1]).all()


def test_comparability_words():
    assert comparability("misallocation", True) == (True, None)
    assert comparability("r", False) == (True, None)  # adjusted for the number of cases
    flag, note = comparability("misallocation", False)
    assert flag is False and "different cases in each phase" in note
    assert "correlation" in comparability("retest_r", False)[1]
    assert "panel agreement" in comparability("icc", False)[1]


def test_adjusted_rs_change_covers_with_unequal_cases_small():
    # Seeded small version of the benchmark's 40 vs 120 cases (500 pairs there): 100 rater
    # pairs, 300 resamples; the raw R_s interval held the true change in about 85-91%.
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).parent))
    from training_simulation import population_rs, rs_draws

    rng = np.random.default_rng(40120)
    truth = population_rs(0.6, n=60_000) - population_rs(0.9, n=60_000)
    a = wherry_adjusted_r(rs_draws(rng, [0.9] * 100, 40, 300), 40, 4)
    b = wherry_adjusted_r(rs_draws(rng, [0.6] * 100, 120, 300), 120, 4)
    low, high, _ = correlation_bootstrap_difference(a[:, 0], a[:, 1:], b[:, 0], b[:, 1:])
    assert np.mean((low <= truth) & (truth <= high)) >= 0.88
    # 120 vs 40 under no change (the benchmark's 1,000 pairs; here 60, 200 resamples): at
    # most 15% reject (the 99.9% binomial band around 5% for 60 reaches 15%)
    a = wherry_adjusted_r(rs_draws(rng, [0.8] * 60, 120, 200), 120, 4)
    b = wherry_adjusted_r(rs_draws(rng, [0.8] * 60, 40, 200), 40, 4)
    _, _, p = correlation_bootstrap_difference(a[:, 0], a[:, 1:], b[:, 0], b[:, 1:])
    assert np.mean(p < 0.05) <= 0.15


def test_rs_change_p_value_inverts_its_own_interval():
    # The p-value is the level at which the interval's limit on zero's side reaches zero
    # (the property scipy tests for its own intervals): the interval at confidence 1 - p
    # has a limit at zero, and at 95% it excludes zero exactly when p < 0.05.
    rng = np.random.default_rng(3)
    est1, est2 = np.array([0.55, 0.70, 0.62, 0.40]), np.array([0.68, 0.52, 0.63, 0.41])
    d1 = np.clip(est1[:, None] + rng.normal(0, 0.06, (4, 400)), 0, 1)
    d2 = np.clip(est2[:, None] + rng.normal(0, 0.08, (4, 400)), 0, 1)
    low, high, p = correlation_bootstrap_difference(est1, d1, est2, d2)
    assert np.array_equal(p < 0.05, (low > 0) | (high < 0))
    for i in range(4):
        lo, hi, _ = correlation_bootstrap_difference(est1[i:i + 1], d1[i:i + 1], est2[i:i + 1],
                                                     d2[i:i + 1], confidence=1 - p[i])
        assert min(abs(lo[0]), abs(hi[0])) == pytest.approx(0.0, abs=1e-9)


def test_rs_change_interval_is_zous_combination_of_fisher_intervals():
    # Written out from Zou (2007): each phase's interval tanh(atanh(r) +- q SD) from the SD
    # of its draws on Fisher's z scale; L = d - sqrt((r2 - l2)^2 + (u1 - r1)^2), U alike.
    rng = np.random.default_rng(9)
    d1 = np.clip(0.6 + rng.normal(0, 0.07, (1, 300)), 0, 1)
    d2 = np.clip(0.7 + rng.normal(0, 0.05, (1, 300)), 0, 1)
    low, high, _ = correlation_bootstrap_difference(np.array([0.6]), d1, np.array([0.7]), d2)
    q = stats.norm.ppf(0.975)
    s1, s2 = np.std(np.arctanh(d1), ddof=1), np.std(np.arctanh(d2), ddof=1)
    l1, u1 = math.tanh(math.atanh(0.6) - q * s1), math.tanh(math.atanh(0.6) + q * s1)
    l2, u2 = math.tanh(math.atanh(0.7) - q * s2), math.tanh(math.atanh(0.7) + q * s2)
    assert low[0] == pytest.approx(0.1 - math.hypot(0.7 - l2, u1 - 0.6))
    assert high[0] == pytest.approx(0.1 + math.hypot(u2 - 0.7, 0.6 - l1))


def test_squared_distances_equal_scipy_pdist_and_lose_only_the_noise():
    rng = np.random.default_rng(12)
    truth = rng.dirichlet(np.ones(4), size=7)
    assert pairwise_squared_distance(truth) == pytest.approx(pdist(truth, "sqeuclidean").mean())
    rubric = np.array([0.4, 0.3, 0.2, 0.1])
    assert squared_distance_to_rubric(truth, rubric) == pytest.approx(((truth - rubric) ** 2).sum(1).mean())
    # Draws with no spread: nothing to take off.
    still = np.repeat(truth[:, None, :], 30, axis=1)
    assert noise_corrected_spread(truth, still)[0] == pytest.approx(pdist(truth, "sqeuclidean").mean())
    # Each rater's estimate off its true profile by noise of SD sigma_i per cue, with
    # resamples of the same noise: averaged over 400 panels the corrected figures equal the
    # true profiles' (E||s_i - s_j||^2 = ||d_ij||^2 + tr V_i + tr V_j), the uncorrected do not.
    sigma = np.linspace(0.02, 0.08, 7)[:, None]
    spread, to_rubric, raw = [], [], []
    for _ in range(400):
        est = truth + rng.normal(size=truth.shape) * sigma
        draws = est[:, None, :] + rng.normal(size=(7, 200, 4)) * sigma[:, :, None]
        spread.append(noise_corrected_spread(est, draws)[0])
        to_rubric.append(noise_corrected_distance_to_rubric(est, draws, rubric)[0])
        raw.append(pairwise_squared_distance(est))
    true_spread = pdist(truth, "sqeuclidean").mean()
    true_rubric = ((truth - rubric) ** 2).sum(1).mean()
    assert np.mean(spread) == pytest.approx(true_spread, abs=4 * np.std(spread) / 20)
    assert np.mean(to_rubric) == pytest.approx(true_rubric, abs=4 * np.std(to_rubric) / 20)
    assert np.mean(raw) - true_spread > 8 * np.std(raw) / 20  # the bias the correction removes


def test_convergence_interval_covers_the_true_change_small():
    # Seeded small version of benchmarks/bench_training_panel.py --convergence-only (200
    # pairs of phases there, 400 resamples): 30 pairs, 200 resamples, 7 raters x 60 cases.
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).parents[2] / "benchmarks"))
    from bench_training_panel import convergence_coverage

    cover = convergence_coverage(np.random.default_rng(61), 30, 60, n_boot=200)
    assert cover["spread now"] >= 0.8 and cover["to rubric now"] >= 0.8


def test_root_distance_change_is_zous_combination_and_its_p_inverts_it():
    from calibrate.training.panel_change import root_distance, root_distance_change

    rng = np.random.default_rng(21)
    draws_a, draws_b = 0.040 + rng.normal(0, 0.006, 400), 0.018 + rng.normal(0, 0.005, 400)
    ch = root_distance_change(0.040, draws_a, 0.018, draws_b, 0.95)
    q = stats.norm.ppf(0.975)
    se_a, se_b = np.std(draws_a, ddof=1), np.std(draws_b, ddof=1)
    ra, rb = math.sqrt(0.040), math.sqrt(0.018)
    la, ua = math.sqrt(0.040 - q * se_a), math.sqrt(0.040 + q * se_a)
    lb, ub = math.sqrt(max(0.018 - q * se_b, 0)), math.sqrt(0.018 + q * se_b)
    assert ch["delta"] == pytest.approx(rb - ra)
    assert ch["ci_low"] == pytest.approx(rb - ra - math.hypot(rb - lb, ua - ra))
    assert ch["ci_high"] == pytest.approx(rb - ra + math.hypot(ub - rb, ra - la))
    assert ch["ci_high"] < 0 and ch["p_value"] < 0.05
    at_p = root_distance_change(0.040, draws_a, 0.018, draws_b, 1 - ch["p_value"])
    assert at_p["ci_high"] == pytest.approx(0.0, abs=1e-9)
    assert root_distance(-0.001) == 0.0 and root_distance(0.04) == pytest.approx(0.2)
