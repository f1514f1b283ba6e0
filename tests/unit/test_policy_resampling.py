"""The case bootstrap behind the policy intervals (calibrate.policy.resampling).

References used here, none sharing code with calibrate.policy.resampling:
numpy.cov with frequency weights (the definition of a weighted covariance);
an explicit bootstrap that indexes the rater's rows with the drawn case numbers
and fits each resample with numpy.linalg.lstsq; dominance weights of the
resampled rows' numpy.corrcoef by the one-solve-per-subset path (itself checked
against statsmodels in test_importance.py). The draw contract checked: one child
generator per block of raters with the same cases, spawned in the order the
blocks first appear, each drawing an (n_boot, n) array of case numbers.
"""

from __future__ import annotations

import numpy as np
import pytest

from calibrate.policy import resampling
from calibrate.policy.importance import dominance_weights, importance_shares
from calibrate.policy.resampling import (
    bca_interval,
    case_bootstrap_intervals,
    weighted_correlations,
)

CUE_GROUPS = [[0], [1, 2]]  # a one-column cue and a two-column (categorical-like) cue
N_BOOT = 60


def test_weighted_correlations_match_numpy_frequency_weights():
    rng = np.random.default_rng(11)
    n = 25
    X = rng.normal(size=(n, 3)) @ rng.normal(size=(3, 3))
    Y = np.column_stack([X @ [0.5, -0.2, 0.1] + rng.normal(size=n), rng.normal(size=n)])
    counts = np.vstack([rng.multinomial(n, np.full(n, 1 / n), size=4), 1 - np.eye(n)[:2]])
    corr_xx, corr_xy, bad = weighted_correlations(X, Y, counts.astype(float))
    for row, weights in enumerate(counts):
        full = np.cov(np.column_stack([X, Y]), rowvar=False, fweights=weights)
        scale = np.sqrt(np.diag(full))
        expected = full / np.outer(scale, scale)
        np.testing.assert_allclose(corr_xx[row], expected[:3, :3], rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(corr_xy[row], expected[:3, 3:], rtol=1e-12, atol=1e-14)
    assert not bad.any()


def test_leave_one_out_sums_from_totals_equal_the_explicit_leave_one_out_counts():
    rng = np.random.default_rng(12)
    n = 30
    X = rng.normal(size=(2, n, 4))
    Y = rng.normal(size=(2, n, 3)) + X[..., :1]
    counts = np.stack([rng.multinomial(n, np.full(n, 1 / n), size=5) for _ in range(2)]).astype(float)
    explicit = weighted_correlations(X, Y, np.concatenate([counts, np.broadcast_to(
        1.0 - np.eye(n), (2, n, n))], axis=1))
    implied = weighted_correlations(X, Y, counts, leave_one_out=True)
    for ours, expected in zip(implied, explicit):
        np.testing.assert_allclose(ours, expected, rtol=1e-12, atol=1e-14)


def test_a_resample_that_leaves_a_cue_constant_is_marked_bad():
    X = np.array([[0.0, 1.0], [0.0, 2.0], [1.0, 0.5], [1.0, 3.0]])
    Y = np.array([[1.0], [2.0], [0.0], [4.0]])
    counts = np.array([[2.0, 2.0, 0.0, 0.0], [1.0, 1.0, 1.0, 1.0]])  # first: cue 0 constant
    _, _, bad = weighted_correlations(X, Y, counts)
    assert bad[:, 0].tolist() == [True, False]


def _panel(seed: int):
    """Own-case raters of different sizes, one block read by two raters, one rater unfitted."""
    rng = np.random.default_rng(seed)
    pool = rng.normal(size=(120, 3)) @ np.array([[1.0, 0.3, 0.0], [0.0, 1.0, 0.4], [0.0, 0.0, 1.0]])
    shared = rng.choice(120, 35, replace=False)
    case_sets = [rng.choice(120, 30, replace=False), shared, rng.choice(120, 25, replace=False),
                 shared, rng.choice(120, 40, replace=False), rng.choice(120, 20, replace=False)]
    X, y, groups, case_row = [], [], [], []
    for g, cases in enumerate(case_sets):
        weights = rng.normal(size=3)
        X.append(pool[cases])
        y.append(pool[cases] @ weights + rng.normal(0, 0.5 + 0.3 * g, cases.size))
        groups.append(np.full(cases.size, g))
        case_row.append(cases)
    fitted = np.array([True, True, True, True, True, False])
    return (np.vstack(X), np.concatenate(y), np.concatenate(groups), fitted,
            np.concatenate(case_row))


def _explicit_statistics(X, y):
    """R^2 by least squares on the rows, importance from numpy's correlation matrix."""
    design = np.column_stack([np.ones(y.size), X])
    residual = y - design @ np.linalg.lstsq(design, y, rcond=None)[0]
    r2 = 1 - residual @ residual / ((y - y.mean()) ** 2).sum()
    corr = np.corrcoef(np.column_stack([X, y]), rowvar=False)
    importance = dominance_weights(corr[None, :3, :3], corr[None, :3, 3:], CUE_GROUPS)[0, 0]
    return r2, importance


def _explicit_intervals(X, y, groups, fitted, case_row, seed, alpha=0.05):
    """Per rater: redraw the same case numbers, refit every resample from its rows."""
    starts = np.r_[0, np.flatnonzero(np.diff(groups)) + 1]
    ends = np.r_[starts[1:], groups.size]
    block_of: dict[tuple, int] = {}
    for g in np.flatnonzero(fitted):
        block_of.setdefault(tuple(case_row[starts[g]:ends[g]]), len(block_of))
    generators = np.random.default_rng(seed).spawn(len(block_of))
    draws = {}
    expected = {}
    for g in np.flatnonzero(fitted):
        rows = slice(starts[g], ends[g])
        Xg, yg = X[rows], y[rows]
        n = yg.size
        block = block_of[tuple(case_row[rows])]
        if block not in draws:
            draws[block] = generators[block].integers(0, n, size=(N_BOOT, n))
        r2, imp = _explicit_statistics(Xg, yg)
        boot = [_explicit_statistics(Xg[i], yg[i]) for i in draws[block]]
        jack = [_explicit_statistics(np.delete(Xg, i, 0), np.delete(yg, i)) for i in range(n)]
        r_lo, r_hi = bca_interval(np.sqrt([r2]), np.sqrt([[b[0]] for b in boot]),
                                  np.sqrt([[j[0]] for j in jack]), alpha=alpha)
        boot_shares = np.array([importance_shares(b[1], b[0]) for b in boot])
        # the shares get the percentile interval (numpy's default linear quantile)
        s_lo, s_hi = np.quantile(boot_shares, [alpha / 2, 1 - alpha / 2], axis=0)
        expected[g] = (r2, imp, r_lo[0], r_hi[0], s_lo, s_hi)
    return expected


def _batched(X, y, groups, fitted, case_row, seed):
    stats = {g: _explicit_statistics(X[groups == g], y[groups == g]) for g in np.unique(groups)}
    r2 = np.array([stats[g][0] for g in sorted(stats)])
    imp = np.array([stats[g][1] for g in sorted(stats)])
    return case_bootstrap_intervals(
        X, y, groups, fitted, case_row, CUE_GROUPS, n_boot=N_BOOT,
        rng=np.random.default_rng(seed), alpha=0.05, method="dominance", r2=r2,
        importance_r2=imp)


def test_batched_bootstrap_equals_an_explicit_refit_per_rater():
    X, y, groups, fitted, case_row = _panel(5)
    ours = _batched(X, y, groups, fitted, case_row, seed=9)
    expected = _explicit_intervals(X, y, groups, fitted, case_row, seed=9)
    for g, (_, _, r_lo, r_hi, s_lo, s_hi) in expected.items():
        assert ours.r_low[g] == pytest.approx(r_lo, rel=1e-9)
        assert ours.r_high[g] == pytest.approx(r_hi, rel=1e-9)
        np.testing.assert_allclose(ours.share_low[g], s_lo, rtol=1e-9)
        np.testing.assert_allclose(ours.share_high[g], s_hi, rtol=1e-9)
    # The two raters of the shared block used the same resamples but judged differently.
    assert ours.r_low[1] != ours.r_low[3]
    assert np.isnan(ours.r_low[5]) and np.isnan(ours.share_high[5]).all()


def test_small_chunks_give_the_same_intervals(monkeypatch):
    # Forcing one rater per unit and one unit per batch splits the shared block
    # across batches: its resamples must be drawn once and reused.
    X, y, groups, fitted, case_row = _panel(6)
    whole = _batched(X, y, groups, fitted, case_row, seed=2)
    monkeypatch.setattr(resampling, "_CHUNK_ELEMENTS", 10)
    pieces = _batched(X, y, groups, fitted, case_row, seed=2)
    for field in ("r_low", "r_high", "share_low", "share_high"):
        np.testing.assert_allclose(getattr(pieces, field), getattr(whole, field), rtol=1e-12)


def test_resampled_r2_by_elimination_equals_the_solve_and_hands_collinear_systems_to_it():
    from calibrate.policy.importance import r2_from_correlations

    rng = np.random.default_rng(14)
    data = rng.normal(size=(300, 30, 6))
    data[:5, :, 2] = data[:5, :, 0] - data[:5, :, 1]   # exactly collinear cues in 5 systems
    data -= data.mean(axis=1, keepdims=True)
    data /= np.sqrt((data**2).sum(axis=1, keepdims=True))
    corr = np.swapaxes(data, 1, 2) @ data
    corr[5, :4, :4] = np.eye(4)   # a resample marked bad gets the identity
    xx, xy = corr[:, :4, :4], corr[:, :4, 4:]
    ours = resampling._resampled_r2(xx, xy)
    expected = np.vstack([r2_from_correlations(xx[i:i + 1], xy[i:i + 1]) for i in range(300)])
    np.testing.assert_allclose(ours, expected, rtol=1e-12, atol=1e-13)


def _stacked_blocks(seed: int, units: int, n: int, p: int, width: int):
    """Stacked blocks of raters with bootstrap counts, one resample leaving a cue constant."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(units, n, p))
    X[:, :4, 0] = 2.0
    Y = X[..., :1] * 0.5 + rng.normal(size=(units, n, width))
    counts = np.stack([resampling._draw_boot_counts(rng, n, 40) for _ in range(units)])
    counts[:, 0] = 0.0
    counts[:, 0, :4] = n / 4   # only the rows where cue 0 is constant
    return X, Y, counts


@pytest.mark.parametrize("units, n, p, width", [(5, 30, 4, 1), (3, 25, 3, 6), (1, 12, 2, 2)])
def test_systems_last_correlations_are_the_systems_first_ones_to_the_bit(units, n, p, width):
    X, Y, counts = _stacked_blocks(15, units, n, p, width)
    first = weighted_correlations(X, Y, counts, leave_one_out=True)
    corr_xx, corr_xy, bad = resampling._correlations_batch_last(X, Y, counts)
    assert np.array_equal(np.moveaxis(corr_xx, (2, 3), (0, 1)), first[0])
    assert np.array_equal(np.moveaxis(corr_xy, (2, 3), (0, 1)), first[1])
    assert np.array_equal(np.moveaxis(bad, 0, -1), first[2])
    assert first[2][:, 0].all()


def test_systems_last_r2_and_dominance_sweep_are_the_systems_first_ones_to_the_bit():
    from calibrate.policy.importance import dominance_by_sweep_batch_last

    X, Y, counts = _stacked_blocks(16, 4, 30, 3, 2)
    corr_xx, corr_xy, _ = weighted_correlations(X, Y, counts, leave_one_out=True)
    xx, xy = corr_xx.reshape(-1, 3, 3), corr_xy.reshape(-1, 3, 2)
    xx[7, 2] = xx[7, 1]     # a collinear system goes to the solve in both layouts
    xx[7, :, 2] = xx[7, :, 1]
    last_xx, last_xy = np.moveaxis(xx, 0, -1).copy(), np.moveaxis(xy, 0, -1).copy()
    assert np.array_equal(resampling._r2_batch_last(last_xx, last_xy).T, resampling._resampled_r2(xx, xy))
    for groups in (CUE_GROUPS, [[2], [0, 1]]):   # the second sweeps the columns out of order
        assert np.array_equal(dominance_by_sweep_batch_last(last_xx, last_xy, groups),
                              dominance_weights(xx, xy, groups, solver="sweep"))
