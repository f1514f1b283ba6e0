"""The case bootstrap behind the policy intervals: resampled fits, BCa and percentile intervals.

A bootstrap resample is a vector of counts over a rater's cases. Raters who saw
the same cases share the count vectors, so they share the resampled cue
cross-products and only their judgments differ; each resample's R^2 and cue
importance follow from its correlation matrices (:mod:`calibrate.policy.importance`),
never from a refit on rows. Leave-one-out (jackknife) fits ride along as count
vectors of ones with a single zero, for the acceleration of the BCa interval of R_s.

The importance shares get the plain percentile interval instead
(:func:`percentile_interval`). A share is bounded below by 0 and a weak cue's
estimate sits just above it; BCa's bias correction z0 then pulls the whole
interval down past the truth (measured in ``benchmarks/bench_importance_resamples.py``:
at 80 cases BCa covered 74-76% for a cue with a true share of .02, its intervals
wholly under the truth; the percentile interval 96-97%). The percentile interval needs no
jackknife, so the 2**k subset R^2 values are not computed for the n
leave-one-out rows. Its remaining shortfall, the strongest cue's share under-estimated
with few cases, is stated beside the shares (:func:`share_interval_note`).

When raters each read their own cases there are as many blocks as raters, and
the work is millions of tiny systems (raters x resamples). Blocks of the same
size are stacked so one product gives several blocks' cross-products, and the
2**k subset R^2 values of the dominance weights come from the elimination tree
of :func:`calibrate.policy.importance.dominance_weights` (``solver="sweep"``) rather
than one linear solve per subset and system. When many raters read the same cases
the work is the other way round (few cue matrices, many raters each): each
resample's dominance weights are quadratic forms in the raters' correlations with
the cues, their matrices built once per resample (``solver="shared"``), and the
leave-one-out sums are the column totals less each case's terms.

References
----------
.. [1] Efron, B. (1987). Better bootstrap confidence intervals. Journal of the
       American Statistical Association, 82, 171-185 (BCa interval).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from .importance import (COLLINEAR_REMAINDER, cue_importance, dominance_by_sweep_batch_last,
                         eliminate_leading, importance_shares, r2_from_correlations)

#: Bound the float count of one bootstrap chunk (resamples x raters x subsets).
_CHUNK_ELEMENTS = 16_000_000
#: Bound the floats of one stacked product of counts with per-case terms.
_STACK_FLOATS = 4_000_000
#: Importance systems solved together in the systems-last layout (about one chunk of the
#: dominance sweep for 8 cues, :data:`calibrate.policy.importance._SWEEP_FLOATS`).
_SWEEP_SYSTEMS = 8_000
#: From this many cases the percentile intervals of the importance shares covered 92-98%
#: for every cue strength in the benchmark (1-7 with a ceiling and continuous judgments,
#: 120 and 200 cases; mostly 93-97%); below it the strongest cue's intervals covered
#: 89-92.5% at 40 and 80 cases (DEVELOPERS.md, "Importance-share intervals").
SHARE_INTERVAL_FULL_COVERAGE_CASES = 120
#: Raters sharing each resample's cue matrix from which the dominance weights are found as
#: quadratic forms (``solver="shared"``) rather than by the elimination tree per rater.
#: Measured on 1,000 resamples, one thread: 8 cues, the tree 0.12 s with 32 raters and 0.21 s
#: with 64, the quadratic forms 0.15-0.18 s at any count (4.9 s against 0.7 s with 500
#: raters); 4 cues, the two even at about 20 raters.
SHARED_SOLVER_FROM = 48


def held_resamples(asked: int, n_raters: int, *, full_up_to: int, work: int, at_least: int) -> int:
    """Resamples per rater on a panel of ``n_raters``: as ``asked`` up to ``full_up_to``
    raters, then raters x resamples held to ``work``, never under ``at_least`` (nor over the
    ask). The one rule behind the reduced resamples of the lens intervals and of drift."""
    if n_raters <= full_up_to:
        return asked
    return min(asked, max(at_least, work // n_raters))


def share_interval_note(n_cases: int) -> str | None:
    """The sentence that goes beside a rater's importance-share intervals, or None.

    One verdict for results.json and the reports: under
    :data:`SHARE_INTERVAL_FULL_COVERAGE_CASES` cases the 95% intervals of the shares
    are not claimed to be 95%.
    """
    if n_cases >= SHARE_INTERVAL_FULL_COVERAGE_CASES:
        return None
    return (f"With {n_cases} cases (fewer than {SHARE_INTERVAL_FULL_COVERAGE_CASES}) these "
            "shares are rough: in simulations their 95% intervals held the true share only "
            "about 9 times in 10 for the most important cues, whose shares tend to come out "
            "low with few cases.")


def percentile_interval(
    estimate: np.ndarray, boot: np.ndarray, *, alpha: float = 0.05
) -> tuple[np.ndarray, np.ndarray]:
    """Percentile bootstrap interval, one per column: the alpha/2 and 1 - alpha/2 quantiles.

    .. math:: \big[\hat G^{-1}(\alpha/2),\; \hat G^{-1}(1-\alpha/2)\big]

    with :math:`\hat G` the distribution of the finite resampled values (Efron &
    Tibshirani 1993, ch. 13, from memory); quantiles interpolated linearly between order
    statistics, as ``numpy.quantile``'s default. A column with fewer than 10 finite
    resamples, or a NaN estimate, gets NaN.

    Parameters
    ----------
    estimate : (R,) full-sample values (only their NaN pattern is used).
    boot : (B, R) bootstrap values.
    """
    boot = np.asarray(boot, dtype=float)
    n_finite = np.isfinite(boot).sum(axis=0)
    ends = [_column_quantiles(boot, n_finite, np.full(boot.shape[1], level))
            for level in (alpha / 2, 1 - alpha / 2)]
    bad = (n_finite < 10) | ~np.isfinite(np.asarray(estimate, dtype=float))
    return np.where(bad, np.nan, ends[0]), np.where(bad, np.nan, ends[1])


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



def _resampled_sums(X, Y, counts, *, leave_one_out: bool):
    """The count-weighted sums behind :func:`weighted_correlations`: the centred columns,
    the sums (..., N, terms) of every resample (and leave-one-out row), their totals
    (..., N, 1) and the position of each cue pair's cross-product among the terms (p, p)."""
    n, p = X.shape[-2:]
    R = Y.shape[-1]
    N = counts.shape[-2]
    lead = counts.shape[:-2]
    Xc = X - X.mean(axis=-2, keepdims=True)
    Yc = Y - Y.mean(axis=-2, keepdims=True)
    # The cue cross-products once per pair (Sxx is symmetric): with one rater per block,
    # 54 columns of per-case terms instead of 82 for 8 cues.
    upper_i, upper_j = np.triu_indices(p)
    pair_of = np.zeros((p, p), dtype=np.intp)
    pair_of[upper_i, upper_j] = pair_of[upper_j, upper_i] = np.arange(upper_i.size)
    # The last column of ones gives each resample's total count in the same product (the
    # counts are whole numbers, so their sum is exact in any order: the same totals as
    # summing the counts, without another pass over them).
    terms = np.concatenate([
        Xc, Yc, Yc**2, Xc[..., upper_i] * Xc[..., upper_j],
        (Xc[..., :, None] * Yc[..., None, :]).reshape(*lead, n, p * R), np.ones((*lead, n, 1)),
    ], axis=-1)
    # One BLAS product per block, stacked blocks included: with BLAS on one thread (as the
    # audit runs it, calibrate/threads.py) 20 blocks of 1,200 x 200 by 200 x 82 took 0.026 s
    # against 0.097 s for numpy's own einsum loop (the same sums to 3e-14).
    if leave_one_out:
        # the product written straight into the rows it fills, then the n leave-one-out rows
        # below it (no concatenated copy of the whole table)
        sums = np.empty((*lead, N + n, terms.shape[-1]))
        np.matmul(counts, terms, out=sums[..., :N, :])
        np.subtract(terms.sum(axis=-2, keepdims=True), terms, out=sums[..., N:, :])
    else:
        sums = counts @ terms
    return Xc, Yc, sums[..., :-1], sums[..., -1:], pair_of


def weighted_correlations(
    X: np.ndarray, Y: np.ndarray, counts: np.ndarray, *, leave_one_out: bool = False
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Correlations of cues and judgments under each vector of case counts.

    X (n, p) is shared by the R raters whose judgments are the columns of Y
    (n, R); counts (N, n) weight the cases (bootstrap counts, or jackknife
    vectors of ones with one zero). Returns corr_xx (N, p, p), corr_xy
    (N, p, R) and ``bad`` (N, R): a resample that leaves a cue or the judgments
    constant. A leading axis stacks U independent blocks of the same size:
    X (U, n, p), Y (U, n, R) and counts (U, N, n) give (U, N, ...) results.

    Cross-products are taken about the full-sample means, so the correction
    for the resample mean stays small:

    .. math:: S_{ab} = \\sum_i c_i \\tilde a_i \\tilde b_i - (\\textstyle\\sum_i c_i)\\,
              \\bar a_c \\bar b_c

    with :math:`\\tilde a` centred at the full-sample mean and :math:`\\bar a_c`
    its count-weighted mean. Every sum over cases comes from one matrix
    product of the counts with a table of per-case terms. With ``leave_one_out``
    the n leave-one-out vectors (ones with one zero) follow the given counts in
    the results, their sums taken as the column totals less each case's own terms
    instead of n more rows of the product.
    """
    p, R = X.shape[-1], Y.shape[-1]
    lead = counts.shape[:-2]
    Xc, Yc, sums, total, pair_of = _resampled_sums(X, Y, counts, leave_one_out=leave_one_out)
    N, n_pairs = sums.shape[-2], p * (p + 1) // 2
    x_mean = sums[..., :p] / total
    y_mean = sums[..., p:p + R] / total
    at = p + 2 * R
    # The arithmetic of every entry as written plainly (S - (n m_a) m_b, then S / (d_a d_b)),
    # with the products and quotients put into the arrays that hold them
    Sxx = np.take(sums, at + pair_of.ravel(), axis=-1).reshape(*lead, N, p, p)
    weighted_mean = total * x_mean
    Sxx -= np.multiply(weighted_mean[..., :, None], x_mean[..., None, :])
    Sxy = sums[..., at + n_pairs:].reshape(*lead, N, p, R)
    Sxy -= weighted_mean[..., :, None] * y_mean[..., None, :]
    Syy = sums[..., p + R:at] - total * y_mean**2
    dx = np.sqrt(np.clip(np.diagonal(Sxx, axis1=-2, axis2=-1), 0.0, None))
    x_bad = np.any(dx**2 <= 1e-10 * (Xc**2).sum(axis=-2)[..., None, :], axis=-1)
    y_bad = Syy <= 1e-10 * (Yc**2).sum(axis=-2)[..., None, :]
    dx = np.where(dx > 0, dx, 1.0)
    dy = np.sqrt(np.where(y_bad, 1.0, Syy))
    corr_xx = np.divide(Sxx, np.multiply(dx[..., :, None], dx[..., None, :]), out=Sxx)
    if x_bad.any():
        corr_xx[x_bad] = np.eye(p)
    corr_xy = np.divide(Sxy, np.multiply(dx[..., :, None], dy[..., None, :]), out=Sxy)
    return corr_xx, corr_xy, y_bad | x_bad[..., None]


def _correlations_batch_last(X: np.ndarray, Y: np.ndarray, counts: np.ndarray):
    """:func:`weighted_correlations` of U stacked blocks with their leave-one-out rows, laid
    out with the systems last: corr_xx (p, p, U, N + n), corr_xy (p, R, U, N + n) and
    ``bad`` (R, U, N + n), from X (U, n, p), Y (U, n, R) and counts (U, N, n).

    Every entry comes from the same operations on the same sums as there, so the values
    are the same to the bit; only the layout differs. With one or a few raters per block
    the systems-first layout makes every step a loop over 8 x 8 matrices (products
    broadcast over axes of 8), and the eliminations that follow want the systems last
    anyway (:func:`_r2_batch_last`, the sweep of the dominance weights).
    """
    U, n, p = X.shape
    R = Y.shape[-1]
    Xc, Yc, sums, total, pair_of = _resampled_sums(X, Y, counts, leave_one_out=True)
    N = sums.shape[-2]
    n_pairs = p * (p + 1) // 2
    sums = np.ascontiguousarray(np.moveaxis(sums, -1, 0))        # (terms, U, N)
    total = total[..., 0]                                          # (U, N)
    x_mean = sums[:p] / total
    y_mean = sums[p:p + R] / total
    at = p + 2 * R
    Sxx = sums[at + pair_of.ravel()].reshape(p, p, U, N)
    weighted_mean = total * x_mean
    Sxx -= np.multiply(weighted_mean[:, None], x_mean[None, :])
    Sxy = sums[at + n_pairs:].reshape(p, R, U, N)
    Sxy -= weighted_mean[:, None] * y_mean[None, :]
    Syy = sums[p + R:at] - total * y_mean**2
    dx = np.sqrt(np.clip(np.diagonal(Sxx, axis1=0, axis2=1), 0.0, None))   # (U, N, p)
    x_bad = np.any(dx**2 <= 1e-10 * (Xc**2).sum(axis=-2)[:, None, :], axis=-1)
    y_bad = Syy <= 1e-10 * (Yc**2).sum(axis=-2).T[:, :, None]
    dx = np.moveaxis(np.where(dx > 0, dx, 1.0), -1, 0)                       # (p, U, N)
    dy = np.sqrt(np.where(y_bad, 1.0, Syy))
    corr_xx = np.divide(Sxx, np.multiply(dx[:, None], dx[None, :]), out=Sxx)
    if x_bad.any():
        corr_xx[:, :, x_bad] = np.eye(p)[:, :, None]
    corr_xy = np.divide(Sxy, np.multiply(dx[:, None], dy[None, :]), out=Sxy)
    return corr_xx, corr_xy, y_bad | x_bad[None]


@dataclass(frozen=True)
class PolicyIntervals:
    """Intervals of one batch of raters (NaN for raters not resampled).

    r_low, r_high: (G,) BCa interval for R_s; share_low, share_high: (G, k)
    percentile intervals for the importance shares of the k cues.
    """

    r_low: np.ndarray
    r_high: np.ndarray
    share_low: np.ndarray
    share_high: np.ndarray


@dataclass
class _ResampleUnit:
    """Raters who saw the same cases: one block, or a slice of a large one."""

    block: int             # index of the block, whose count vectors the unit uses
    raters: np.ndarray     # indices of the raters in the batch being resampled
    X: np.ndarray          # (n, p) the block's design rows
    Y: np.ndarray          # (n, R) the raters' judgments

    @property
    def n_cases(self) -> int:
        return self.X.shape[0]


class _BlockCounts:
    """Bootstrap and jackknife count vectors of each block, drawn when first used.

    Each block draws from its own child generator, so its counts do not depend
    on when it is used; they are dropped after the block's last unit, so memory
    holds a batch's blocks rather than every block of the panel.
    """

    def __init__(self, generators: list[np.random.Generator], units: list[_ResampleUnit],
                 n_boot: int):
        self._generators = generators
        self._n_boot = n_boot
        self._uses: dict[int, int] = {}
        for unit in units:
            self._uses[unit.block] = self._uses.get(unit.block, 0) + 1
        self._held: dict[int, np.ndarray] = {}
        self._stack: np.ndarray | None = None

    def take(self, unit: _ResampleUnit) -> np.ndarray:
        """(n_boot, n) bootstrap counts (the leave-one-out vectors are implied:
        ``weighted_correlations(..., leave_one_out=True)``)."""
        block = unit.block
        if block not in self._held:
            self._held[block] = _draw_boot_counts(self._generators[block], unit.n_cases, self._n_boot)
        counts = self._held[block]
        self._uses[block] -= 1
        if not self._uses[block]:
            del self._held[block]
        return counts

    def stack(self, units: list[_ResampleUnit]) -> np.ndarray:
        """(len(units), n_boot, n): :meth:`take` of each unit (all of one size), the counts
        of a block used once drawn straight into the stack. The stack is one array kept
        for every call of the same shape, so it holds until the next call: on this
        virtual machine a fresh array's first touch costs more than the counting (drawing
        and counting one rater's 1,000 x 200 counts: 3.4-3.6 ms into fresh arrays, 1.2-1.6
        ms into a kept one, the same counts)."""
        shape = (len(units), self._n_boot, units[0].n_cases)
        if self._stack is None or self._stack.shape != shape:
            self._stack = np.empty(shape)
        for slot, unit in enumerate(units):
            if unit.block in self._held or self._uses[unit.block] > 1:
                self._stack[slot] = self.take(unit)
            else:
                self._uses[unit.block] -= 1
                _count_draws(self._generators[unit.block], self._stack[slot])
        return self._stack


def _draw_boot_counts(generator: np.random.Generator, n: int, n_boot: int) -> np.ndarray:
    """(n_boot, n): how often each case is drawn in each resample of n cases."""
    counts = np.empty((n_boot, n))
    _count_draws(generator, counts)
    return counts


def _count_draws(generator: np.random.Generator, out: np.ndarray) -> None:
    """Draw ``out.shape`` (n_boot, n) case numbers and count them into ``out`` (C-contiguous):
    how often each case is drawn in each resample of n cases."""
    n_boot, n = out.shape
    draws = generator.integers(0, n, size=(n_boot, n))
    draws += n * np.arange(n_boot)[:, None]   # resample b counts into bins b*n .. b*n + n-1
    flat = out.reshape(-1)
    flat[:] = 0.0
    np.add.at(flat, draws.ravel(), 1.0)   # whole numbers: the same counts as a bincount


def _draw_counts(generator: np.random.Generator, n: int, n_boot: int) -> np.ndarray:
    """(n_boot + n, n): the bootstrap counts, then the n leave-one-out vectors."""
    return np.vstack([_draw_boot_counts(generator, n, n_boot), 1.0 - np.eye(n)])


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
    n_boot_importance: int | None = None,
) -> PolicyIntervals:
    """BCa intervals for R_s, percentile intervals for the importance shares, resampling each rater's cases.

    Parameters
    ----------
    X : (m, p) design rows the fits used, sorted by rater (``groups``).
    y : (m,) judgments.
    groups : (m,) rater index in ``range(G)`` per row, non-decreasing.
    fitted : (G,) bool, raters with a policy (the others keep NaN).
    case_row : (m,) case identity per row: raters with the same sequence of
        case rows form one resampling block and share its count vectors.
    cue_groups : design-column indices per cue (see :mod:`calibrate.policy.importance`).
    n_boot : resamples per block.
    rng : generator; one child generator is spawned per block, in block order.
    alpha, method : interval level; importance method.
    r2, importance_r2 : (G,), (G, k) full-sample values (the interval centres).
    n_boot_importance : the importance intervals from the first this many resamples only
        (a reduced form for large panels; None: all ``n_boot``). R_s keeps every resample.
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
    for b, block in enumerate(block_list):
        s0, e0 = starts[block[0]], ends[block[0]]
        width = max(1, _CHUNK_ELEMENTS // ((n_boot + e0 - s0) * n_terms))
        for first in range(0, len(block), width):
            local = np.array(block[first:first + width])
            Y = np.column_stack([y[starts[g]:ends[g]] for g in local])
            units.append(_ResampleUnit(block=b, raters=local, X=X[s0:e0], Y=Y))
    counts = _BlockCounts(rng.spawn(len(block_list)), units, n_boot)
    _resampled_intervals(units, counts, cue_groups, intervals, n_boot=n_boot, alpha=alpha,
                         method=method, r2=r2, imp=importance_r2,
                         n_imp=n_boot if n_boot_importance is None else min(n_boot_importance, n_boot))
    return intervals


def _resampled_intervals(units: list[_ResampleUnit], counts: _BlockCounts, cue_groups,
                         out: PolicyIntervals, *, n_boot: int, alpha: float, method: str,
                         r2: np.ndarray, imp: np.ndarray, n_imp: int) -> None:
    """BCa intervals for R_s and percentile intervals for the importance shares of every unit's raters.

    Units with the same number of raters are stacked along the resample axis,
    so many small blocks (raters who each saw their own cases) are solved in a
    few large batched calls instead of one call per rater.
    """
    n_terms = 16 + len(cue_groups)
    by_width: dict[int, list[_ResampleUnit]] = {}
    for unit in units:
        by_width.setdefault(unit.Y.shape[1], []).append(unit)
    options = {"n_boot": n_boot, "alpha": alpha, "method": method, "r2": r2, "imp": imp,
               "n_imp": n_imp}
    for width, members in sorted(by_width.items()):
        batch, size = [], 0
        for unit in members:
            batch.append(unit)
            size += (n_boot + unit.n_cases) * width * n_terms
            if size >= _CHUNK_ELEMENTS:
                _intervals_for_batch(batch, counts, cue_groups, out, **options)
                batch, size = [], 0
        if batch:
            _intervals_for_batch(batch, counts, cue_groups, out, **options)


def _batch_resampled_values(batch, counts: _BlockCounts, n_boot: int, n_imp: int, cue_groups,
                            method: str):
    """R^2 of every resample and leave-one-out row of a batch's units, (rows, R), and the cue
    importance of each unit's first ``n_imp`` resamples, (units * n_imp, R, k); both NaN
    where the resample left a cue or the judgments constant.

    Units with the same number of cases are stacked, a few at a time, so one matrix
    product serves several raters' blocks, and each stack's correlations go to R^2 and
    importance at once. With few raters per block (raters who read cases of their own)
    the stack is laid out with its systems last (:func:`_correlations_batch_last`), the
    layout of the eliminations that follow; the correlations of a whole batch (555
    raters x 1,200 rows of 8 x 8 matrices, 340 MB) were copied into one array, gathered
    again for the importance and transposed chunk by chunk before. Every system is solved
    by the same operations on the same numbers, so the values are the same.
    """
    rows = np.cumsum([0] + [n_boot + u.n_cases for u in batch])
    p, width = batch[0].X.shape[1], batch[0].Y.shape[1]
    all_r2 = np.empty((rows[-1], width))
    all_imp = np.empty((len(batch) * n_imp, width, len(cue_groups)))
    # Millions of small systems here: the elimination tree beats one solve per subset,
    # and where many raters share each resample's cue matrix (they read the same cases)
    # the quadratic forms built once per matrix beat both.
    shared = width >= SHARED_SOLVER_FROM
    pending = _PendingImportance(all_imp, n_imp, cue_groups, method)
    by_size: dict[int, list[int]] = {}
    for position, unit in enumerate(batch):
        by_size.setdefault(unit.n_cases, []).append(position)
    for n, positions in by_size.items():
        per_unit = (n_boot + n) * (n + p * p + p * width + 2 * width + p)
        step = max(1, _STACK_FLOATS // per_unit)
        for first in range(0, len(positions), step):
            chosen = positions[first:first + step]
            X = np.stack([batch[i].X for i in chosen])
            Y = np.stack([batch[i].Y for i in chosen])
            stacked = counts.stack([batch[i] for i in chosen])
            if shared:
                r2, imp = _stack_values_systems_first(X, Y, stacked, n_imp, cue_groups, method)
                for slot, i in enumerate(chosen):
                    all_imp[i * n_imp:(i + 1) * n_imp] = imp[slot]
            else:
                r2 = pending.add(chosen, *_correlations_batch_last(X, Y, stacked))
            for slot, i in enumerate(chosen):
                all_r2[rows[i]:rows[i + 1]] = r2[slot]
    pending.solve()
    return all_r2, all_imp


def _stack_values_systems_first(X, Y, counts, n_imp, cue_groups, method):
    """(U, N + n, R) R^2 and (U, n_imp, R, k) importance of a stack of wide units (many
    raters per block: the quadratic forms of the dominance weights)."""
    corr_xx, corr_xy, bad = weighted_correlations(X, Y, counts, leave_one_out=True)
    U, N, p, width = corr_xy.shape
    r2 = _resampled_r2(corr_xx.reshape(-1, p, p), corr_xy.reshape(-1, p, width))
    r2 = np.where(bad.reshape(-1, width), np.nan, np.clip(r2, 0.0, 1.0)).reshape(U, N, width)
    imp, _ = cue_importance(corr_xx[:, :n_imp].reshape(-1, p, p), corr_xy[:, :n_imp].reshape(-1, p, width),
                            cue_groups, method=method, solver="shared")
    imp = np.where(bad[:, :n_imp].reshape(-1, width)[:, :, None], np.nan, imp)
    return r2, imp.reshape(U, n_imp, width, -1)


class _PendingImportance:
    """The systems-last stacks of a batch: R^2 of each stack at once, the importance of
    several stacks' first ``n_imp`` resamples together, into ``out`` at each unit's
    position. The sweep of the dominance weights makes the same few hundred numpy calls
    per chunk whatever its number of systems, so a stack of eleven raters (2,750 systems, a third
    of one sweep chunk) swept alone cost about 1.5x on the linked 2,000-rater panel."""

    def __init__(self, out: np.ndarray, n_imp: int, cue_groups, method: str):
        self.out, self.n_imp, self.cue_groups, self.method = out, n_imp, cue_groups, method
        self.parts: list[tuple] = []
        self.held = 0

    def add(self, positions, corr_xx, corr_xy, bad) -> np.ndarray:
        """Hold a stack's importance systems; return its (U, N + n, R) R^2 (NaN where bad)."""
        p, width, U, N = corr_xy.shape
        r2 = _r2_batch_last(corr_xx.reshape(p, p, -1), corr_xy.reshape(p, width, -1))
        r2 = np.where(bad.reshape(width, -1), np.nan, np.clip(r2, 0.0, 1.0)).reshape(width, U, N)
        # The percentile interval of the shares needs no jackknife rows.
        n_imp = self.n_imp
        self.parts.append((list(positions), corr_xx[:, :, :, :n_imp], corr_xy[:, :, :, :n_imp],
                           bad[:, :, :n_imp]))
        self.held += U * n_imp
        if self.held >= _SWEEP_SYSTEMS:
            self.solve()
        return np.moveaxis(r2, 0, -1)

    def solve(self) -> None:
        if not self.parts:
            return
        p, width = self.parts[0][2].shape[:2]
        xx = np.concatenate([part[1].reshape(p, p, -1) for part in self.parts], axis=-1)
        xy = np.concatenate([part[2].reshape(p, width, -1) for part in self.parts], axis=-1)
        bad = np.concatenate([part[3].reshape(width, -1) for part in self.parts], axis=-1)
        if self.method == "dominance":
            imp = dominance_by_sweep_batch_last(xx, xy, self.cue_groups)
        else:
            imp, _ = cue_importance(np.moveaxis(xx, -1, 0), np.moveaxis(xy, -1, 0), self.cue_groups,
                                    method=self.method, solver="sweep")
        imp = np.where(bad.T[:, :, None], np.nan, imp)
        n_imp, at = self.n_imp, 0
        for part in self.parts:
            for i in part[0]:
                self.out[i * n_imp:(i + 1) * n_imp] = imp[at:at + n_imp]
                at += n_imp
        self.parts, self.held = [], 0


#: Systems per chunk of :func:`_resampled_r2` (300,000 systems of 8 cues: 0.23 s in chunks of
#: 2,048, 0.31 s by one solve per system, one thread on the shared machine).
_R2_CHUNK_SYSTEMS = 2_048


def _resampled_r2(corr_xx: np.ndarray, corr_xy: np.ndarray) -> np.ndarray:
    """``r' R^{-1} r`` of every resample, (N, R): :func:`r2_from_correlations`'s values.

    With one or a few raters per cue matrix (raters who read cases of their own) there are
    millions of p x p systems and LAPACK's call per system costs more than its arithmetic;
    there the columns are eliminated one by one across the whole stack (batch axis last,
    :func:`calibrate.policy.importance.eliminate_leading`), ``R^2`` adding
    ``r_{qy.S}^2 / r_{qq.S}`` at each. A system in which some column's remainder is at
    most the elimination's collinearity bound goes to :func:`r2_from_correlations`, so
    every system is decided as before.
    """
    N, p, R = corr_xy.shape
    if R >= SHARED_SOLVER_FROM or N == 0 or p == 0:
        return r2_from_correlations(corr_xx, corr_xy)
    out = np.empty((N, R))
    for first in range(0, N, _R2_CHUNK_SYSTEMS):
        part = slice(first, min(N, first + _R2_CHUNK_SYSTEMS))
        out[part] = _r2_of_chunk(np.ascontiguousarray(np.transpose(corr_xx[part], (1, 2, 0))),
                                 np.ascontiguousarray(np.transpose(corr_xy[part], (1, 2, 0)))).T
    return out


def _r2_batch_last(corr_xx: np.ndarray, corr_xy: np.ndarray) -> np.ndarray:
    """:func:`_resampled_r2` of systems laid out last, corr_xx (p, p, M) and corr_xy (p, R, M),
    as (R, M); the same eliminations on the same numbers, without the transposed copies."""
    M = corr_xy.shape[-1]
    out = np.empty(corr_xy.shape[1:])
    for first in range(0, M, _R2_CHUNK_SYSTEMS):
        part = slice(first, min(M, first + _R2_CHUNK_SYSTEMS))
        out[:, part] = _r2_of_chunk(corr_xx[:, :, part], corr_xy[:, :, part])
    return out


def _r2_of_chunk(xx: np.ndarray, xy: np.ndarray) -> np.ndarray:
    """(R, n) ``R^2`` of the systems xx (p, p, n), xy (p, R, n) by elimination, those with a
    column at the collinearity bound solved by :func:`r2_from_correlations` instead."""
    p = xx.shape[0]
    corr_xx, corr_xy = xx, xy
    explained = np.zeros(xy.shape[1:])
    smallest = np.full(xx.shape[2], np.inf)
    for _ in range(p):
        smallest = np.minimum(smallest, xx[0, 0])
        xx, xy, explained = eliminate_leading(xx, xy, explained)
    near = ~(smallest > COLLINEAR_REMAINDER)
    if near.any():
        explained[:, near] = r2_from_correlations(np.moveaxis(corr_xx[:, :, near], -1, 0),
                                                  np.moveaxis(corr_xy[:, :, near], -1, 0)).T
    return explained


def _intervals_for_batch(batch, counts: _BlockCounts, cue_groups, out: PolicyIntervals, *,
                         n_boot, alpha, method, r2, imp, n_imp):
    all_r2, all_imp = _batch_resampled_values(batch, counts, n_boot, n_imp, cue_groups, method)
    starts = np.cumsum([0] + [n_boot + u.n_cases for u in batch])[:-1]
    rows = np.concatenate([np.arange(s, s + n_imp) for s in starts])
    with np.errstate(invalid="ignore", divide="ignore"):
        all_shares = importance_shares(all_imp, all_r2[rows])
    # Every unit of one size at once: the intervals are column by column, so the raters
    # of many units (one each when raters read cases of their own) are columns of one call.
    by_cases: dict[int, list[int]] = {}
    for position, unit in enumerate(batch):
        by_cases.setdefault(unit.n_cases, []).append(position)
    for n_cases, positions in by_cases.items():
        chosen = np.array(positions)
        local = np.concatenate([batch[i].raters for i in positions])
        spans = starts[chosen][:, None]
        columns = lambda offsets: np.swapaxes(all_r2[spans + offsets], 0, 1).reshape(offsets.size, -1)
        boot_r2 = columns(np.arange(n_boot))
        jack_r2 = columns(n_boot + np.arange(n_cases))
        imp_spans = (n_imp * chosen)[:, None] + np.arange(n_imp)
        boot_shares = np.swapaxes(all_shares[imp_spans], 0, 1).reshape(n_imp, -1)
        with np.errstate(invalid="ignore", divide="ignore"):
            lo, hi = bca_interval(np.sqrt(r2[local]), np.sqrt(boot_r2), np.sqrt(jack_r2), alpha=alpha)
            share_hat = importance_shares(imp[local], r2[local]).ravel()
        k = share_hat.size // local.size
        s_lo, s_hi = percentile_interval(share_hat, boot_shares, alpha=alpha)
        out.r_low[local], out.r_high[local] = lo, hi
        out.share_low[local] = s_lo.reshape(local.size, k)
        out.share_high[local] = s_hi.reshape(local.size, k)
