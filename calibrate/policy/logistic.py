"""Batched logistic regression for binary decisions (admit / decline).

The linear probability model carries R_s, importance and the tests of a binary
judgment; this fit adds the weights in odds terms and Tjur's R^2. Every rater is
fitted at once by Newton-Raphson on stacked information matrices: the rows of
all raters sit in one array, sorted by rater, and each iteration sums them per
rater with ``np.add.reduceat``.

References
----------
.. [1] Tjur, T. (2009). Coefficients of determination in logistic regression
       models: A new proposal: The coefficient of discrimination. The American
       Statistician, 63, 366-372.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy import stats as sps

from .linalg import grouped_sscp


@dataclass(frozen=True)
class BatchedLogistic:
    """Logistic fits of many raters; rows of (G, ...) arrays are raters.

    ``separation``: the cues predict the decisions perfectly (or almost), so the
    weights run off to infinity; their values are then not meaningful.
    """

    intercept: np.ndarray   # (G,)
    coef: np.ndarray        # (G, p) weights in log-odds per unit of each cue
    se: np.ndarray          # (G, p)
    p_value: np.ndarray     # (G, p) Wald test
    tjur_r2: np.ndarray     # (G,) mean fitted probability of the 1s minus that of the 0s
    converged: np.ndarray   # (G,) bool
    separation: np.ndarray  # (G,) bool


def fit_logistic(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int) -> BatchedLogistic:
    """Logistic weights, Wald p-values and Tjur's R^2 for every rater (rows sorted by rater).

    .. math:: \\Pr(y_i = 1) = \\operatorname{logit}^{-1}(b_0 + x_i^\\top b), \\qquad
              R^2_{Tjur} = \\bar{\\hat\\pi}_{y=1} - \\bar{\\hat\\pi}_{y=0}

    (Tjur 2009). ``y`` holds 0/1 decisions.
    """
    b0, b, cov, prob, converged, separation = _newton_fits(X, y, groups, n_groups)
    se_all = np.sqrt(np.clip(np.einsum("gii->gi", cov), 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        pvals = 2 * sps.norm.sf(np.abs(b / se_all[:, 1:]))
        ones = np.bincount(groups, weights=prob * y, minlength=n_groups) / np.bincount(
            groups, weights=y, minlength=n_groups)
        zeros = np.bincount(groups, weights=prob * (1 - y), minlength=n_groups) / np.bincount(
            groups, weights=1 - y, minlength=n_groups)
    return BatchedLogistic(intercept=b0, coef=b, se=se_all[:, 1:], p_value=pvals,
                           tjur_r2=ones - zeros, converged=converged, separation=separation)


def _newton_fits(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int,
                      *, max_iter: int = 60, tol: float = 1e-10):
    """Newton-Raphson logistic fits for many raters at once (rows sorted by group).

    Cues are standardized within each rater for the iterations, and the
    coefficients mapped back. Returns intercept, coef, covariance of
    [intercept, coef], fitted probabilities per row, converged and separation
    flags. Separation: a fitted probability within 1e-8 of 0 or 1, or no
    convergence (our own rule).
    """
    stats = grouped_sscp(X, groups, n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt(np.einsum("gii->gi", stats.sscp) / stats.n[:, None])
    sd = np.where(sd > 0, sd, 1.0)
    Z = np.column_stack([np.ones(len(y)), (X - stats.mean[groups]) / sd[groups]])
    q = Z.shape[1]
    starts = np.r_[0, np.flatnonzero(np.diff(groups)) + 1]
    beta = np.zeros((n_groups, q))
    converged = np.zeros(n_groups, dtype=bool)
    pair = (Z[:, :, None] * Z[:, None, :]).reshape(len(y), q * q)
    info = np.zeros((n_groups, q, q))
    for _ in range(max_iter):
        eta = np.einsum("mi,mi->m", Z, beta[groups])
        prob = special.expit(eta)
        weight = prob * (1.0 - prob)
        info = np.add.reduceat(weight[:, None] * pair, starts, axis=0).reshape(n_groups, q, q)
        score = np.add.reduceat((y - prob)[:, None] * Z, starts, axis=0)
        info_safe = info + np.eye(q) * 1e-300
        try:
            step = np.linalg.solve(info_safe, score[..., None])[..., 0]
        except np.linalg.LinAlgError:
            step = (np.linalg.pinv(info_safe) @ score[..., None])[..., 0]
        step = np.where(converged[:, None], 0.0, step)
        beta = beta + step
        converged |= np.max(np.abs(step), axis=1) < tol
        if converged.all():
            break
    eta = np.einsum("mi,mi->m", Z, beta[groups])
    prob = special.expit(eta)
    extreme = np.minimum(prob, 1.0 - prob) < 1e-8
    separation = ~converged | (np.bincount(groups, weights=extreme, minlength=n_groups) > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        cov_std = np.linalg.pinv(info, hermitian=True)
    # Back to the raw cue scale: b_j = beta_j / sd_j, b_0 = beta_0 - sum b_j * mean_j.
    transform = np.zeros((n_groups, q, q))
    transform[:, 0, 0] = 1.0
    transform[:, 0, 1:] = -stats.mean / sd
    transform[:, np.arange(1, q), np.arange(1, q)] = 1.0 / sd
    raw = np.einsum("gij,gj->gi", transform, beta)
    cov = transform @ cov_std @ np.swapaxes(transform, 1, 2)
    return raw[:, 0], raw[:, 1:], cov, prob, converged, separation
