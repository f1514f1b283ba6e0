"""Batched least squares from grouped sufficient statistics.

Every rater (or rater pair, or group of raters) is a *group* of rows. One pass
over the long table builds, per group, the count ``n``, the mean of every
column and the *centred* sums of squares and cross-products (SSCP) of a block of
columns ``Z = [cues..., responses...]``. Any regression of one column of ``Z``
on others, with an intercept, follows from that matrix alone, so all groups are
solved in one batched call and never refitted from rows.

Accuracy: the SSCP is formed from rows centred at each group's mean (two-pass),
and regressions are solved on the correlation-scaled matrix. Forming raw
cross-products and subtracting ``n * mean**2`` loses about half the digits on
ill-conditioned data (NIST StRD Longley: about 7 significant digits, against
10+ this way; see tests/reference/test_nist_longley.py).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class GroupedSSCP:
    """Per-group sufficient statistics of the columns of Z.

    n:     (G,) total weight (number of rows) per group
    mean:  (G, k) weighted column means per group
    sscp:  (G, k, k) centred sums of squares and cross-products per group
    """

    n: np.ndarray
    mean: np.ndarray
    sscp: np.ndarray

    @property
    def n_groups(self) -> int:
        return int(self.n.shape[0])

    def covariance(self) -> np.ndarray:
        """Sample covariance (denominator n - 1) per group; NaN where n < 2."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.sscp / (self.n - 1.0)[:, None, None]

    def correlation(self) -> np.ndarray:
        """Correlation matrix per group; NaN where a column is constant."""
        d = np.sqrt(np.einsum("gii->gi", self.sscp))
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.sscp / (d[:, :, None] * d[:, None, :])

    def pooled_within(self) -> tuple[float, np.ndarray]:
        """Sum of the within-group SSCPs (common slopes, a separate intercept per group)."""
        return float(self.n.sum()), self.sscp.sum(axis=0)


def grouped_sscp(
    Z: np.ndarray,
    groups: np.ndarray,
    n_groups: int,
    *,
    weights: np.ndarray | None = None,
) -> GroupedSSCP:
    """Centred SSCP of the columns of ``Z`` within each group, in one vectorized pass.

    Parameters
    ----------
    Z : (m, k) float array, one row per judgment (cues, then responses).
    groups : (m,) int array with values in ``range(n_groups)``.
    n_groups : number of groups (empty groups get n = 0 and NaN means).
    weights : optional (m,) non-negative weights (bootstrap counts).
    """
    Z = np.asarray(Z, dtype=float)
    groups = np.asarray(groups, dtype=np.intp)
    m, k = Z.shape
    w = np.ones(m) if weights is None else np.asarray(weights, dtype=float)
    n = np.bincount(groups, weights=w, minlength=n_groups)
    sums = np.stack(
        [np.bincount(groups, weights=w * Z[:, j], minlength=n_groups) for j in range(k)], axis=1
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sums / n[:, None]
    sizes = np.bincount(groups, minlength=n_groups)
    longest = int(sizes.max()) if m else 0
    if k > 1 and m and n_groups * longest <= _PADDING_ALLOWANCE * m:
        return _sscp_by_blocks(Z, groups, n_groups, w, n, mean, sizes, longest)
    centred = Z - mean[groups]
    sscp = np.empty((n_groups, k, k))
    for i in range(k):
        wi = w * centred[:, i]
        for j in range(i, k):
            s = np.bincount(groups, weights=wi * centred[:, j], minlength=n_groups)
            sscp[:, i, j] = s
            sscp[:, j, i] = s
    return GroupedSSCP(n=n, mean=mean, sscp=sscp)


#: Padded blocks may hold at most this many slots per row of Z (groups of unequal
#: size are padded to the longest); beyond it the column-by-column sums are used.
_PADDING_ALLOWANCE = 3


def padded_layout(groups: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, int]:
    """Where each row goes when every group's rows are laid out as a padded (groups,
    longest) block: ``(order, sorted_groups, slot, sizes, longest)``; row ``order[i]``
    goes to ``[sorted_groups[i], slot[i]]`` (stable, so rows keep their order within a
    group), ``longest`` the largest group's size (0 without rows)."""
    groups = np.asarray(groups, dtype=np.intp)
    sizes = np.bincount(groups, minlength=n_groups)
    order = np.argsort(groups, kind="stable")
    sorted_groups = groups[order]
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    slot = np.arange(groups.size) - starts[sorted_groups]
    return order, sorted_groups, slot, sizes, int(sizes.max()) if groups.size else 0


def _sscp_by_blocks(Z, groups, n_groups, w, n, mean, sizes, longest) -> GroupedSSCP:
    """The same sums as the column-by-column path, as one batched matrix product.

    Rows are laid out as a (groups, longest, k) block, padded with zero-weight rows,
    so that the k*(k+1)/2 passes over the table become one ``matmul`` per group: about
    ten times fewer passes over memory with ten or so columns.
    """
    k = Z.shape[1]
    if (sizes == longest).all() and (groups[1:] >= groups[:-1]).all():
        # groups of one size, rows in group order (a policy fit's rows): the block is a reshape
        centred = (Z.reshape(n_groups, longest, k) - mean[:, None, :])
        sscp = np.matmul(np.swapaxes(centred * w.reshape(n_groups, longest, 1), 1, 2), centred)
        return GroupedSSCP(n=n, mean=mean, sscp=(sscp + np.swapaxes(sscp, 1, 2)) / 2.0)
    order, sorted_groups, slot, _, _ = padded_layout(groups, n_groups)
    weight = np.zeros((n_groups, longest))
    weight[sorted_groups, slot] = w[order]
    centred = np.zeros((n_groups, longest, k))   # padding slots stay exactly zero
    centred[sorted_groups, slot] = Z[order] - mean[sorted_groups]
    sscp = np.matmul(np.swapaxes(centred * weight[:, :, None], 1, 2), centred)
    sscp = (sscp + np.swapaxes(sscp, 1, 2)) / 2.0   # exactly symmetric, as the other path
    return GroupedSSCP(n=n, mean=mean, sscp=sscp)


def grouped_products(A: np.ndarray, groups: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Per group, the column sums of ``A`` and the uncentred cross-products ``A'A``.

    Returns ``(sums (G, k), products (G, k, k))``: the same numbers as
    ``np.add.at(out, groups, A[:, :, None] * A[:, None, :])`` without the (rows, k, k)
    array, by one batched matrix product on rows laid out per group.
    """
    A = np.asarray(A, dtype=float)
    groups = np.asarray(groups, dtype=np.intp)
    m, k = A.shape
    sums = np.stack([np.bincount(groups, weights=A[:, j], minlength=n_groups)
                     for j in range(k)], axis=1)
    order, sorted_groups, slot, _, longest = padded_layout(groups, n_groups)
    block = np.zeros((n_groups, longest, k))
    block[sorted_groups, slot] = A[order]
    products = np.matmul(np.swapaxes(block, 1, 2), block)
    return sums, (products + np.swapaxes(products, 1, 2)) / 2.0


@dataclass(frozen=True)
class BatchedOLS:
    """OLS fits of one response on a set of predictors, for many groups at once.

    Shapes: G groups, p predictors. Rank-deficient groups get NaN coefficients
    and ``rank_ok = False``.
    """

    coef: np.ndarray       # (G, p) slopes
    intercept: np.ndarray  # (G,)
    rss: np.ndarray        # (G,) residual sum of squares
    tss: np.ndarray        # (G,) total (centred) sum of squares of the response
    n: np.ndarray          # (G,)
    df_resid: np.ndarray   # (G,) n - p - 1
    xtx_inv: np.ndarray    # (G, p, p) inverse of the centred predictor SSCP
    rank_ok: np.ndarray    # (G,) bool

    @property
    def r2(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return 1.0 - self.rss / self.tss

    @property
    def sigma2(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.df_resid > 0, self.rss / self.df_resid, np.nan)

    @property
    def se(self) -> np.ndarray:
        """(G, p) standard errors of the slopes."""
        diag = np.einsum("gii->gi", self.xtx_inv)
        return np.sqrt(self.sigma2[:, None] * diag)

    @property
    def r2_adj(self) -> np.ndarray:
        p = self.coef.shape[1]
        with np.errstate(invalid="ignore", divide="ignore"):
            return 1.0 - (1.0 - self.r2) * (self.n - 1.0) / (self.n - p - 1.0)


def _checked_inverse(R: np.ndarray, candidate: np.ndarray,
                     rcond: float) -> tuple[np.ndarray, np.ndarray]:
    """Which correlation matrices are full rank, and their inverses (NaN where not).

    The rule is the eigenvalue one, ``lambda_min > rcond * lambda_max``. Decided
    without an eigen-decomposition where it is certain: when a batched Cholesky
    succeeds, ``lambda_min >= 1 / ||R^-1||_F`` and ``lambda_max <= trace(R)``, so a
    matrix with ``1 / ||R^-1||_F > rcond * trace(R)`` passes the rule for sure; the
    inverse costs a Cholesky and an LU, about a third of ``eigh``. Only the matrices
    near the line (or a batch holding a matrix that is not positive definite) go
    through ``eigh``, which decides as before.
    """
    G, p, _ = R.shape
    rank_ok = np.zeros(G, dtype=bool)
    R_inv = np.full((G, p, p), np.nan)
    todo = np.flatnonzero(candidate)
    if todo.size and p:
        try:
            np.linalg.cholesky(R[todo])
            inverse = np.linalg.inv(R[todo])
        except np.linalg.LinAlgError:
            inverse = None
        if inverse is not None:
            trace = np.einsum("gii->g", R[todo])
            sure = 1.0 / np.sqrt(np.einsum("gij,gij->g", inverse, inverse)) > rcond * trace
            rank_ok[todo[sure]] = True
            R_inv[todo[sure]] = inverse[sure]
            todo = todo[~sure]
    if todo.size:
        evals, evecs = np.linalg.eigh(R[todo])
        ok = evals[:, 0] > rcond * np.maximum(evals[:, -1], 1e-300)
        with np.errstate(invalid="ignore", divide="ignore"):
            inv_e = np.where(ok[:, None], 1.0 / evals, np.nan)
        rank_ok[todo] = ok
        R_inv[todo] = np.einsum("gij,gj,gkj->gik", evecs, inv_e, evecs)
    return rank_ok, R_inv


def r_squared_from_sscp(stats: GroupedSSCP, x_cols, y_col: int, *,
                        rcond: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """``(R^2, rank_ok)`` of column ``y_col`` on ``x_cols`` in every group, and nothing else.

    The same R^2 and rank rule as :func:`ols_from_sscp` (``R^2 = r' R^-1 r`` on the
    correlation scale, with the inverse its rank check computes anyway), without the
    coefficients, standard errors and intercepts that a resampled R_s does not need.
    NaN where not full rank or the response is constant.
    """
    x_cols = np.asarray(x_cols, dtype=np.intp)
    Sxx = stats.sscp[:, x_cols[:, None], x_cols[None, :]]
    Syy = stats.sscp[:, y_col, y_col]
    scale = np.sqrt(np.einsum("gii->gi", Sxx))
    ok_scale = np.all(scale > 0, axis=1) & np.all(np.isfinite(scale), axis=1)
    safe = np.where(ok_scale[:, None], scale, 1.0)
    R = np.where(ok_scale[:, None, None], Sxx / (safe[:, :, None] * safe[:, None, :]), 0.0)
    rank_ok, R_inv = _checked_inverse(R, ok_scale & (stats.n > x_cols.size + 1), rcond)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = stats.sscp[:, x_cols, y_col] / (safe * np.sqrt(Syy)[:, None])
        r2 = np.einsum("gi,gij,gj->g", r, R_inv, r)
    return np.where(rank_ok & (Syy > 0), r2, np.nan), rank_ok


def ols_from_sscp(
    stats: GroupedSSCP,
    x_cols: list[int] | np.ndarray,
    y_col: int,
    *,
    rcond: float = 1e-12,
) -> BatchedOLS:
    """Regress column ``y_col`` on columns ``x_cols`` (plus intercept) in every group.

    Solved on the correlation-scaled SSCP; rank deficiency (a constant or perfectly
    collinear cue) is detected per group without a Python loop (:func:`_checked_inverse`).
    """
    x_cols = np.asarray(x_cols, dtype=np.intp)
    Sxx = stats.sscp[:, x_cols[:, None], x_cols[None, :]]
    Sxy = stats.sscp[:, x_cols, y_col]
    Syy = stats.sscp[:, y_col, y_col]
    G, p = Sxy.shape
    scale = np.sqrt(np.einsum("gii->gi", Sxx))
    ok_scale = np.all(scale > 0, axis=1) & np.all(np.isfinite(scale), axis=1)
    safe = np.where(scale > 0, scale, 1.0)
    safe = np.where(np.isfinite(safe), safe, 1.0)
    R = Sxx / (safe[:, :, None] * safe[:, None, :])
    R = np.where(np.isfinite(R), R, 0.0)
    rank_ok, R_inv = _checked_inverse(R, ok_scale & (stats.n > p + 1), rcond)
    # A Cholesky solve is more accurate than the eigen inverse for the coefficients;
    # use it on the groups that are full rank.
    coef_scaled = np.full((G, p), np.nan)
    if rank_ok.any():
        rhs = Sxy[rank_ok] / safe[rank_ok]
        coef_scaled[rank_ok] = np.linalg.solve(R[rank_ok], rhs[..., None])[..., 0]
    coef = coef_scaled / safe
    xtx_inv = R_inv / (safe[:, :, None] * safe[:, None, :])
    rss = Syy - np.einsum("gp,gp->g", coef, Sxy)
    rss = np.where(rank_ok, np.maximum(rss, 0.0), np.nan)
    intercept = stats.mean[:, y_col] - np.einsum("gp,gp->g", coef, stats.mean[:, x_cols])
    return BatchedOLS(
        coef=coef,
        intercept=intercept,
        rss=rss,
        tss=Syy,
        n=stats.n,
        df_resid=stats.n - p - 1.0,
        xtx_inv=xtx_inv,
        rank_ok=rank_ok,
    )
