"""Checks on a captured policy: is the fit trustworthy, and which cases does it miss?

All functions are batched: they take the rows of many raters at once (a group
index per row) or stacks of per-rater matrices, and loop over nothing but
columns or cues.

Rules of thumb used for flags (kept here so the README can quote them):

* :data:`FEW_CASES_PER_WEIGHT` = 10 cases per estimated weight. A rule of thumb
  of the policy-capturing literature (common practice; no single source).
* :data:`COLLINEAR_VIF` = 10: a (generalized) VIF, put on the VIF scale as
  ``GVIF^(1/df)``, above 10 (common practice; no single source).
* :data:`COLLINEAR_CONDITION` = 30: condition number of the cue correlation
  matrix (Belsley, Kuh & Welsch 1980 use 30 on the scaled design; from memory).

References
----------
.. [1] Fox, J., & Monette, G. (1992). Generalized collinearity diagnostics.
       Journal of the American Statistical Association, 87, 178-183.
.. [2] Ramsey, J. B. (1969). Tests for specification errors in classical linear
       least-squares regression analysis. JRSS B, 31, 350-371.
.. [3] Holm, S. (1979). A simple sequentially rejective multiple test procedure.
       Scandinavian Journal of Statistics, 6, 65-70.
.. [4] Pregibon, D. (1980). Goodness of link tests for generalized linear models.
       Applied Statistics, 29, 15-24.
.. [5] Rao, C. R. (1948). Large sample tests of statistical hypotheses concerning
       several parameters with applications to problems of estimation. Proceedings of
       the Cambridge Philosophical Society, 44, 50-57.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy import stats as sps

from .linalg import BatchedOLS, GroupedSSCP, grouped_products, grouped_sscp, ols_from_sscp, padded_layout
from .linear_nulls import LinearNull, fit_linear_null
from .logistic import fit_logistic

FEW_CASES_PER_WEIGHT = 10.0
COLLINEAR_VIF = 10.0
COLLINEAR_CONDITION = 30.0


def variance_inflation(
    corr_xx: np.ndarray, cue_groups: list[list[int]]
) -> tuple[np.ndarray, np.ndarray]:
    """VIF per design column and generalized VIF per cue, for stacked correlation matrices.

    .. math:: \\mathrm{VIF}_j = (R^{-1})_{jj}, \\qquad
              \\mathrm{GVIF}_c = \\frac{\\det R_{cc}\\, \\det R_{-c,-c}}{\\det R}

    (Fox & Monette 1992), where ``c`` is the set of a cue's columns. GVIF does
    not depend on how a categorical cue is coded (which level is the
    reference); for a one-column cue it equals the VIF.

    Parameters
    ----------
    corr_xx : (G, p, p) correlation matrices of the design columns.
    cue_groups : column indices per cue.

    Returns
    -------
    vif : (G, p); gvif : (G, k). NaN where the matrix is singular.
    """
    G, p, _ = corr_xx.shape
    sign, logdet = np.linalg.slogdet(corr_xx)
    singular = sign <= 0
    safe = np.where(singular[:, None, None], np.eye(p), corr_xx)
    vif = np.einsum("gii->gi", np.linalg.inv(safe))
    vif[singular] = np.nan
    gvif = np.full((G, len(cue_groups)), np.nan)
    for c, cols in enumerate(cue_groups):
        if not cols:
            continue
        rest = [j for j in range(p) if j not in cols]
        ld_cue = np.linalg.slogdet(corr_xx[:, cols][:, :, cols])[1]
        ld_rest = np.linalg.slogdet(corr_xx[:, rest][:, :, rest])[1] if rest else 0.0
        with np.errstate(over="ignore"):
            gvif[:, c] = np.exp(ld_cue + ld_rest - logdet)
    gvif[singular] = np.nan
    return vif, gvif


def condition_number(corr_xx: np.ndarray) -> np.ndarray:
    """sqrt(largest / smallest eigenvalue) of each cue correlation matrix, (G,).

    Equals the 2-norm condition number of the centred, unit-length-scaled
    design. inf where the matrix is singular.
    """
    evals = np.linalg.eigvalsh(corr_xx)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(evals[:, 0] > 0, np.sqrt(evals[:, -1] / evals[:, 0]), np.inf)


@dataclass(frozen=True)
class CaseInfluence:
    """Per-row leave-one-out quantities of a batched OLS fit (one entry per judgment)."""

    fitted: np.ndarray        # in-sample prediction of the rater's policy
    residual: np.ndarray      # judgment - fitted
    leverage: np.ndarray      # hat value h_ii
    loo_prediction: np.ndarray  # prediction from the policy fitted without this case
    studentized: np.ndarray   # externally studentized residual


def case_influence(
    X: np.ndarray, y: np.ndarray, groups: np.ndarray, stats: GroupedSSCP, fit: BatchedOLS
) -> CaseInfluence:
    """Leverage, leave-one-out predictions and studentized residuals, all rows at once.

    With :math:`\\tilde x_i` the row centred at its rater's cue means,

    .. math:: h_i = 1/n + \\tilde x_i^\\top S_{xx}^{-1} \\tilde x_i, \\quad
              \\hat y_{(i)} = y_i - e_i / (1 - h_i), \\quad
              t_i = e_i / (s_{(i)} \\sqrt{1 - h_i}),\\;
              s_{(i)}^2 = \\frac{RSS - e_i^2/(1-h_i)}{n - p - 2}

    (the exact leave-one-out identities of least squares, e.g. Belsley, Kuh &
    Welsch 1980, ch. 2; from memory). ``X`` holds the design columns the fit
    used, in the same order, and ``stats`` their grouped SSCP.
    """
    p = X.shape[1]
    centred = X - stats.mean[groups, :p]
    n = stats.n[groups]
    leverage = 1.0 / n + _row_quadratic_forms(centred, groups, fit.xtx_inv)
    fitted = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
    residual = y - fitted
    with np.errstate(divide="ignore", invalid="ignore"):
        deleted = residual / (1.0 - leverage)
        s2_without = (fit.rss[groups] - residual * deleted) / (n - p - 2.0)
        studentized = residual / np.sqrt(s2_without * (1.0 - leverage))
    return CaseInfluence(
        fitted=fitted,
        residual=residual,
        leverage=leverage,
        loo_prediction=y - deleted,
        studentized=studentized,
    )


def _row_quadratic_forms(rows: np.ndarray, groups: np.ndarray, matrices: np.ndarray) -> np.ndarray:
    """``rows[i]' matrices[groups[i]] rows[i]`` for every row, by one product per group.

    The rows are laid out as a padded (groups, longest, p) block (a reshape when the
    groups are of equal size and in order), rather than each row taking its own copy of
    its group's matrix.
    """
    n_groups, p = matrices.shape[0], rows.shape[1]
    order, sorted_groups, slot, sizes, longest = padded_layout(groups, n_groups)
    if longest and (sizes == longest).all() and (order == np.arange(order.size)).all():
        block = rows.reshape(n_groups, longest, p)
        return np.einsum("glp,glp->gl", np.matmul(block, matrices), block).reshape(-1)
    block = np.zeros((n_groups, max(longest, 1), p))
    block[sorted_groups, slot] = rows[order]
    forms = np.einsum("glp,glp->gl", np.matmul(block, matrices), block)
    out = np.empty(rows.shape[0])
    out[order] = forms[sorted_groups, slot]
    return out


def top_rows_per_group(groups: np.ndarray, score: np.ndarray, k: int) -> np.ndarray:
    """Indices of the ``k`` rows with the largest ``score`` within each group.

    Returned grouped and, within a group, by decreasing score (ties by row
    order; NaN scores never chosen).
    """
    valid = np.flatnonzero(np.isfinite(score))
    order = valid[np.lexsort((-score[valid], groups[valid]))]
    g = groups[order]
    starts = np.r_[0, np.flatnonzero(np.diff(g)) + 1]
    rank = np.arange(order.size) - np.repeat(starts, np.diff(np.r_[starts, order.size]))
    return order[rank < k]


@dataclass(frozen=True)
class ResetTest:
    """Ramsey's RESET per group: F statistic, degrees of freedom, p-value."""

    statistic: np.ndarray
    df_num: int
    df_den: np.ndarray
    p_value: np.ndarray


def reset_test(
    X: np.ndarray,
    y: np.ndarray,
    fitted: np.ndarray,
    groups: np.ndarray,
    n_groups: int,
    restricted: BatchedOLS,
) -> ResetTest:
    """Curvature check (Ramsey 1969): add the squared and cubed fitted values.

    The powers are taken of the fitted values standardized within each rater;
    this spans the same model as the raw powers (so the F test is identical) but
    keeps the added columns well conditioned.

    .. math:: F = \\frac{(RSS_0 - RSS_1) / 2}{RSS_1 / (n - p - 3)}
    """
    fit_stats = grouped_sscp(fitted[:, None], groups, n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        sd = np.sqrt(fit_stats.sscp[:, 0, 0] / fit_stats.n)
        z = (fitted - fit_stats.mean[groups, 0]) / sd[groups]
    p = X.shape[1]
    Z = np.column_stack([X, z**2, z**3, y])
    full = ols_from_sscp(grouped_sscp(Z, groups, n_groups), np.arange(p + 2), p + 2)
    df_den = restricted.n - p - 3.0
    with np.errstate(divide="ignore", invalid="ignore"):
        statistic = ((restricted.rss - full.rss) / 2.0) / (full.rss / df_den)
        statistic = np.where(full.rank_ok & (df_den > 0), np.maximum(statistic, 0.0), np.nan)
    p_value = sps.f.sf(statistic, 2, df_den)
    return ResetTest(statistic=statistic, df_num=2, df_den=df_den, p_value=p_value)


def reset_statistic(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int) -> np.ndarray:
    """The RESET F statistic of every group (least-squares fits; NaN where undefined)."""
    p = X.shape[1]
    stats = grouped_sscp(np.column_stack([X, y]), groups, n_groups)
    fit = ols_from_sscp(stats, np.arange(p), p)
    with np.errstate(invalid="ignore", divide="ignore"):
        fitted = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
        return reset_test(X, y, fitted, groups, n_groups, fit).statistic


class _SharedCueBlocks:
    """Each group's centred cues, orthonormalised once, for many judgment sets on the same cues.

    A parametric bootstrap redraws only the judgments, so the cue part of every RESET fit
    is the same in every simulated set. Rows are laid out as a (groups, longest) block
    (padding slots zero); ``basis`` holds an orthonormal basis of each group's centred
    cues (QR), so a fit of any judgment set is two matrix products, not a new solve.
    """

    def __init__(self, X: np.ndarray, groups: np.ndarray, n_groups: int):
        p = X.shape[1]
        order, self.group, self.slot, sizes, longest = padded_layout(groups, n_groups)
        self.rows = order
        self.shape = (n_groups, max(longest, 1))
        self.n = sizes.astype(float)
        self.mask = np.zeros(self.shape)
        self.mask[self.group, self.slot] = 1.0
        mean = grouped_sscp(X, groups, n_groups).mean
        centred = np.zeros(self.shape + (p,))
        centred[self.group, self.slot] = X[order] - mean[self.group]
        # Full rank of the cues as the least-squares fit decides it (the same rule on the
        # same sums; the response column, here a copy of a cue, does not enter it).
        self.rank_ok = ols_from_sscp(grouped_sscp(np.column_stack([X, X[:, :1]]), groups, n_groups),
                                     np.arange(p), p).rank_ok
        safe = np.where(self.rank_ok[:, None, None], centred, 0.0)
        self.basis = np.linalg.qr(safe)[0]
        self.basis_t = np.ascontiguousarray(np.swapaxes(self.basis, 1, 2))
        self.padded = bool((self.mask == 0).any())
        self.in_order = not self.padded and bool((order == np.arange(order.size)).all())
        self.p = p

    def sets_block(self, values: np.ndarray, part: slice) -> np.ndarray:
        """(groups in ``part``, sets, longest) block of ``values`` given as (sets, rows).

        Rows of equal-sized groups already in group order are a reshape away from it
        (one transposing copy); otherwise each row is placed at its slot, padding zero.
        """
        n_sets = values.shape[0]
        n_groups, longest = self.shape
        if self.in_order:
            return np.ascontiguousarray(
                values.reshape(n_sets, n_groups, longest)[:, part].transpose(1, 0, 2))
        out = np.zeros((n_groups, n_sets, longest))[part]
        chosen = (self.group >= part.start) & (self.group < part.stop)
        out[self.group[chosen] - part.start, :, self.slot[chosen]] = values[:, self.rows[chosen]].T
        return out

    def block(self, values: np.ndarray) -> np.ndarray:
        """(groups, longest, sets) block of ``values`` given as (sets, rows)."""
        out = np.zeros(self.shape + (values.shape[0],))
        out[self.group, self.slot] = values[:, self.rows].T
        return out

    def centred(self, block: np.ndarray) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = block.sum(axis=1) / self.n[:, None]
        centred = block - mean[:, None, :]
        return centred * self.mask[:, :, None] if self.padded else centred


#: Floats of one chunk of groups x judgment sets x rows in :func:`reset_statistics_shared_cues`
#: (its few working arrays stay in the processor's caches: 5.6 ms per set of 2,000 raters x
#: 200 cases against 8.9 ms with 1,000,000, one thread, measured on the shared machine).
_RESET_CHUNK_FLOATS = 100_000


def reset_statistics_shared_cues(cues: _SharedCueBlocks, Y: np.ndarray,
                                 rcond: float = 1e-12) -> np.ndarray:
    """RESET F of every group for each judgment set in ``Y`` (sets, rows): (sets, groups).

    The same statistic as :func:`reset_statistic` (restricted fit on the cues, the squared
    and cubed standardized fitted values added; Ramsey 1969), computed by projections on
    the group's orthonormalised cues ``Q``: ``RSS_0 = |y_c|^2 - |Q'y|^2`` and
    ``RSS_1 = RSS_0 - b' A^{-1} b`` with the powers' parts outside the cues ``W``,
    ``A = W'W`` and ``b = W'y_c``. Only the fitted values go back to the rows; every other
    inner product follows from the power sums and the coefficients on ``Q``
    (``W_1'W_2 = v_1'v_2 - n mean(v_1) mean(v_2) - (Q'v_1)'(Q'v_2)``, ``Q`` being centred,
    so that ``Q'y = Q'y_c`` and no centred copy of the judgments is made). The powers are
    taken of the fitted values as they are: standardizing them multiplies each power by a
    constant, which changes neither ``b' A^{-1} b`` nor the collinearity rule below. A
    power that the cues and the other power explain to within ``rcond`` of its own spread
    counts as collinear (NaN, as the direct fit). Groups are taken a chunk at a time, each
    chunk's sets laid out (groups, sets, rows) so that every sum runs along contiguous rows.
    """
    n_sets = Y.shape[0]
    n_groups, longest = cues.shape
    out = np.empty((n_sets, n_groups))
    step = max(1, _RESET_CHUNK_FLOATS // (n_sets * longest))
    for first in range(0, n_groups, step):
        part = slice(first, min(n_groups, first + step))
        out[:, part] = _reset_chunk(cues, cues.sets_block(Y, part), part, rcond)
    return out


def _reset_chunk(cues: _SharedCueBlocks, y: np.ndarray, part: slice, rcond: float) -> np.ndarray:
    """RESET F of the groups ``part`` for the sets ``y`` (groups, sets, rows): (sets, groups)."""
    basis = cues.basis[part]                          # (g, rows, p), zero on padding slots
    n = cues.n[part][:, None]
    dot = lambda u, v: np.einsum("gsl,gsl->gs", u, v)
    on_y = np.matmul(y, basis)                        # Q'y, (g, sets, p)
    fitted = np.matmul(on_y, cues.basis_t[part])      # zero on padding slots
    sum_y = y.sum(axis=2)
    explained0 = np.einsum("gsp,gsp->gs", on_y, on_y)
    rss0 = np.maximum(dot(y, y) - sum_y * sum_y / n - explained0, 0.0)
    square = fitted * fitted
    cube = square * fitted
    on_square, on_cube = np.matmul(square, basis), np.matmul(cube, basis)
    on = lambda u, v: np.einsum("gsp,gsp->gs", u, v)
    s2, s3 = square.sum(axis=2), cube.sum(axis=2)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        own = (dot(square, square) - s2 * s2 / n, dot(cube, cube) - s3 * s3 / n)
        a11 = own[0] - on(on_square, on_square)
        a22 = own[1] - on(on_cube, on_cube)
        a12 = dot(square, cube) - s2 * s3 / n - on(on_square, on_cube)
        b1 = dot(square, y) - s2 * sum_y / n - on(on_square, on_y)
        b2 = dot(cube, y) - s3 * sum_y / n - on(on_cube, on_y)
        det = a11 * a22 - a12 * a12
        explained = (a22 * b1 * b1 - 2.0 * a12 * b1 * b2 + a11 * b2 * b2) / det
        rss1 = np.maximum(rss0 - explained, 0.0)
        ok = (a11 > rcond * own[0]) & (det > rcond * own[1] * a11)
        df_den = cues.n[part] - cues.p - 3.0
        statistic = ((rss0 - rss1) / 2.0) / (rss1 / df_den[:, None])
    ok &= cues.rank_ok[part][:, None] & (df_den[:, None] > 0) & np.isfinite(statistic)
    return np.where(ok, np.maximum(statistic, 0.0), np.nan).T


def scale_reset_p(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int, *,
                  kind: str = "rounded", scale_min: float | None = None,
                  scale_max: float | None = None, step: float = 1.0, n_sim: int = 199,
                  rng: np.random.Generator | int | None = None,
                  max_rows: int = 2_000_000, null: LinearNull | None = None
                  ) -> tuple[np.ndarray, np.ndarray]:
    """RESET p-value whose null respects the judgment scale; returns ``(F, p)``.

    A parametric bootstrap test (Efron & Tibshirani 1993, ch. 16): the null is each
    rater's straight-line policy under the scale (:func:`.linear_nulls.fit_linear_null`:
    ``kind`` "rounded" for whole steps with ends, "binary" for 0/1 decisions, which
    need ``y`` in 0/1; the audit tests 0/1 decisions with :func:`logistic_reset_test`
    instead, as this bootstrap of the least-squares F is conservative there, 1.6% at 5%
    with 40 cases); ``n_sim`` judgment sets are drawn from it exactly as the scale
    produces judgments, and the same RESET F is recomputed on each.
    ``p = (1 + #{F* >= F}) / (n_sim + 1)``. Simulated sets whose statistic is undefined
    (for example every judgment at one end) are left out of that share; a group whose
    null cannot be drawn (``LinearNull.usable``) gets NaN. Rows sorted by group. ``null``,
    when given, is that fit already made (of ``kind``, for these rows).
    """
    rng = np.random.default_rng(rng)
    cues = _SharedCueBlocks(X, groups, n_groups)
    observed = reset_statistics_shared_cues(cues, y[None, :])[0]
    if null is None:
        null = fit_linear_null(X, y, groups, n_groups, kind=kind, scale_min=scale_min,
                               scale_max=scale_max, step=step)
    exceed = np.zeros(n_groups)
    usable = np.zeros(n_groups)
    m = y.size
    chunk = max(1, min(n_sim, max_rows // max(m, 1)))  # bounds the memory of one batch
    for first in range(0, n_sim, chunk):
        b = min(chunk, n_sim - first)
        simulated = null.draw(rng, b)
        stat = reset_statistics_shared_cues(cues, simulated)
        finite = np.isfinite(stat)
        exceed += (finite & (stat >= observed[None, :])).sum(axis=0)
        usable += finite.sum(axis=0)
    # a group with no null to draw from (0/1 decisions the cues separate) is not tested
    testable = np.bincount(groups, weights=~null.usable, minlength=n_groups) == 0
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.where(np.isfinite(observed) & testable, (1.0 + exceed) / (1.0 + usable), np.nan)
    return observed, p


@dataclass(frozen=True)
class LogisticResetTest:
    """Curvature inside the logistic model, per group: score statistic (chi-square, 2 df), p."""

    statistic: np.ndarray
    df: int
    p_value: np.ndarray


def logistic_reset_test(X: np.ndarray, y: np.ndarray, groups: np.ndarray,
                        n_groups: int) -> LogisticResetTest:
    """RESET inside the logistic model for 0/1 decisions: Rao's score test, all groups at once.

    Under the straight-line logistic policy ``logit p = b0 + x'b`` (fitted by
    :func:`.logistic.fit_logistic`), the score test for adding the squared and cubed
    linear predictor ``eta`` (RESET carried over to generalized linear models; Pregibon
    1980's link test is its one-term relative):

    .. math:: U = Z^\\top (y - \\hat p), \\quad
              S = U^\\top \\big(I_{zz} - I_{zx} I_{xx}^{-1} I_{xz}\\big)^{-1} U
              \\sim \\chi^2_2

    with ``X`` the null columns (intercept and cues), ``Z`` the powers and the
    information blocks weighted by ``p(1 - p)`` (Rao 1948; e.g. Cox & Hinkley 1974,
    sec. 9.3, from memory). Only the null fit is needed. The powers are taken of ``eta``
    standardized within each group: together with the intercept and the cues they span
    the same model as the raw powers, so the statistic is unchanged but better
    conditioned. A group whose decisions the cues separate (no finite null fit), or
    whose information is singular, gets NaN. ``y`` in 0/1; rows sorted by group.
    """
    m, p = X.shape
    null = fit_logistic(X, y, groups, n_groups)
    eta = null.intercept[groups] + np.einsum("mi,mi->m", X, null.coef[groups])
    prob = special.expit(eta)
    eta_stats = grouped_sscp(eta[:, None], groups, n_groups)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        sd = np.sqrt(eta_stats.sscp[:, 0, 0] / eta_stats.n)
        z = (eta - eta_stats.mean[groups, 0]) / sd[groups]
    full = np.column_stack([np.ones(m), X, z**2, z**3])
    q = p + 1
    weight = prob * (1.0 - prob)
    _, info = grouped_products(np.sqrt(weight)[:, None] * full, groups, n_groups)
    score, _ = grouped_products((y - prob)[:, None] * full[:, q:], groups, n_groups)
    testable = ~null.separation & np.isfinite(info).all(axis=(1, 2)) & np.isfinite(score).all(axis=1)
    safe = np.where(testable[:, None, None], info, np.eye(q + 2))
    testable &= np.linalg.cond(safe) < 1e12   # powers (nearly) collinear with the cues
    safe = np.where(testable[:, None, None], safe, np.eye(q + 2))
    i_xx, i_xz, i_zz = safe[:, :q, :q], safe[:, :q, q:], safe[:, q:, q:]
    efficient = i_zz - np.swapaxes(i_xz, 1, 2) @ np.linalg.solve(i_xx, i_xz)
    safe_score = np.where(testable[:, None], score, 0.0)
    statistic = np.einsum("gi,gi->g", safe_score,
                          np.linalg.solve(efficient, safe_score[..., None])[..., 0])
    statistic = np.where(testable, np.maximum(statistic, 0.0), np.nan)
    return LogisticResetTest(statistic=statistic, df=2, p_value=sps.chi2.sf(statistic, 2))
