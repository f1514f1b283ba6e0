"""The curvature test with a null that respects a rounded, bounded 1-7 scale.

A small seeded version of benchmarks/bench_scale_nulls.py: 300 linear raters per scale
mean; the test's rate of p < .05 must have a 99.9% binomial interval (scipy, exact) that
overlaps the 4-6% band. The fitted rounded-normal policy must recover the planted
weights (the latent model is the data-generating one, so maximum likelihood is consistent).
"""

import numpy as np
import pytest
from scipy import stats

from calibrate.policy import diagnostics as dg

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
    fit = dg.fit_rounded_normal(X, y, groups, 50, scale_min=1, scale_max=7)
    assert np.median(fit.coef, axis=0) == pytest.approx(WEIGHTS, abs=0.03)
    assert np.median(fit.sigma) == pytest.approx(1.0, abs=0.05)
    assert np.median(fit.intercept) == pytest.approx(5.5, abs=0.05)


def test_same_seed_same_p_values():
    rng = np.random.default_rng(1)
    X, y, groups = _linear_raters(rng, 20, 30, 4.0)
    a = dg.scale_reset_p(X, y, groups, 20, scale_min=1, scale_max=7, n_sim=49, rng=5)
    b = dg.scale_reset_p(X, y, groups, 20, scale_min=1, scale_max=7, n_sim=49, rng=5)
    assert np.array_equal(a[1], b[1], equal_nan=True)
