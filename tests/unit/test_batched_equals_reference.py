"""Every statistic re-batched for speed equals a per-rater reference implementation.

Each batched path (all raters, and all simulated sets, at once) is set against a loop over
raters that computes the same figure the plain way (statsmodels OLS, numpy per rater), on a
small panel of unequal rater sizes with a degenerate rater or two, to 1e-9.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from calibrate.policy import diagnostics as dg
from calibrate.policy.linalg import grouped_products, grouped_sscp, ols_from_sscp

TOL = {"rtol": 1e-9, "atol": 1e-9}


def _panel(seed=11, n_raters=12, p=4):
    """Raters of 14-60 cases on p cues; rater 3 has a constant cue, rater 5 constant judgments."""
    rng = np.random.default_rng(seed)
    sizes = rng.integers(14, 61, n_raters)
    groups = np.repeat(np.arange(n_raters), sizes)
    X = rng.normal(size=(groups.size, p))
    X[groups == 3, 1] = 0.5
    latent = 4 + X @ np.linspace(1, 0.2, p) + 0.3 * X[:, 0] ** 2 + rng.normal(0, 0.8, groups.size)
    y = np.clip(np.round(latent), 1, 7)
    y[groups == 5] = 4.0
    return X, y, groups, n_raters


def _per_rater_ols(X, y, groups, g):
    rows = groups == g
    return sm.OLS(y[rows], sm.add_constant(X[rows], has_constant="add")).fit()


def test_grouped_sums_by_blocks_equal_numpy_per_rater():
    X, y, groups, G = _panel()
    Z = np.column_stack([X, y])
    weights = np.random.default_rng(2).poisson(1.0, groups.size).astype(float)
    stats = grouped_sscp(Z, groups, G, weights=weights)
    for g in range(G):
        rows = groups == g
        w = weights[rows]
        mean = (w[:, None] * Z[rows]).sum(axis=0) / w.sum()
        centred = Z[rows] - mean
        np.testing.assert_allclose(stats.mean[g], mean, **TOL)
        np.testing.assert_allclose(stats.sscp[g], (w[:, None] * centred).T @ centred, **TOL)
    sums, products = grouped_products(Z, groups, G)
    for g in range(G):
        rows = groups == g
        np.testing.assert_allclose(sums[g], Z[rows].sum(axis=0), **TOL)
        np.testing.assert_allclose(products[g], Z[rows].T @ Z[rows], **TOL)


def test_least_squares_from_sums_equal_statsmodels_per_rater():
    X, y, groups, G = _panel()
    p = X.shape[1]
    fit = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, G), np.arange(p), p)
    assert not fit.rank_ok[3]  # a constant cue: not full rank
    for g in range(G):
        if g == 3:
            continue
        ref = _per_rater_ols(X, y, groups, g)
        assert fit.rank_ok[g]
        np.testing.assert_allclose(fit.coef[g], ref.params[1:], **TOL)
        np.testing.assert_allclose(fit.intercept[g], ref.params[0], **TOL)
        np.testing.assert_allclose(fit.rss[g], ref.ssr, **TOL)
        if ref.ssr > 0:
            np.testing.assert_allclose(fit.se[g], ref.bse[1:], **TOL)


def _reset_by_statsmodels(X, y, groups, g):
    """RESET F (squared and cubed fitted values added), one rater, as an analyst would."""
    rows = groups == g
    base = sm.OLS(y[rows], sm.add_constant(X[rows])).fit()
    z = (base.fittedvalues - base.fittedvalues.mean()) / base.fittedvalues.std()
    full = sm.OLS(y[rows], sm.add_constant(np.column_stack([X[rows], z**2, z**3]))).fit()
    return ((base.ssr - full.ssr) / 2) / (full.ssr / full.df_resid)


def test_curvature_statistic_for_many_sets_equals_statsmodels_per_rater_and_set():
    X, y, groups, G = _panel()
    rng = np.random.default_rng(5)
    sets = np.vstack([y, np.clip(y + rng.integers(-1, 2, (3, y.size)), 1, 7)])
    sets[1, groups == 7] = 2.0  # a set in which one rater's judgments are constant
    batched = dg.reset_statistics_shared_cues(dg._SharedCueBlocks(X, groups, G), sets)
    for s, ys in enumerate(sets):
        direct = dg.reset_statistic(X, ys, groups, G)   # the direct batched fit, per set
        np.testing.assert_allclose(batched[s], direct, equal_nan=True, **TOL)
        for g in range(G):
            if np.isnan(batched[s, g]):
                continue
            assert batched[s, g] == pytest.approx(_reset_by_statsmodels(X, ys, groups, g), rel=1e-9)
    assert np.isnan(batched[:, 3]).all() and np.isnan(batched[0, 5])
    assert np.isnan(batched[1, 7])


def _products_row_by_row(A, groups, n_groups):
    """The per-group sums the plain way: every row's outer product added to its group."""
    k = A.shape[1]
    sums = np.zeros((n_groups, k))
    products = np.zeros((n_groups, k, k))
    np.add.at(sums, groups, A)
    np.add.at(products, groups, A[:, :, None] * A[:, None, :])
    return sums, products


def test_logistic_curvature_score_test_equals_the_test_with_row_by_row_sums(monkeypatch):
    X, y, groups, G = _panel()
    keep = ~np.isin(groups, [3, 5])
    X, groups = X[keep], np.unique(groups[keep], return_inverse=True)[1]
    G = int(groups.max()) + 1
    rng = np.random.default_rng(8)
    decision = (rng.random(groups.size) < 1 / (1 + np.exp(-(X[:, 0] + 0.5 * X[:, 1])))).astype(float)
    batched = dg.logistic_reset_test(X, decision, groups, G).statistic
    monkeypatch.setattr(dg, "grouped_products", _products_row_by_row)
    plain = dg.logistic_reset_test(X, decision, groups, G).statistic
    assert np.isfinite(batched).sum() >= G - 2   # small raters may be separated
    np.testing.assert_allclose(batched, plain, equal_nan=True, **TOL)


def test_joining_pieces_keeps_the_cheapest_allowed_pick_of_a_full_scan():
    # The cached pair costs against a scan that recomputes every pair at every step.
    from calibrate.panel import stability
    from calibrate.panel.merges import merged_rss
    from calibrate.panel.stability import KeepApartRule, merge_side_loss

    rng = np.random.default_rng(4)
    p, R = 3, 9
    sscp = np.empty((R, p + 1, p + 1))
    for r in range(R):
        A = rng.normal(size=(30, p + 1))
        A[:, p] += (1.0 if r < 5 else -1.0) * A[:, 0]
        A -= A.mean(axis=0)
        sscp[r] = A.T @ A
    n = np.full(R, 30.0)
    rule = KeepApartRule(threshold=0.02, alpha=1.01, scale=np.ones(1), null_max=np.zeros(1))

    def full_scan(piece):
        piece = piece.copy()
        ids = [int(g) for g in np.unique(piece)]
        while len(ids) > 1:
            first, second = np.triu_indices(len(ids), k=1)
            a = np.array([sscp[piece == ids[k]].sum(axis=0) for k in first])
            b = np.array([sscp[piece == ids[k]].sum(axis=0) for k in second])
            na = np.array([n[piece == ids[k]].sum() for k in first])
            nb = np.array([n[piece == ids[k]].sum() for k in second])
            cost = merged_rss(a + b, na + nb, p) - merged_rss(a, na, p) - merged_rss(b, nb, p)
            size = np.array([np.sum(piece == g) for g in ids])
            allowed = ~rule.apart(merge_side_loss(a, b, p), np.minimum(size[first], size[second]))
            if not allowed.any():
                break
            pick = int(np.flatnonzero(allowed)[np.argmin(cost[allowed])])
            gone = ids[second[pick]]
            piece[piece == gone] = ids[first[pick]]
            ids.remove(gone)
        return piece

    start = np.arange(R)
    np.testing.assert_array_equal(stability._join_pieces(sscp, n, start, rule, p), full_scan(start))


def test_lens_parts_sharing_one_inverse_equal_statsmodels_per_rater():
    # The environment model reuses the judge model's inverse (same cues): R_e and G must
    # still be what two separate regressions per rater give.
    from calibrate.lens.model import _lens_parts

    X, y, groups, G = _panel()
    criterion = X @ np.array([0.5, 0.1, -0.3, 0.2]) + np.random.default_rng(9).normal(0, 1, y.size)
    parts = _lens_parts(grouped_sscp(np.column_stack([X, y, criterion]), groups, G), X.shape[1])
    for g in range(G):
        if g in (3, 5):   # a constant cue; constant judgments
            assert not parts["ok"][g]
            continue
        rows = groups == g
        judge = sm.OLS(y[rows], sm.add_constant(X[rows])).fit()
        env = sm.OLS(criterion[rows], sm.add_constant(X[rows])).fit()
        assert parts["r_e"][g] == pytest.approx(np.sqrt(env.rsquared), rel=1e-9)
        assert parts["r_s"][g] == pytest.approx(np.sqrt(judge.rsquared), rel=1e-9)
        assert parts["g"][g] == pytest.approx(np.corrcoef(judge.fittedvalues, env.fittedvalues)[0, 1], rel=1e-9)


def test_r_squared_alone_equals_the_full_fit_and_statsmodels():
    from calibrate.policy.linalg import r_squared_from_sscp

    X, y, groups, G = _panel()
    p = X.shape[1]
    stats = grouped_sscp(np.column_stack([X, y]), groups, G)
    r2, rank_ok = r_squared_from_sscp(stats, np.arange(p), p)
    full = ols_from_sscp(stats, np.arange(p), p)
    np.testing.assert_array_equal(rank_ok, full.rank_ok)
    assert np.isnan(r2[3]) and np.isnan(r2[5])    # a constant cue; constant judgments
    for g in set(range(G)) - {3, 5}:
        assert r2[g] == pytest.approx(_per_rater_ols(X, y, groups, g).rsquared, rel=1e-9)
        assert r2[g] == pytest.approx(full.r2[g], rel=1e-12)


def test_rater_pairs_from_sparse_judgments_equal_the_dense_table(monkeypatch):
    # Large incomplete designs keep the judgments sparse; the screen and every pair's
    # figures must be those of the dense table.
    import sys
    from pathlib import Path

    import calibrate.panel.pairs as pairs
    from calibrate.data.rows import line_up

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from grouping_panels import scale_panel

    design, first, _ = scale_panel(6, [7, 2], share_seen=0.6, n_cases=70, n_cues=4)
    dense = pairs.compare_rater_pairs(design, first, min_shared=10).to_frame()
    rows = line_up(design, first)
    n_dense, r_dense = pairs._RaterCaseTable(rows, design.matrix.shape[0]).screen()
    monkeypatch.setattr(pairs, "_DENSE_CELLS", 0)
    n_sparse, r_sparse = pairs._RaterCaseTable(rows, design.matrix.shape[0]).screen()
    sparse = pairs.compare_rater_pairs(design, first, min_shared=10).to_frame()
    np.testing.assert_array_equal(n_dense, n_sparse)
    np.testing.assert_allclose(r_sparse, r_dense, equal_nan=True, **TOL)
    assert len(dense) == len(sparse) > 20
    numeric = dense.select_dtypes("number").columns
    np.testing.assert_allclose(sparse[numeric].to_numpy(float), dense[numeric].to_numpy(float),
                               equal_nan=True, **TOL)
    assert (sparse.drop(columns=numeric).astype(str) == dense.drop(columns=numeric).astype(str)).all().all()
