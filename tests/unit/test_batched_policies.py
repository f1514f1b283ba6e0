"""The policy stage's batched paths equal a per-rater reference (issue 17, policies and cut-offs).

Each batched computation over all raters (and all simulated sets) is set against a plain
loop over raters, on small panels: a shared design (every rater reads the same cases) and an
incomplete one (raters of 14-60 cases), on a 1-7 scale with ends; to 1e-9.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from calibrate.policy.linear_nulls import fit_rounded_normal

TOL = {"rtol": 1e-9, "atol": 1e-9}


def _panel(shared: bool, seed=5, n_raters=10, p=3):
    rng = np.random.default_rng(seed)
    sizes = np.full(n_raters, 40) if shared else rng.integers(14, 61, n_raters)
    groups = np.repeat(np.arange(n_raters), sizes)
    X = (np.tile(rng.normal(size=(40, p)), (n_raters, 1)) if shared
         else rng.normal(size=(groups.size, p)))
    latent = 5.0 + X @ np.linspace(0.8, 0.2, p) + rng.normal(0, 0.9, groups.size)
    return X, np.clip(np.round(latent), 1, 7), groups, n_raters


def _interval_loglik(theta, X, y):
    """The rounded-normal log-likelihood written out with scipy.stats.norm (one rater)."""
    mu = theta[0] + X @ theta[1:-1]
    sigma = np.exp(theta[-1])
    lower = np.where(y <= 1, -np.inf, y - 0.5)
    upper = np.where(y >= 7, np.inf, y + 0.5)
    prob = stats.norm.cdf((upper - mu) / sigma) - stats.norm.cdf((lower - mu) / sigma)
    return np.log(np.maximum(prob, 1e-300)).sum()


@pytest.mark.parametrize("shared", [True, False])
def test_rounded_normal_fit_of_all_raters_equals_each_rater_fitted_alone(shared):
    X, y, groups, G = _panel(shared)
    batched = fit_rounded_normal(X, y, groups, G, scale_min=1, scale_max=7)
    assert batched.converged.all()
    for g in range(G):
        rows = groups == g
        alone = fit_rounded_normal(X[rows], y[rows], np.zeros(rows.sum(), dtype=int), 1,
                                   scale_min=1, scale_max=7)
        np.testing.assert_allclose(batched.coef[g], alone.coef[0], **TOL)
        np.testing.assert_allclose(batched.intercept[g], alone.intercept[0], **TOL)
        np.testing.assert_allclose(batched.sigma[g], alone.sigma[0], **TOL)


def test_rounded_normal_fit_is_the_maximum_a_general_optimizer_finds():
    # Independent reference: scipy.optimize (BFGS from least squares) on the written-out
    # likelihood, rater by rater; ours must be at least as high and at the same point.
    X, y, groups, G = _panel(False)
    fit = fit_rounded_normal(X, y, groups, G, scale_min=1, scale_max=7)
    for g in range(3):
        rows = groups == g
        ours = np.r_[fit.intercept[g], fit.coef[g], np.log(fit.sigma[g])]
        start = np.r_[np.linalg.lstsq(np.column_stack([np.ones(rows.sum()), X[rows]]), y[rows],
                                      rcond=None)[0], 0.0]
        best = optimize.minimize(lambda t: -_interval_loglik(t, X[rows], y[rows]), start,
                                 method="BFGS", options={"gtol": 1e-10})
        assert _interval_loglik(ours, X[rows], y[rows]) >= -best.fun - 1e-9
        np.testing.assert_allclose(ours, best.x, atol=1e-4)
