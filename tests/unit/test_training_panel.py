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
                                             pairwise_distance)
from calibrate.training.phases import comparability, wherry_adjusted_r


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

    from calibrate.training import bootstrap_difference

    sys.path.insert(0, str(Path(__file__).parent))
    from training_simulation import population_rs, rs_draws

    rng = np.random.default_rng(40120)
    truth = population_rs(0.6, n=60_000) - population_rs(0.9, n=60_000)
    a = wherry_adjusted_r(rs_draws(rng, [0.9] * 100, 40, 300), 40, 4)
    b = wherry_adjusted_r(rs_draws(rng, [0.6] * 100, 120, 300), 120, 4)
    low, high, _ = bootstrap_difference(a[:, 1:], b[:, 1:])
    assert np.mean((low <= truth) & (truth <= high)) >= 0.88
