"""Relative importance: dominance weights and Johnson's relative weights.

Checks: an all-subsets brute force written here independently (statsmodels OLS
R^2 for every subset, averaged as Azen & Budescu 2003 define general dominance),
for both ways of finding the subset R^2 values (one solve per subset, and the
elimination tree used for bootstrap resamples);
the identity that both measures sum to the full-model R^2 (Budescu 1993;
Johnson 2000); and planted independent cues, whose population dominance weight
is beta_j^2 / var(y).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import statsmodels.api as sm

from calibrate.errors import CalibrateError
from calibrate.policy.fit import fit_policies
from calibrate.policy.importance import (
    MAX_DOMINANCE_CUES,
    cue_importance,
    dominance_matrix,
    dominance_weights,
    relative_weights,
    subset_r2,
)
from tests.policy_panels import independent_cue_panel, mixed_panel, rater_matrix


def brute_force_dominance(X, y, groups):
    """General dominance by explicit enumeration (no shared code with calibrate)."""
    k = len(groups)

    def r2(subset):
        if not subset:
            return 0.0
        cols = [c for j in subset for c in groups[j]]
        return sm.OLS(y, sm.add_constant(X[:, cols])).fit().rsquared

    cache = {s: r2(s) for size in range(k + 1) for s in itertools.combinations(range(k), size)}
    out = []
    for j in range(k):
        others = [i for i in range(k) if i != j]
        by_size = []
        for size in range(k):
            gains = [cache[tuple(sorted(s + (j,)))] - cache[s]
                     for s in itertools.combinations(others, size)]
            by_size.append(np.mean(gains))
        out.append(np.mean(by_size))
    return np.array(out)


def test_dominance_equals_brute_force_with_categorical_cue():
    design, first = mixed_panel(seed=3)
    policies = fit_policies(design, first, scale="continuous", n_boot=0)
    for policy in policies.raters[:-1]:  # every column estimable for these raters
        X, y, _ = rater_matrix(design, first, policy.rater)
        groups = [design.columns_of(c) for c in design.cues]
        expected = brute_force_dominance(X, y, groups)
        ours = [policy.importance_r2[c] for c in design.cues]
        np.testing.assert_allclose(ours, expected, rtol=1e-9, atol=1e-12)
        assert sum(ours) == pytest.approx(policy.r2, rel=1e-10)
        assert sum(policy.importance.values()) == pytest.approx(1.0, rel=1e-10)


def test_relative_weights_sum_to_r2_and_track_dominance():
    design, first = mixed_panel(seed=4)
    policies = fit_policies(design, first, scale="continuous", n_boot=0)
    for policy in policies.raters:
        rw = np.array(list(policy.relative_weights_r2.values()))
        finite = rw[np.isfinite(rw)]
        assert finite.sum() == pytest.approx(policy.r2, rel=1e-9)
        dom = np.array([policy.importance_r2[c] for c in policy.relative_weights_r2])
        # Johnson (2000) reports relative weights within a few hundredths of dominance
        # weights in his examples (from memory); a loose check that they agree.
        np.testing.assert_allclose(rw[np.isfinite(rw)], dom[np.isfinite(rw)], atol=0.05)


def test_relative_weights_equal_squared_correlations_for_orthogonal_cues():
    # Exact identity: with uncorrelated cues each weight is r(y, x_j)^2.
    corr_xx = np.eye(3)[None]
    corr_xy = np.array([[[0.5], [-0.3], [0.1]]])  # (N, p, R)
    np.testing.assert_allclose(relative_weights(corr_xx, corr_xy, [[0], [1], [2]])[0, 0],
                               [0.25, 0.09, 0.01], rtol=1e-12)
    np.testing.assert_allclose(dominance_weights(corr_xx, corr_xy, [[0], [1], [2]])[0, 0],
                               [0.25, 0.09, 0.01], rtol=1e-12)


def test_planted_importance_is_recovered():
    beta = np.array([0.6, 0.4, 0.2, 0.0])
    design, first = independent_cue_panel(2, n_designs=40, raters_per_design=1, n_cases=400,
                                          beta=beta, noise_sd=0.5)
    policies = fit_policies(design, first, scale="continuous", n_boot=0)
    shares = np.array([[p.importance[c] for c in design.cues] for p in policies.raters])
    np.testing.assert_allclose(shares.mean(axis=0), beta**2 / (beta**2).sum(), atol=0.02)


def test_auto_switches_to_relative_weights_beyond_the_limit():
    k = MAX_DOMINANCE_CUES + 1
    rng = np.random.default_rng(0)
    A = rng.normal(size=(200, k))
    corr = np.corrcoef(np.column_stack([A, A @ rng.normal(size=k) + rng.normal(size=200)]),
                       rowvar=False)
    values, method = cue_importance(corr[None, :k, :k], corr[None, :k, k:],
                                    [[j] for j in range(k)])
    assert method == "relative_weights"
    r2 = corr[k, :k] @ np.linalg.solve(corr[:k, :k], corr[:k, k])
    assert values.sum() == pytest.approx(r2, rel=1e-10)


def test_unknown_method_is_a_clear_error():
    with pytest.raises(CalibrateError, match="'method' option of cue_importance"):
        cue_importance(np.eye(2)[None], np.zeros((1, 2, 1)), [[0], [1]], method="shapley")


def test_subset_table_and_accumulated_dominance_agree():
    # The chunked accumulation must equal the all-subsets table times the weight map.
    rng = np.random.default_rng(5)
    data = rng.normal(size=(60, 6)) @ rng.normal(size=(6, 6))
    corr = np.corrcoef(data, rowvar=False)
    groups = [[0], [1, 2], [3], [4]]
    table = subset_r2(corr[None, :5, :5], corr[None, :5, 5:], groups)
    np.testing.assert_allclose(table @ dominance_matrix(4),
                               dominance_weights(corr[None, :5, :5], corr[None, :5, 5:], groups),
                               rtol=1e-12, atol=1e-15)
    assert table[0, 0, 0] == 0.0
    assert table[0, 0, -1] == pytest.approx(
        corr[:5, 5] @ np.linalg.solve(corr[:5, :5], corr[:5, 5]), rel=1e-12)


def _correlations(data):
    centred = data - data.mean(axis=0)
    cov = centred.T @ centred
    scale = np.sqrt(np.diag(cov))
    return cov / np.outer(scale, scale)


@pytest.mark.parametrize("groups", [
    [[0], [1], [2], [3], [4]],
    [[0], [1, 2], [3], [4]],
    [[3], [0, 1, 2], [4]],   # cues need not follow the column order
    [[0], [], [1, 2, 3, 4]],  # a cue with no column in this fit
])
@pytest.mark.parametrize("solver", ["sweep", "shared"])
def test_elimination_tree_equals_statsmodels_brute_force(groups, solver):
    rng = np.random.default_rng(len(groups))
    X = rng.normal(size=(70, 5)) @ rng.normal(size=(5, 5))
    y = X @ rng.normal(size=5) + rng.normal(size=70)
    corr = _correlations(np.column_stack([X, y]))
    swept = dominance_weights(corr[None, :5, :5], corr[None, :5, 5:], groups, solver=solver)
    present = [g for g in groups if g]
    expected = brute_force_dominance(X, y, present)
    ours = swept[0, 0, [j for j, g in enumerate(groups) if g]]
    np.testing.assert_allclose(ours, expected, rtol=1e-9, atol=1e-12)
    assert swept[0, 0, [j for j, g in enumerate(groups) if not g]] == pytest.approx(0.0, abs=1e-15)


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")  # the point of the test
@pytest.mark.parametrize("solver", ["sweep", "shared"])
def test_elimination_tree_treats_an_exactly_collinear_column_as_a_projection(solver):
    # Column 2 = column 0 + column 1: statsmodels' pseudo-inverse R^2 is the reference.
    rng = np.random.default_rng(8)
    base = rng.normal(size=(50, 3))
    X = np.column_stack([base[:, 0], base[:, 1], base[:, 0] + base[:, 1], base[:, 2]])
    y = X @ [0.4, -0.3, 0.0, 0.6] + rng.normal(size=50)
    corr = _correlations(np.column_stack([X, y]))
    groups = [[0], [1], [2], [3]]
    swept = dominance_weights(corr[None, :4, :4], corr[None, :4, 4:], groups, solver=solver)
    np.testing.assert_allclose(swept[0, 0], brute_force_dominance(X, y, groups), atol=1e-9)


@pytest.mark.parametrize("solver", ["sweep", "shared"])
def test_both_solvers_agree_on_many_stacked_systems(solver):
    # Many small systems with several responses each, as in a case bootstrap; the
    # solve path's own accuracy is checked against statsmodels above.
    rng = np.random.default_rng(13)
    data = rng.normal(size=(400, 40, 9)) @ rng.normal(size=(9, 9))
    data -= data.mean(axis=1, keepdims=True)
    data /= np.sqrt((data**2).sum(axis=1, keepdims=True))
    corr = np.swapaxes(data, 1, 2) @ data
    groups = [[0], [1, 2], [3], [4, 5], [6]]
    args = (corr[:, :7, :7], corr[:, :7, 7:], groups)
    solved = dominance_weights(*args)
    swept = dominance_weights(*args, solver=solver)
    np.testing.assert_allclose(swept, solved, rtol=1e-10, atol=1e-13)
    r2 = (corr[:, :7, 7:] * np.linalg.solve(corr[:, :7, :7], corr[:, :7, 7:])).sum(axis=1)
    np.testing.assert_allclose(swept.sum(axis=2), r2, rtol=1e-11)


def test_unknown_solver_is_a_clear_error():
    with pytest.raises(CalibrateError, match="'solver' option of dominance_weights"):
        dominance_weights(np.eye(2)[None], np.zeros((1, 2, 1)), [[0], [1]], solver="qr")


def test_shared_matrix_solver_keeps_a_collinear_column_out_only_where_it_is_collinear():
    # Half the systems have column 1 equal to column 0, the other half do not: each half
    # must equal the elimination tree on that half alone, many responses per matrix.
    rng = np.random.default_rng(21)
    data = rng.normal(size=(30, 60, 12))
    data[:15, :, 1] = data[:15, :, 0]
    data -= data.mean(axis=1, keepdims=True)
    data /= np.sqrt((data**2).sum(axis=1, keepdims=True))
    corr = np.swapaxes(data, 1, 2) @ data
    groups = [[0], [1], [2, 3], [4]]
    shared = dominance_weights(corr[:, :5, :5], corr[:, :5, 5:], groups, solver="shared")
    for half in (slice(0, 15), slice(15, 30)):
        swept = dominance_weights(corr[half, :5, :5], corr[half, :5, 5:], groups, solver="sweep")
        np.testing.assert_allclose(shared[half], swept, rtol=1e-10, atol=1e-13)
