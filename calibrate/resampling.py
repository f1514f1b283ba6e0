"""The case bootstrap behind the policy intervals: resampled fits and BCa intervals.

A bootstrap resample is a vector of counts over a rater's cases. Raters who saw
the same cases share the count vectors, so they share the resampled cue
cross-products and only their judgments differ; each resample's R^2 and cue
importance follow from its correlation matrices (:mod:`calibrate.importance`),
never from a refit on rows. Leave-one-out (jackknife) fits ride along as count
vectors of ones with a single zero, for the acceleration of the BCa interval.

References
----------
.. [1] Efron, B. (1987). Better bootstrap confidence intervals. Journal of the
       American Statistical Association, 82, 171-185 (BCa interval).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from .importance import cue_importance, importance_shares, r2_from_correlations

#: Bound the float count of one bootstrap chunk (resamples x raters x subsets).
_CHUNK_ELEMENTS = 16_000_000


def bca_interval(
    estimate: np.ndarray, boot: np.ndarray, jack: np.ndarray, *, alpha: float = 0.05
) -> tuple[np.ndarray, np.ndarray]:
    """Bias-corrected and accelerated bootstrap interval, one per column.

    .. math:: z_0 = \\Phi^{-1}\\big(\\#\\{\\theta^*_b < \\hat\\theta\\}/B\\big), \\quad
              a = \\frac{\\sum_i d_i^3}{6 (\\sum_i d_i^2)^{3/2}},\\; d_i = \\bar\\theta_{(\\cdot)} - \\theta_{(i)}

    .. math:: \\alpha_{1,2} = \\Phi\\Big(z_0 + \\frac{z_0 + z_{\\alpha/2,\\,1-\\alpha/2}}
              {1 - a (z_0 + z_{\\alpha/2,\\,1-\\alpha/2})}\\Big)

    (Efron 1987). Ties count half. NaN resamples (degenerate refits) are left
    out; a column with fewer than 10 finite resamples gets NaN.

    Parameters
    ----------
    estimate : (R,) full-sample values.
    boot : (B, R) bootstrap values.
    jack : (n, R) leave-one-out values.
    """
    boot = np.asarray(boot, dtype=float)
    finite = np.isfinite(boot)
    n_finite = finite.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        below = ((boot < estimate) & finite).sum(0) + 0.5 * ((boot == estimate) & finite).sum(0)
        share = np.clip(below / n_finite, 0.5 / np.maximum(n_finite, 1), 1 - 0.5 / np.maximum(n_finite, 1))
        z0 = special.ndtri(share)
        dev = np.nanmean(jack, axis=0) - jack if np.isfinite(jack).any() else jack
        num = np.nansum(dev**3, axis=0)
        den = 6.0 * np.nansum(dev**2, axis=0) ** 1.5
        accel = np.where(den > 0, num / den, 0.0)
        ends = []
        for z in (special.ndtri(alpha / 2), special.ndtri(1 - alpha / 2)):
            level = special.ndtr(z0 + (z0 + z) / (1.0 - accel * (z0 + z)))
            ends.append(_column_quantiles(boot, n_finite, level))
    bad = (n_finite < 10) | ~np.isfinite(np.asarray(estimate, dtype=float))
    return np.where(bad, np.nan, ends[0]), np.where(bad, np.nan, ends[1])


def _column_quantiles(values: np.ndarray, n_finite: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Linear-interpolated quantile of each column at its own level (NaN sorted last)."""
    ordered = np.sort(values, axis=0)
    pos = np.clip(level, 0.0, 1.0) * np.maximum(n_finite - 1, 0)
    pos = np.where(np.isfinite(pos), pos, 0.0)
    lo = np.floor(pos).astype(np.intp)
    hi = np.minimum(lo + 1, np.maximum(n_finite - 1, 0))
    cols = np.arange(values.shape[1])
    frac = pos - lo
    return ordered[lo, cols] + frac * (ordered[hi, cols] - ordered[lo, cols])



def weighted_correlations(
    X: np.ndarray, Y: np.ndarray, counts: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Correlations of cues and judgments under each vector of case counts.

    X (n, p) is shared by the R raters whose judgments are the columns of Y
    (n, R); counts (N, n) weight the cases (bootstrap counts, or jackknife
    vectors of ones with one zero). Returns corr_xx (N, p, p), corr_xy
    (N, p, R) and ``bad`` (N, R): a resample that leaves a cue or the judgments
    constant. Cross-products are taken about the full-sample means, so the
    correction for the resample mean stays small.
    """
    n, p = X.shape
    N = counts.shape[0]
    total = counts.sum(axis=1)
    Xc = X - X.mean(axis=0)
    Yc = Y - Y.mean(axis=0)
    x_mean = counts @ Xc / total[:, None]
    y_mean = counts @ Yc / total[:, None]
    Sxx = (counts @ (Xc[:, :, None] * Xc[:, None, :]).reshape(n, p * p)).reshape(N, p, p)
    Sxx -= total[:, None, None] * x_mean[:, :, None] * x_mean[:, None, :]
    Sxy = ((counts[:, None, :] * Xc.T[None]).reshape(N * p, n) @ Yc).reshape(N, p, -1)
    Sxy -= total[:, None, None] * x_mean[:, :, None] * y_mean[:, None, :]
    Syy = counts @ Yc**2 - total[:, None] * y_mean**2
    dx = np.sqrt(np.clip(np.einsum("nii->ni", Sxx), 0.0, None))
    x_bad = np.any(dx**2 <= 1e-10 * (Xc**2).sum(axis=0), axis=1)
    y_bad = Syy <= 1e-10 * (Yc**2).sum(axis=0)
    dx = np.where(dx > 0, dx, 1.0)
    dy = np.sqrt(np.where(y_bad, 1.0, Syy))
    corr_xx = Sxx / (dx[:, :, None] * dx[:, None, :])
    corr_xx[x_bad] = np.eye(p)
    corr_xy = Sxy / (dx[:, :, None] * dy[:, None, :])
    return corr_xx, corr_xy, y_bad | x_bad[:, None]



@dataclass(frozen=True)
class PolicyIntervals:
    """BCa intervals of one batch of raters (NaN for raters not resampled).

    r_low, r_high: (G,) interval for R_s; share_low, share_high: (G, k) intervals
    for the importance shares of the k cues.
    """

    r_low: np.ndarray
    r_high: np.ndarray
    share_low: np.ndarray
    share_high: np.ndarray


@dataclass
class _ResampleUnit:
    """Raters who saw the same cases, with the bootstrap and jackknife count vectors."""

    raters: np.ndarray     # indices of the raters in the batch being resampled
    X: np.ndarray
    Y: np.ndarray
    counts: np.ndarray     # (n_boot + n, n): bootstrap rows, then jackknife rows
    n_boot: int


def case_bootstrap_intervals(
    X: np.ndarray,
    y: np.ndarray,
    groups: np.ndarray,
    fitted: np.ndarray,
    case_row: np.ndarray,
    cue_groups: list[list[int]],
    *,
    n_boot: int,
    rng: np.random.Generator,
    alpha: float,
    method: str,
    r2: np.ndarray,
    importance_r2: np.ndarray,
) -> PolicyIntervals:
    """BCa intervals for R_s and the importance shares, resampling each rater's cases.

    Parameters
    ----------
    X : (m, p) design rows the fits used, sorted by rater (``groups``).
    y : (m,) judgments.
    groups : (m,) rater index in ``range(G)`` per row, non-decreasing.
    fitted : (G,) bool, raters with a policy (the others keep NaN).
    case_row : (m,) case identity per row: raters with the same sequence of
        case rows form one resampling block and share its count vectors.
    cue_groups : design-column indices per cue (see :mod:`calibrate.importance`).
    n_boot : resamples per block.
    rng : generator; one child generator is spawned per block, in block order.
    alpha, method : interval level; importance method.
    r2, importance_r2 : (G,), (G, k) full-sample values (the interval centres).
    """
    n_groups = fitted.size
    intervals = PolicyIntervals(
        r_low=np.full(n_groups, np.nan), r_high=np.full(n_groups, np.nan),
        share_low=np.full((n_groups, len(cue_groups)), np.nan),
        share_high=np.full((n_groups, len(cue_groups)), np.nan),
    )
    starts = np.r_[0, np.flatnonzero(np.diff(groups)) + 1]
    ends = np.r_[starts[1:], groups.size]
    blocks: dict[bytes, list[int]] = {}
    for g, (s, e) in enumerate(zip(starts, ends)):
        if fitted[g]:
            blocks.setdefault(case_row[s:e].tobytes(), []).append(g)
    block_list = list(blocks.values())
    n_terms = 16 + X.shape[1]  # subsets held at once in dominance_weights, plus Sxy
    units = []
    for block, block_rng in zip(block_list, rng.spawn(len(block_list))):
        s0, e0 = starts[block[0]], ends[block[0]]
        n = e0 - s0
        draws = block_rng.integers(0, n, size=(n_boot, n)) + n * np.arange(n_boot)[:, None]
        counts = np.vstack([
            np.bincount(draws.ravel(), minlength=n_boot * n).reshape(n_boot, n).astype(float),
            1.0 - np.eye(n),
        ])
        width = max(1, _CHUNK_ELEMENTS // (counts.shape[0] * n_terms))
        for first in range(0, len(block), width):
            local = np.array(block[first:first + width])
            Y = np.column_stack([y[starts[g]:ends[g]] for g in local])
            units.append(_ResampleUnit(raters=local, X=X[s0:e0], Y=Y, counts=counts,
                                       n_boot=n_boot))
    _resampled_intervals(units, cue_groups, intervals, alpha=alpha, method=method, r2=r2,
                         imp=importance_r2)
    return intervals


def _resampled_intervals(units: list[_ResampleUnit], cue_groups, out: PolicyIntervals, *,
                         alpha: float, method: str, r2: np.ndarray, imp: np.ndarray) -> None:
    """BCa intervals for R_s and importance shares of every unit's raters.

    Units with the same number of raters are stacked along the resample axis,
    so many small blocks (raters who each saw their own cases) are solved in a
    few large batched calls instead of one call per rater.
    """
    n_terms = 16 + len(cue_groups)
    by_width: dict[int, list[_ResampleUnit]] = {}
    for unit in units:
        by_width.setdefault(unit.Y.shape[1], []).append(unit)
    for width, members in sorted(by_width.items()):
        batch, size = [], 0
        for unit in members:
            batch.append(unit)
            size += unit.counts.shape[0] * width * n_terms
            if size >= _CHUNK_ELEMENTS:
                _intervals_for_batch(batch, cue_groups, out, alpha=alpha, method=method,
                                     r2=r2, imp=imp)
                batch, size = [], 0
        if batch:
            _intervals_for_batch(batch, cue_groups, out, alpha=alpha, method=method,
                                 r2=r2, imp=imp)


def _intervals_for_batch(batch, cue_groups, out: PolicyIntervals, *, alpha, method, r2, imp):
    parts = [weighted_correlations(u.X, u.Y, u.counts) for u in batch]
    corr_xx = np.concatenate([c[0] for c in parts])
    corr_xy = np.concatenate([c[1] for c in parts])
    bad = np.concatenate([c[2] for c in parts])
    all_r2 = r2_from_correlations(corr_xx, corr_xy)
    all_imp, _ = cue_importance(corr_xx, corr_xy, cue_groups, method=method)
    all_r2 = np.where(bad, np.nan, np.clip(all_r2, 0.0, 1.0))
    all_imp = np.where(bad[:, :, None], np.nan, all_imp)
    start = 0
    for unit in batch:
        stop = start + unit.counts.shape[0]
        boot = slice(start, start + unit.n_boot)
        jack = slice(start + unit.n_boot, stop)
        local = unit.raters
        with np.errstate(invalid="ignore", divide="ignore"):
            lo, hi = bca_interval(np.sqrt(r2[local]), np.sqrt(all_r2[boot]),
                                  np.sqrt(all_r2[jack]), alpha=alpha)
            shares = importance_shares(all_imp, all_r2)
            share_hat = importance_shares(imp[local], r2[local]).ravel()
        k = share_hat.size // local.size
        s_lo, s_hi = bca_interval(share_hat, shares[boot].reshape(unit.n_boot, -1),
                                  shares[jack].reshape(stop - start - unit.n_boot, -1), alpha=alpha)
        out.r_low[local], out.r_high[local] = lo, hi
        out.share_low[local] = s_lo.reshape(local.size, k)
        out.share_high[local] = s_hi.reshape(local.size, k)
        start = stop
