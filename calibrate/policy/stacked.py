"""Cholesky factors of a stack of small matrices, computed across the stack.

The bootstraps solve a million or more small (p x p, p about 10) systems at a time.
LAPACK is called once per matrix there, so most of the time goes to call overhead;
here each step of the factorisation is one array operation over all matrices, with
the stack on the last axis (shape (p, p, groups)) so that every step reads
contiguous rows.
"""

from __future__ import annotations

import numpy as np


def stacked_cholesky(R: np.ndarray) -> np.ndarray:
    """Lower Cholesky factors of ``R`` (p, p, groups), column by column; NaN or inf where
    a matrix is not positive definite. Only the lower triangle of ``R`` is read."""
    p = R.shape[0]
    L = np.zeros_like(R)
    with np.errstate(invalid="ignore", divide="ignore"):
        for j in range(p):
            L[j, j] = np.sqrt(R[j, j] - (L[j, :j] * L[j, :j]).sum(axis=0))
            if j + 1 < p:
                L[j + 1:, j] = (R[j + 1:, j] - (L[j + 1:, :j] * L[j, :j][None]).sum(axis=1)) / L[j, j]
    return L


def stacked_lower_inverse(L: np.ndarray) -> np.ndarray:
    """Inverses of the lower-triangular ``L`` (p, p, groups), row by row."""
    p = L.shape[0]
    M = np.zeros_like(L)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        for i in range(p):
            M[i, i] = 1.0 / L[i, i]
            for j in range(i):  # the lower triangle only: rows j..i-1 of column j
                M[i, j] = -np.einsum("kg,kg->g", L[i, j:i], M[j:i, j]) * M[i, i]
    return M


def surely_full_rank_inverse_factor(R: np.ndarray, candidate: np.ndarray,
                                    rcond: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """``(M, sure)``: ``M = L^-1`` for the Cholesky factor ``L`` of each correlation-scaled
    matrix of ``R`` (p, p, groups), and where the rank rule of
    :func:`calibrate.policy.linalg.ols_from_sscp` (``lambda_min > rcond * lambda_max``)
    holds for certain: ``1 / ||L^-1||_F^2 > rcond * trace(R)``, since
    ``lambda_min >= 1 / ||R^-1||_F >= 1 / ||L^-1||_F^2`` and ``lambda_max <= trace(R)``.
    Groups not ``sure`` (among ``candidate``) are near the line and go to that function,
    which decides them as ever. ``R^-1 = M' M``, so ``r' R^-1 s = (M r) . (M s)``."""
    M = stacked_lower_inverse(stacked_cholesky(R))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        frobenius = (M * M).sum(axis=(0, 1))
        trace = R[np.arange(R.shape[0]), np.arange(R.shape[0])].sum(axis=0)
        sure = candidate & np.isfinite(frobenius) & (1.0 / frobenius > rcond * trace)
    return M, sure


def scaled_cue_factor(S: np.ndarray, n: np.ndarray, p: int,
                      rcond: float = 1e-12) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The correlation-scaled cue system of every group of ``S`` (k, k, groups), the
    groups' centred SSCPs stacked last, with the cues in columns 0..p-1.

    Returns ``(M, sure, scale, candidate)``: ``M = L^-1`` of the scaled cue matrix where
    full rank is certain (``sure``, :func:`surely_full_rank_inverse_factor`); ``scale``
    each cue's root sum of squares (1 where a cue is constant or not finite, so that
    dividing by it is safe); ``candidate`` the groups with every cue varying and more
    cases than terms, of which those not ``sure`` sit near the rank line and need the
    careful path.
    """
    root = np.sqrt(S[np.arange(p), np.arange(p)])                      # (p, groups)
    ok_scale = np.all(root > 0, axis=0) & np.all(np.isfinite(root), axis=0)
    scale = np.where(ok_scale, root, 1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        R = np.where(ok_scale, S[:p, :p] / (scale[:, None] * scale[None, :]), 0.0)
    candidate = ok_scale & (n > p + 1)
    M, sure = surely_full_rank_inverse_factor(R, candidate, rcond)
    return M, sure, scale, candidate
