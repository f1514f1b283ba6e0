"""Relative importance of cues in a rater's policy.

Two measures, both batched over many regressions that share nothing but their
shape (raters, bootstrap resamples):

* **General dominance weights** (Budescu 1993; Azen & Budescu 2003): the gain in
  R^2 from adding a cue, averaged over all subsets of the other cues, first
  within each subset size and then over sizes. They sum to the full-model R^2.
  A categorical cue's dummy columns (and a cue's ``:missing`` indicator) enter
  and leave together, so importance is per cue, not per design column.
* **Relative weights** (Johnson 2000): the cues are replaced by their closest
  orthogonal counterparts; each cue's share of R^2 is recovered through the
  correlations between the cues and those counterparts. They also sum to R^2 and
  need no subsets, so they serve beyond :data:`MAX_DOMINANCE_CUES` cues and as a
  cross-check of the dominance weights below it.

Every function here works on correlation matrices, so it applies unchanged to a
single fit, to every rater of a panel, and to every bootstrap resample.

References
----------
.. [1] Budescu, D. V. (1993). Dominance analysis: A new approach to the problem
       of relative importance of predictors in multiple regression.
       Psychological Bulletin, 114, 542-551.
.. [2] Azen, R., & Budescu, D. V. (2003). The dominance analysis approach for
       comparing predictors in multiple regression. Psychological Methods, 8,
       129-148.
.. [3] Johnson, J. W. (2000). A heuristic method for estimating the relative
       weight of predictor variables in multiple regression. Multivariate
       Behavioral Research, 35, 1-19.
"""

from __future__ import annotations

from functools import cache
from math import comb

import numpy as np

from ..errors import CalibrateError

#: Above this many cues the 2**k subsets make dominance analysis too slow;
#: relative weights are used instead.
MAX_DOMINANCE_CUES = 12
#: The ways :func:`dominance_weights` can find the subset R^2 values.
SUBSET_SOLVERS = ("solve", "sweep", "shared")
#: Subset R^2 arrays held before they are folded into the dominance weights.
_SUBSETS_AT_ONCE = 16
#: Working-set bound (floats) of one chunk of the sweep solver.
_SWEEP_FLOATS = 2_000_000
#: A column whose variance left after the columns already in the model is below this
#: share of its own (it is collinear with them) adds nothing in the sweep solver.
COLLINEAR_REMAINDER = 1e-10


def r2_from_correlations(corr_xx: np.ndarray, corr_xy: np.ndarray) -> np.ndarray:
    """``r' R^{-1} r`` for stacked systems: corr_xx (N, s, s), corr_xy (N, s, R) -> (N, R).

    A singular block (a column constant in one resample) falls back to the
    pseudo-inverse, which still gives the right R^2 of the projection onto the
    span of the columns.
    """
    try:
        solution = np.linalg.solve(corr_xx, corr_xy)
    except np.linalg.LinAlgError:
        solution = np.linalg.pinv(corr_xx, hermitian=True) @ corr_xy
    return (corr_xy * solution).sum(axis=1)


def subset_r2(
    corr_xx: np.ndarray, corr_xy: np.ndarray, cue_groups: list[list[int]]
) -> np.ndarray:
    """R^2 of every subset of cues, for many regressions at once.

    Parameters
    ----------
    corr_xx : (N, p, p) correlation matrices of the design columns.
    corr_xy : (N, p, R) correlations of the design columns with R responses
        (R responses share each predictor matrix: raters who saw the same cases).
    cue_groups : design-column indices per cue; a cue's columns move together.

    Returns
    -------
    (N, R, 2**k) array; entry ``mask`` is the R^2 of the cues whose bits are set
    in ``mask`` (bit j = cue j), with ``R^2(empty) = 0``:

    .. math:: R^2(S) = r_S^\\top R_{SS}^{-1} r_S
    """
    N, _, R = corr_xy.shape
    out = np.zeros((N, 2 ** len(cue_groups), R))
    for mask in range(1, 2 ** len(cue_groups)):
        out[:, mask, :] = _mask_r2(corr_xx, corr_xy, cue_groups, mask)
    return np.swapaxes(out, 1, 2)


def _mask_r2(corr_xx, corr_xy, cue_groups, mask: int) -> np.ndarray:
    cols = [c for j, group in enumerate(cue_groups) if mask >> j & 1 for c in group]
    if not cols:
        return np.zeros((corr_xy.shape[0], corr_xy.shape[2]))
    idx = np.asarray(cols)
    return r2_from_correlations(corr_xx[:, idx[:, None], idx[None, :]], corr_xy[:, idx, :])


@cache
def dominance_matrix(n_cues: int) -> np.ndarray:
    """Linear map from the 2**k subset R^2 values to the k general dominance weights.

    For cue j, every subset S of the other cues contributes
    ``R^2(S + j) - R^2(S)`` with weight ``1 / (k * C(k-1, |S|))``: the average
    within each subset size, then the average over the k sizes (Azen & Budescu
    2003, eq. for general dominance). Returned read-only, shape (2**k, k).
    """
    size = np.array([m.bit_count() for m in range(2**n_cues)])
    matrix = np.zeros((2**n_cues, n_cues))
    for j in range(n_cues):
        bit = 1 << j
        without = np.array([m for m in range(2**n_cues) if not m & bit], dtype=np.intp)
        coef = 1.0 / (n_cues * np.array([comb(n_cues - 1, s) for s in size[without]]))
        matrix[without | bit, j] += coef
        matrix[without, j] -= coef
    matrix.setflags(write=False)
    return matrix


def dominance_weights(
    corr_xx: np.ndarray,
    corr_xy: np.ndarray,
    cue_groups: list[list[int]],
    *,
    solver: str = "solve",
) -> np.ndarray:
    """General dominance weights, (N, R, k); each row sums to the full-model R^2.

    .. math:: C_j = \\frac{1}{k} \\sum_{s=0}^{k-1} \\binom{k-1}{s}^{-1}
              \\sum_{|S|=s,\\, j \\notin S} \\left[R^2(S \\cup j) - R^2(S)\\right]

    See :func:`subset_r2` for the arguments. ``solver`` chooses how the 2**k
    subset R^2 values are found; both give the same numbers to rounding:

    ``"solve"``
        one batched linear solve per subset. Best for few, wide systems
        (many responses R sharing each matrix).
    ``"sweep"``
        the subsets are visited as a tree, each one elimination step from its
        parent (:func:`_dominance_by_sweep`). No LAPACK call per matrix, so it
        is many times faster for millions of small systems (a bootstrap over
        raters who each read their own cases).
    ``"shared"``
        each weight as a quadratic form in the correlations with the cues,
        ``C_j = r' M_j r``, with ``M_j`` built once per predictor matrix from the
        inverses of its subset blocks (:func:`_dominance_by_shared_matrix`). The work
        per response is a few products of p x p matrices whatever the number of
        subsets, so it is the fastest when many responses share each matrix (a
        bootstrap of raters who read the same cases).
    """
    if solver not in SUBSET_SOLVERS:
        raise CalibrateError(
            f"The 'solver' option of dominance_weights must be one of {SUBSET_SOLVERS}; "
            f"got {solver!r}."
        )
    n_cues = len(cue_groups)
    weights = dominance_matrix(n_cues)
    N, _, R = corr_xy.shape
    if solver == "sweep":
        return _dominance_by_sweep(corr_xx, corr_xy, cue_groups, weights)
    if solver == "shared":
        return _dominance_by_shared_matrix(corr_xx, corr_xy, cue_groups, weights)
    out = np.zeros((N, R, n_cues))
    # Accumulate a few subsets at a time, so memory grows with k, not with 2**k.
    masks = np.arange(1, 2**n_cues)
    for start in range(0, masks.size, _SUBSETS_AT_ONCE):
        chunk = masks[start:start + _SUBSETS_AT_ONCE]
        r2 = np.stack([_mask_r2(corr_xx, corr_xy, cue_groups, int(m)) for m in chunk], axis=-1)
        out += r2 @ weights[chunk]
    return out


def _dominance_by_sweep(corr_xx, corr_xy, cue_groups, weights) -> np.ndarray:
    """Dominance weights with the subset R^2 values found by a tree of eliminations.

    Every subset S of cues is reached from S minus its last cue j by eliminating
    j's columns (Gaussian elimination, i.e. the sweep of Beaton 1964 on the
    correlation matrix; from memory). After eliminating the columns of S, the
    remaining block is the partial correlation structure given S, and one more
    column c adds

    .. math:: R^2(S \\cup c) = R^2(S) + \\frac{r_{cy \\cdot S}^2}{r_{cc \\cdot S}}

    Only the columns of cues after j are carried down the tree, so the work per
    subset shrinks as the tree deepens. A column whose remaining variance is
    under 1e-10 (collinear with the columns already in) adds nothing, as with
    a pseudo-inverse. Matrices are laid out with the batch axis last, so every
    step is one contiguous elementwise operation over all N systems; N is taken
    in chunks that keep the working set near :data:`_SWEEP_FLOATS` floats.
    """
    N, p, R = corr_xy.shape
    labels, used, rows = _sweep_plan(p, R, cue_groups)
    out = np.empty((N, R, len(cue_groups)))
    for first in range(0, N, rows):
        part = slice(first, min(N, first + rows))
        xx = np.ascontiguousarray(np.transpose(corr_xx[part][:, used][:, :, used], (1, 2, 0)))
        xy = np.ascontiguousarray(np.transpose(corr_xy[part][:, used, :], (1, 2, 0)))
        out[part] = _sweep_chunk(xx, xy, labels, weights)
    return out


def dominance_by_sweep_batch_last(corr_xx: np.ndarray, corr_xy: np.ndarray,
                                  cue_groups: list[list[int]]) -> np.ndarray:
    """:func:`dominance_weights` with ``solver="sweep"`` for systems laid out last: corr_xx
    (p, p, M) and corr_xy (p, R, M) give (M, R, k), the same numbers (the same eliminations
    on the same values, without transposing each chunk first)."""
    p, R, M = corr_xy.shape
    labels, used, rows = _sweep_plan(p, R, cue_groups)
    weights = dominance_matrix(len(cue_groups))
    in_order = used.size == p and bool((used == np.arange(p)).all())
    out = np.empty((M, R, len(cue_groups)))
    for first in range(0, M, rows):
        part = slice(first, min(M, first + rows))
        xx, xy = corr_xx[:, :, part], corr_xy[:, :, part]
        if not in_order:
            xx, xy = xx[used][:, used], xy[used]
        out[part] = _sweep_chunk(xx, xy, labels, weights)
    return out


def _sweep_plan(p: int, R: int, cue_groups) -> tuple[np.ndarray, np.ndarray, int]:
    """The sweep's columns in cue order, their cues, and the systems per chunk."""
    cue_of_column = np.full(p, -1)
    for j, cols in enumerate(cue_groups):
        cue_of_column[cols] = j
    used = np.flatnonzero(cue_of_column >= 0)
    used = used[np.argsort(cue_of_column[used], kind="stable")]
    held = sum(c * c for c in range(1, used.size + 1)) + (used.size + _SUBSETS_AT_ONCE + 2) * R
    return cue_of_column[used], used, max(1, _SWEEP_FLOATS // held)


def _sweep_chunk(xx, xy, labels, weights) -> np.ndarray:
    """(n, R, k) dominance weights of the systems xx (c, c, n), xy (c, R, n), columns in cue order."""
    walk = _SubsetWalk(weights.shape[1], weights, xy.shape[1:])
    walk.visit(0, -1, labels, xx, xy, np.zeros(xy.shape[1:]))
    walk.flush()
    return np.transpose(walk.total, (2, 1, 0))


class _SubsetWalk:
    """Depth-first walk over the subsets of cues, folding each R^2 into the dominance weights."""

    def __init__(self, n_cues: int, weights: np.ndarray, shape: tuple[int, int]):
        self.n_cues = n_cues
        self.fold = _SubsetFold(weights, shape)       # total (k, R, N)

    @property
    def total(self) -> np.ndarray:
        return self.fold.total

    def flush(self) -> None:
        self.fold.flush()

    def visit(self, mask, last_cue, labels, xx, xy, explained) -> None:
        """Extend ``mask``, whose highest cue is ``last_cue``, by each later cue.

        ``labels`` gives the cue of each column still carried (the columns of
        the cues after ``last_cue``, sorted by cue); ``xx`` (c, c, N) and ``xy``
        (c, R, N) are their correlations given the cues in ``mask``, and
        ``explained`` (R, N) is R^2(mask).
        """
        # The carried columns are sorted by cue, so a cue's columns and those after it are
        # a trailing block: slices, not gathered copies.
        start = 0
        for cue in range(last_cue + 1, self.n_cues):
            n_pivots = int((labels == cue).sum())
            cxx, cxy, cexp = xx[start:, start:], xy[start:], explained
            for _ in range(n_pivots):
                cxx, cxy, cexp = eliminate_leading(cxx, cxy, cexp)
            start += n_pivots
            child = mask | 1 << cue
            self.fold.record(child, cexp)
            if cue + 1 < self.n_cues:
                self.visit(child, cue, labels[labels > cue], cxx, cxy, cexp)


def eliminate_leading(xx, xy, explained):
    """Take column 0 into the model; return the state of the other columns.

    ``xx`` (c, c, N), ``xy`` (c, R, N) are correlations given the columns already in,
    ``explained`` (R, N) their R^2:

    .. math:: r_{ab \cdot q} = r_{ab} - r_{aq} r_{qb} / r_{qq}, \qquad
              R^2 \mathrel{+}= r_{qy}^2 / r_{qq}

    A column whose remainder ``r_qq`` is at most :data:`COLLINEAR_REMAINDER` adds nothing.
    """
    remainder = xx[0, 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse = np.where(remainder <= COLLINEAR_REMAINDER, 0.0, 1.0 / remainder)
    explained = explained + xy[0] ** 2 * inverse
    scaled = xx[0, 1:] * inverse                                         # (c', N)
    xx_next = xx[1:, 1:] - xx[1:, 0][:, None, :] * scaled[None, :, :]
    xy_next = xy[1:] - scaled[:, None, :] * xy[0][None, :, :]
    return xx_next, xy_next, explained


def _dominance_by_shared_matrix(corr_xx, corr_xy, cue_groups, weights) -> np.ndarray:
    """Dominance weights as quadratic forms, for many responses sharing each matrix.

    ``R^2(S) = r' P_S r`` with ``P_S`` the inverse of the subset block ``R_SS`` set
    into a p x p matrix of zeros, and the dominance weights are linear in the subset
    R^2 values (:func:`dominance_matrix`, entries ``w_{S,j}``), so

    .. math:: C_j = r^\top M_j\, r, \qquad M_j = \sum_S w_{S,j} P_S

    ``M_j`` depends on the predictor matrix alone. The ``P_S`` come from the same tree
    of eliminations as :func:`_dominance_by_sweep`, here carried on the whole matrix
    (the sweep operator, whose swept block holds ``-R_SS^{-1}``), with the same rule
    for a collinear column (it adds nothing). Batch axis last, as there.
    """
    N, p, R = corr_xy.shape
    n_cues = len(cue_groups)
    cue_of_column = np.full(p, -1)
    for j, cols in enumerate(cue_groups):
        cue_of_column[cols] = j
    columns_of = [np.array(sorted(cols), dtype=np.intp) for cols in cue_groups]
    forms = np.empty((N, n_cues, p, p))
    rows = max(1, _SWEEP_FLOATS // ((n_cues + _SUBSETS_AT_ONCE + 1) * p * p))
    for first in range(0, N, rows):
        part = slice(first, min(N, first + rows))
        swept = np.ascontiguousarray(np.transpose(corr_xx[part], (1, 2, 0)))   # (p, p, n)
        fold = _SubsetFold(weights, swept.shape)
        _sweep_subsets(0, -1, n_cues, columns_of, swept, np.zeros(p), fold)
        fold.flush()
        forms[part] = np.transpose(fold.total, (3, 0, 1, 2))
    out = np.empty((N, R, n_cues))
    rows = max(1, _SWEEP_FLOATS // (n_cues * p * R))   # bounds the (n, k, p, R) products
    for first in range(0, N, rows):
        part = slice(first, min(N, first + rows))
        xy = corr_xy[part]                                                  # (n, p, R)
        left = np.matmul(forms[part].reshape(-1, n_cues * p, p), xy).reshape(-1, n_cues, p, R)
        out[part] = np.einsum("nkpr,npr->nrk", left, xy)
    return out


class _SubsetFold:
    """Folds a value per subset (its R^2 per system, or its embedded inverse ``P_S``) into
    the dominance weights' sums ``sum_S w_{S,j} value_S``, a few subsets at a time."""

    def __init__(self, weights: np.ndarray, shape: tuple[int, ...]):
        self.weights = weights
        self.total = np.zeros((weights.shape[1], *shape))   # (k, *shape)
        self.pending_masks: list[int] = []
        self.pending: list[np.ndarray] = []

    def record(self, mask: int, value: np.ndarray) -> None:
        self.pending_masks.append(mask)
        self.pending.append(value)
        if len(self.pending_masks) == _SUBSETS_AT_ONCE:
            self.flush()

    def flush(self) -> None:
        if not self.pending_masks:
            return
        coef = self.weights[np.array(self.pending_masks)]       # (s, k)
        self.total += np.tensordot(coef.T, np.stack(self.pending), axes=1)
        self.pending_masks, self.pending = [], []


def _sweep_subsets(mask, last_cue, n_cues, columns_of, swept, taken, fold) -> None:
    """Depth-first over the subsets extending ``mask`` by later cues, ``swept`` (p, p, n)
    being the matrix with the columns ``taken`` (those of ``mask``) swept."""
    for cue in range(last_cue + 1, n_cues):
        child, child_taken = swept, taken.copy()
        for column in columns_of[cue]:
            child = _sweep_column(child, column)
            child_taken[column] = 1.0
        # the swept block is -R_SS^{-1}; the rest of the matrix is not part of P_S
        fold.record(mask | 1 << cue, child * -(child_taken[:, None, None] * child_taken[None, :, None]))
        if cue + 1 < n_cues:
            _sweep_subsets(mask | 1 << cue, cue, n_cues, columns_of, child, child_taken, fold)


def _sweep_column(swept: np.ndarray, q: int) -> np.ndarray:
    """The sweep operator on column ``q`` of every system (batch axis last):

    .. math:: a_{qq} \to -1/a_{qq}, \quad a_{iq}, a_{qj} \to a_{iq}/a_{qq}, a_{qj}/a_{qq},
              \quad a_{ij} \to a_{ij} - a_{iq} a_{qj} / a_{qq}

    after which the block of the swept columns holds ``-R_SS^{-1}`` (Goodnight 1979;
    from memory). Where the column's remainder (its variance left after the columns
    already swept) is at most :data:`COLLINEAR_REMAINDER`, it is not swept and its row
    and column are set to zero instead: later sweeps keep them zero, so the column adds
    nothing to any inverse, the rule of :func:`eliminate_leading`.
    """
    remainder = swept[q, q]
    took = remainder > COLLINEAR_REMAINDER
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse = np.where(took, 1.0 / remainder, 0.0)
    column = swept[:, q] * inverse                      # (p, n): a_iq / a_qq
    out = swept - column[:, None, :] * swept[q][None, :, :]
    out[q] = column
    out[:, q] = column
    out[q, q] = -inverse
    return out


def relative_weights(
    corr_xx: np.ndarray, corr_xy: np.ndarray, cue_groups: list[list[int]]
) -> np.ndarray:
    """Johnson's (2000) relative weights, (N, R, k); each row sums to R^2.

    With the symmetric square root :math:`\\Lambda = R_{xx}^{1/2}` (the
    correlations between the design columns and their orthonormal
    counterparts Z) and :math:`\\beta = \\Lambda^{-1} r_{xy}` (the weights of y on
    Z), column j gets :math:`\\varepsilon_j = \\sum_k \\Lambda_{jk}^2 \\beta_k^2`.
    A cue with several design columns gets the sum over its columns (summing is
    common practice for sets of columns; no source checked).
    """
    evals, evecs = np.linalg.eigh(corr_xx)
    evals = np.clip(evals, 0.0, None)
    root = np.einsum("nij,nj,nkj->nik", evecs, np.sqrt(evals), evecs)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_root = np.einsum(
            "nij,nj,nkj->nik", evecs, np.where(evals > 0, 1.0 / np.sqrt(evals), 0.0), evecs
        )
    beta = inv_root @ corr_xy  # (N, p, R)
    per_column = np.swapaxes((root**2) @ (beta**2), 1, 2)  # (N, R, p)
    return np.stack([per_column[:, :, g].sum(axis=2) for g in cue_groups], axis=2)


def cue_importance(
    corr_xx: np.ndarray,
    corr_xy: np.ndarray,
    cue_groups: list[list[int]],
    *,
    method: str = "auto",
    solver: str = "solve",
) -> tuple[np.ndarray, str]:
    """Importance per cue in R^2 units, (N, R, k), and the method used.

    ``method`` is ``"dominance"``, ``"relative_weights"`` or ``"auto"`` (dominance
    up to :data:`MAX_DOMINANCE_CUES` cues, relative weights beyond). ``solver``
    is passed to :func:`dominance_weights`.
    """
    if method == "auto":
        method = "dominance" if len(cue_groups) <= MAX_DOMINANCE_CUES else "relative_weights"
    if method == "dominance":
        return dominance_weights(corr_xx, corr_xy, cue_groups, solver=solver), method
    if method == "relative_weights":
        return relative_weights(corr_xx, corr_xy, cue_groups), method
    raise CalibrateError(
        f"The 'method' option of cue_importance must be one of 'auto', 'dominance', "
        f"'relative_weights'; got {method!r}."
    )


def importance_shares(importance_r2: np.ndarray, r2: np.ndarray) -> np.ndarray:
    """Importance as shares of R^2 (sum to 1); NaN where R^2 is not positive."""
    r2 = np.asarray(r2, dtype=float)[..., None]
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(r2 > 0, importance_r2 / r2, np.nan)
