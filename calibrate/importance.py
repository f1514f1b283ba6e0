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

from functools import lru_cache
from math import comb

import numpy as np

from .errors import CalibrateError

#: Above this many cues the 2**k subsets make dominance analysis too slow;
#: relative weights are used instead.
MAX_DOMINANCE_CUES = 12


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


@lru_cache(maxsize=None)
def dominance_matrix(n_cues: int) -> np.ndarray:
    """Linear map from the 2**k subset R^2 values to the k general dominance weights.

    For cue j, every subset S of the other cues contributes
    ``R^2(S + j) - R^2(S)`` with weight ``1 / (k * C(k-1, |S|))``: the average
    within each subset size, then the average over the k sizes (Azen & Budescu
    2003, eq. for general dominance). Returned read-only, shape (2**k, k).
    """
    size = np.array([bin(m).count("1") for m in range(2**n_cues)])
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
    corr_xx: np.ndarray, corr_xy: np.ndarray, cue_groups: list[list[int]]
) -> np.ndarray:
    """General dominance weights, (N, R, k); each row sums to the full-model R^2.

    .. math:: C_j = \\frac{1}{k} \\sum_{s=0}^{k-1} \\binom{k-1}{s}^{-1}
              \\sum_{|S|=s,\\, j \\notin S} \\left[R^2(S \\cup j) - R^2(S)\\right]

    See :func:`subset_r2` for the arguments.
    """
    n_cues = len(cue_groups)
    weights = dominance_matrix(n_cues)
    N, _, R = corr_xy.shape
    out = np.zeros((N, R, n_cues))
    # Accumulate a few subsets at a time, so memory grows with k, not with 2**k.
    masks = np.arange(1, 2**n_cues)
    for start in range(0, masks.size, 16):
        chunk = masks[start:start + 16]
        r2 = np.stack([_mask_r2(corr_xx, corr_xy, cue_groups, int(m)) for m in chunk], axis=-1)
        out += r2 @ weights[chunk]
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
) -> tuple[np.ndarray, str]:
    """Importance per cue in R^2 units, (N, R, k), and the method used.

    ``method`` is ``"dominance"``, ``"relative_weights"`` or ``"auto"`` (dominance
    up to :data:`MAX_DOMINANCE_CUES` cues, relative weights beyond).
    """
    if method == "auto":
        method = "dominance" if len(cue_groups) <= MAX_DOMINANCE_CUES else "relative_weights"
    if method == "dominance":
        return dominance_weights(corr_xx, corr_xy, cue_groups), method
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
