"""Capture each rater's policy: the regression of their judgments on the cues.

One call, :func:`fit_policies`, fits every rater of one phase. Nothing loops over
raters with a model library: one pass over the long table builds every rater's
centred sums of squares and cross-products, and all raters are solved in one
batched call (:mod:`calibrate.linalg`). The bootstrap treats a resample as a
vector of counts over cases; raters who saw the same cases share it, so they
share the resampled cue cross-products and only their judgments differ.

Per rater it reports the policy (intercept, raw weights with SE, 95% CI and
p-value, standardized weights, cue utilization and structure coefficients),
consistency R_s = sqrt(R^2) with a bias-corrected (BCa) bootstrap interval,
adjusted R^2, the exact leave-one-out cross-validated r, relative importance
per cue (:mod:`calibrate.importance`) with BCa intervals for the shares,
diagnostics (:mod:`calibrate.diagnostics`) and, for binary decisions, a logistic
fit that gives the weights in odds terms and Tjur's R^2.

Flags (fixed identifiers):

``not_fitted``
    No policy could be fitted (fewer usable cases than weights + 2, constant
    judgments, or cues perfectly collinear in this rater's cases).
``few_cases``
    Fewer than 10 cases per estimated weight (rule of thumb; see diagnostics).
``collinear_cues``
    Some cue's GVIF^(1/df) above 10 or condition number above 30.
``curvature``
    RESET p-value, Holm-adjusted across the raters of the phase, below ``alpha``.
``inconsistent``
    The upper end of the rater's interval for R_s is below ``inconsistent_below``
    (default 0.70), or, in a panel of at least five fitted raters, below the
    median of the other raters' lower ends: the rater's interval lies wholly
    under that of a typical panel member. The bound 0.70 is our own choice, set under the mean
    R_s of about .80 reported across 249 judgment tasks by Karelaia & Hogarth
    (2008) (figure from memory).
``separation``
    Binary decisions that the cues predict perfectly: logistic weights are
    infinite and not reported.

References
----------
.. [1] Efron, B. (1987). Better bootstrap confidence intervals. JASA, 82,
       171-185 (BCa interval).
.. [2] Tjur, T. (2009). Coefficients of determination in logistic regression
       models. The American Statistician, 63, 366-372.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import special
from scipy import stats as sps

from . import diagnostics as dg
from ._results import ResultMixin, jsonable
from .cues import CueDesign
from .errors import CalibrateError, DataError, DataProblem
from .importance import (
    MAX_DOMINANCE_CUES,
    cue_importance,
    importance_shares,
    r2_from_correlations,
    relative_weights,
)
from .linalg import GroupedSSCP, grouped_sscp, ols_from_sscp

POLICIES_SCHEMA = "calibrate.policies/1"
SCALES = ("continuous", "ordinal", "binary")
N_LOOK_AGAIN = 5
#: Bound the float count of one bootstrap chunk (resamples x raters x subsets).
_CHUNK_ELEMENTS = 16_000_000


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class LogisticPolicy(ResultMixin):
    """Logistic fit of a binary decision: weights in log-odds, odds ratios, Tjur's R^2."""

    intercept: float
    weights: dict[str, float]
    se: dict[str, float]
    odds_ratios: dict[str, float]
    p_value: dict[str, float]
    tjur_r2: float
    converged: bool
    separation: bool


@dataclass(frozen=True)
class CaseToReview(ResultMixin):
    """A case far from the rater's own policy."""

    case: str
    judgment: float
    predicted: float           # the rater's policy, fitted on all their cases
    predicted_without: float   # the policy fitted without this case
    residual: float
    studentized: float


@dataclass(frozen=True)
class RaterPolicy(ResultMixin):
    """One rater's captured policy for one phase.

    ``weights``-like mappings are keyed by design column (a categorical cue's
    dummies are ``cue=level``); ``importance``-like mappings by cue.
    """

    rater: str
    n_cases: int
    intercept: float
    intercept_se: float
    weights: dict[str, float]
    se: dict[str, float]
    ci_low: dict[str, float]
    ci_high: dict[str, float]
    p_value: dict[str, float]
    std_weights: dict[str, float]
    utilization: dict[str, float]
    structure: dict[str, float]
    r: float
    r_ci: tuple[float, float]
    r2: float
    r2_adj: float
    r_cv: float
    importance: dict[str, float]
    importance_r2: dict[str, float]
    importance_ci: dict[str, tuple[float, float]]
    importance_method: str
    relative_weights_r2: dict[str, float]
    cases_per_weight: float
    vif: dict[str, float]
    gvif: dict[str, float]
    condition_number: float
    reset: dict[str, float]
    look_again: tuple[CaseToReview, ...]
    logistic: LogisticPolicy | None
    flags: tuple[str, ...]
    warnings: tuple[str, ...]

    def policy_dict(self) -> dict:
        """The ``raters[].policy`` block of results.json (DESIGN.md keys first)."""
        pair = lambda lo, hi: [lo, hi]  # noqa: E731 - JSON wants lists for intervals
        block = {
            "intercept": self.intercept,
            "weights": self.weights,
            "std_weights": self.std_weights,
            "importance": self.importance,
            "importance_r2": self.importance_r2,
            "r": self.r,
            "r_ci": list(self.r_ci),
            "r2_adj": self.r2_adj,
            "r_cv": self.r_cv,
            "r2": self.r2,
            "n_cases": self.n_cases,
            "intercept_se": self.intercept_se,
            "se": self.se,
            "ci": {c: pair(self.ci_low[c], self.ci_high[c]) for c in self.weights},
            "p_value": self.p_value,
            "utilization": self.utilization,
            "structure": self.structure,
            "importance_ci": {c: list(v) for c, v in self.importance_ci.items()},
            "importance_method": self.importance_method,
            "relative_weights_r2": self.relative_weights_r2,
            "cases_per_weight": self.cases_per_weight,
            "vif": self.vif,
            "gvif": self.gvif,
            "condition_number": self.condition_number,
            "reset": self.reset,
            "look_again": [c.to_dict() for c in self.look_again],
            "logistic": None if self.logistic is None else self.logistic.to_dict(),
        }
        return jsonable(block)

    def to_dict(self) -> dict:
        return {
            "rater": self.rater,
            "n_cases": self.n_cases,
            "policy": self.policy_dict(),
            "flags": list(self.flags),
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class PolicySet(ResultMixin):
    """The captured policies of every rater in one phase."""

    raters: tuple[RaterPolicy, ...]
    columns: tuple[str, ...]
    cue_of_column: tuple[str, ...]
    cues: tuple[str, ...]
    scale: str
    n_boot: int
    alpha: float
    warnings: tuple[str, ...] = field(default=())

    def __getitem__(self, rater: str) -> RaterPolicy:
        for policy in self.raters:
            if policy.rater == rater:
                return policy
        raise KeyError(rater)

    def to_dict(self) -> dict:
        return {
            "scale": self.scale,
            "n_boot": self.n_boot,
            "alpha": self.alpha,
            "columns": list(self.columns),
            "cues": list(self.cues),
            "raters": [p.to_dict() for p in self.raters],
            "warnings": list(self.warnings),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per rater: consistency, fit diagnostics and flags."""
        rows = [
            {
                "rater": p.rater, "n_cases": p.n_cases, "intercept": p.intercept,
                "r": p.r, "r_ci_low": p.r_ci[0], "r_ci_high": p.r_ci[1], "r2": p.r2,
                "r2_adj": p.r2_adj, "r_cv": p.r_cv, "cases_per_weight": p.cases_per_weight,
                "condition_number": p.condition_number, "reset_p_value": p.reset["p_value"],
                "reset_p_adjusted": p.reset["p_adjusted"],
                "tjur_r2": np.nan if p.logistic is None else p.logistic.tjur_r2,
                "flags": ";".join(p.flags),
            }
            for p in self.raters
        ]
        return pd.DataFrame(rows)

    def columns_frame(self) -> pd.DataFrame:
        """One row per rater x design column: weights with SE, CI, and related figures."""
        rows = []
        for p in self.raters:
            for c, cue in zip(self.columns, self.cue_of_column):
                rows.append({
                    "rater": p.rater, "column": c, "cue": cue, "estimate": p.weights[c],
                    "se": p.se[c], "ci_low": p.ci_low[c], "ci_high": p.ci_high[c],
                    "p_value": p.p_value[c], "std_weight": p.std_weights[c],
                    "utilization": p.utilization[c], "structure": p.structure[c],
                    "vif": p.vif[c],
                    "odds_ratio": np.nan if p.logistic is None else p.logistic.odds_ratios[c],
                })
        return pd.DataFrame(rows)

    def cues_frame(self) -> pd.DataFrame:
        """One row per rater x cue: relative importance with its interval, and GVIF."""
        rows = [
            {
                "rater": p.rater, "cue": cue, "importance": p.importance[cue],
                "ci_low": p.importance_ci[cue][0], "ci_high": p.importance_ci[cue][1],
                "importance_r2": p.importance_r2[cue],
                "relative_weight_r2": p.relative_weights_r2[cue], "gvif": p.gvif[cue],
                "method": p.importance_method,
            }
            for p in self.raters for cue in self.cues
        ]
        return pd.DataFrame(rows)


# --------------------------------------------------------------------------- BCa


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


# --------------------------------------------------------------------------- resampled fits


def _weighted_correlations(
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


@dataclass
class _ResampleUnit:
    """Raters who saw the same cases, with the bootstrap and jackknife count vectors."""

    raters: np.ndarray     # indices into the full rater arrays
    raters_local: np.ndarray  # indices into the pattern's arrays (r2, imp)
    X: np.ndarray
    Y: np.ndarray
    counts: np.ndarray     # (n_boot + n, n): bootstrap rows, then jackknife rows
    n_boot: int


def _resampled_intervals(units: list[_ResampleUnit], cue_groups, cue_cols, A: _Arrays, *,
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
                _intervals_for_batch(batch, cue_groups, cue_cols, A, alpha=alpha, method=method,
                                     r2=r2, imp=imp)
                batch, size = [], 0
        if batch:
            _intervals_for_batch(batch, cue_groups, cue_cols, A, alpha=alpha, method=method,
                                 r2=r2, imp=imp)


def _intervals_for_batch(batch, cue_groups, cue_cols, A: _Arrays, *, alpha, method, r2, imp):
    parts = [_weighted_correlations(u.X, u.Y, u.counts) for u in batch]
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
        local = unit.raters_local
        with np.errstate(invalid="ignore", divide="ignore"):
            lo, hi = bca_interval(np.sqrt(r2[local]), np.sqrt(all_r2[boot]),
                                  np.sqrt(all_r2[jack]), alpha=alpha)
            shares = importance_shares(all_imp, all_r2)
            share_hat = importance_shares(imp[local], r2[local]).ravel()
        k = share_hat.size // local.size
        s_lo, s_hi = bca_interval(share_hat, shares[boot].reshape(unit.n_boot, -1),
                                  shares[jack].reshape(stop - start - unit.n_boot, -1), alpha=alpha)
        A.r_lo[unit.raters], A.r_hi[unit.raters] = lo, hi
        A.imp_lo[np.ix_(unit.raters, cue_cols)] = s_lo.reshape(local.size, k)
        A.imp_hi[np.ix_(unit.raters, cue_cols)] = s_hi.reshape(local.size, k)
        start = stop


# --------------------------------------------------------------------------- preparation


@dataclass(frozen=True)
class _Rows:
    """Usable first judgments, sorted by rater then design row."""

    raters: tuple[str, ...]   # every rater in ``first`` (sorted)
    group: np.ndarray         # (m,) rater index per row
    case_row: np.ndarray      # (m,) design row per row
    y: np.ndarray             # (m,) judgment (0/1 for binary)
    dropped: np.ndarray       # (G,) rows dropped per rater (missing judgment or cue)


def _prepare(design: CueDesign, first: pd.DataFrame, scale: str,
             scale_min: float | None, scale_max: float | None) -> _Rows:
    missing = [c for c in ("rater", "case", "judgment") if c not in first.columns]
    if missing:
        raise DataError(
            f"The first-judgment table lacks column(s) {missing}; it needs rater, case, "
            f"judgment (available: {', '.join(map(str, first.columns))})."
        )
    rater_names = first["rater"].astype(str).to_numpy()
    case_names = first["case"].astype(str).to_numpy()
    index = {c: i for i, c in enumerate(design.case_ids)}
    rows = np.array([index.get(c, -1) for c in case_names], dtype=np.intp)
    if (rows < 0).any():
        unknown = sorted(set(case_names[rows < 0]))
        raise DataError([DataProblem(
            f"Case '{c}' has judgments but no row in the cue design; add its cues to the "
            f"cases table.", column="case") for c in unknown])
    y = pd.to_numeric(first["judgment"], errors="coerce").to_numpy(dtype=float)
    if scale == "binary":
        y = _binary_judgments(y, scale_min, scale_max)
    raters, group = np.unique(rater_names, return_inverse=True)
    usable = np.isfinite(y) & ~np.isnan(design.matrix[rows]).any(axis=1)
    dropped = np.bincount(group[~usable], minlength=raters.size)
    order = np.lexsort((rows[usable], group[usable]))
    return _Rows(
        raters=tuple(str(r) for r in raters),
        group=group[usable][order],
        case_row=rows[usable][order],
        y=y[usable][order],
        dropped=dropped,
    )


def _binary_judgments(y: np.ndarray, scale_min: float | None, scale_max: float | None) -> np.ndarray:
    low = 0.0 if scale_min is None else float(scale_min)
    high = 1.0 if scale_max is None else float(scale_max)
    seen = np.unique(y[np.isfinite(y)])
    odd = seen[(seen != low) & (seen != high)]
    if odd.size:
        raise DataError(
            f"A binary judgment must be {low:g} or {high:g}; found {', '.join(f'{v:g}' for v in odd[:5])}. "
            f"Set [judgment] min and max to the two values used, or map words with labels."
        )
    return np.where(np.isfinite(y), (y == high).astype(float), np.nan)


# --------------------------------------------------------------------------- logistic


def _logistic_batched(X: np.ndarray, y: np.ndarray, groups: np.ndarray, n_groups: int,
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


# --------------------------------------------------------------------------- main


@dataclass
class _Arrays:
    """Working arrays for all raters (full column / cue space, NaN = not estimated)."""

    G: int
    p: int
    k: int

    def __post_init__(self):
        G, p, k = self.G, self.p, self.k
        nan = lambda *shape: np.full(shape, np.nan)  # noqa: E731
        self.n = np.zeros(G)
        for name in ("intercept", "intercept_se", "r2", "r2_adj", "r_cv", "cond",
                     "reset_f", "reset_p", "r_lo", "r_hi", "lg_intercept", "tjur"):
            setattr(self, name, nan(G))
        for name in ("coef", "se", "p_value", "ci_low", "ci_high", "std", "util", "vif",
                     "lg_coef", "lg_se", "lg_p"):
            setattr(self, name, nan(G, p))
        for name in ("imp_r2", "rw_r2", "imp_lo", "imp_hi"):
            setattr(self, name, nan(G, k))
        self.gvif = nan(G, k)
        self.lg_converged = np.zeros(G, dtype=bool)
        self.lg_separation = np.zeros(G, dtype=bool)
        self.fitted = np.zeros(G, dtype=bool)
        self.look_again: list[list[CaseToReview]] = [[] for _ in range(G)]
        self.notes: list[list[str]] = [[] for _ in range(G)]


def fit_policies(
    design: CueDesign,
    first: pd.DataFrame,
    *,
    scale: str,
    scale_min: float | None = None,
    scale_max: float | None = None,
    n_boot: int = 1000,
    rng: np.random.Generator | int | None = None,
    alpha: float = 0.05,
    importance_method: str = "auto",
    inconsistent_below: float = 0.70,
) -> PolicySet:
    """Fit every rater's policy in one phase, with intervals and diagnostics.

    Parameters
    ----------
    design : the cue design over cases (:func:`calibrate.cues.build_cue_design`).
    first : long table with columns ``rater``, ``case``, ``judgment``: each rater's
        first judgment of each case. Raters may each see a different subset of cases.
    scale : ``"continuous"``, ``"ordinal"`` or ``"binary"``. Binary judgments
        (``scale_min`` = decline, ``scale_max`` = admit; default 0 and 1) get the
        linear probability model for R_s and importance plus a logistic fit.
    n_boot : bootstrap resamples over each rater's cases (0 skips intervals).
    rng : seed or generator; the same seed gives identical numbers.
    alpha : 1 - confidence level of every interval, and the level of flags.
    importance_method : ``"auto"`` (dominance weights up to 12 cues, Johnson's
        relative weights beyond), ``"dominance"`` or ``"relative_weights"``.
    inconsistent_below : R_s bound for the ``inconsistent`` flag (see module doc).

    Returns
    -------
    PolicySet

    Raises
    ------
    DataError
        Missing columns, judgments on cases absent from the design, or binary
        judgments other than the two scale values.
    CalibrateError
        An option out of range.

    Notes
    -----
    Weights and SEs are ordinary least squares, solved from centred, scaled
    cross-products (NIST Longley reproduced to 10+ significant digits). R_s is
    :math:`\\sqrt{R^2}`; adjusted :math:`R^2 = 1 - (1-R^2)(n-1)/(n-p-1)`; the
    cross-validated r correlates the judgments with the exact leave-one-out
    predictions :math:`y_i - e_i/(1-h_{ii})`. Standardized weights are
    :math:`b_j s_{x_j}/s_y`; utilization is :math:`r(y, x_j)`; structure
    coefficients are :math:`r(y, x_j)/R_s = r(\\hat y, x_j)`.
    """
    _check_options(scale, n_boot, alpha, importance_method)
    generator = np.random.default_rng(rng)
    rows = _prepare(design, first, scale, scale_min, scale_max)
    G, p, k = len(rows.raters), design.n_columns, len(design.cues)
    arrays = _Arrays(G, p, k)
    X_all = design.matrix[rows.case_row]
    arrays.n = np.bincount(rows.group, minlength=G).astype(float)
    for g in np.flatnonzero(rows.dropped):
        arrays.notes[g].append(
            f"{rows.dropped[g]} judgment(s) left out: missing judgment or a cue with the 'drop' rule."
        )
    method = importance_method
    if method == "auto":
        method = "dominance" if k <= MAX_DOMINANCE_CUES else "relative_weights"
    patterns = _column_patterns(X_all, rows, G, p)
    seeds = generator.spawn(len(patterns)) if patterns else []
    for (active, members), seed in zip(patterns, seeds):
        _fit_pattern(design, rows, X_all, np.asarray(active), members, arrays,
                     n_boot=n_boot, rng=seed, alpha=alpha, method=method)
    if scale == "binary":
        _fit_logistic(rows, X_all, arrays)
    return _assemble(design, rows, arrays, scale=scale, n_boot=n_boot, alpha=alpha,
                     method=method, inconsistent_below=inconsistent_below)


def _check_options(scale, n_boot, alpha, importance_method) -> None:
    if scale not in SCALES:
        raise CalibrateError(f"The 'scale' option of fit_policies must be one of {SCALES}; got {scale!r}.")
    if not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise CalibrateError(f"The 'n_boot' option of fit_policies must be an integer >= 0; got {n_boot!r}.")
    if not 0 < alpha < 1:
        raise CalibrateError(f"The 'alpha' option of fit_policies must be between 0 and 1; got {alpha!r}.")
    if importance_method not in ("auto", "dominance", "relative_weights"):
        raise CalibrateError(
            "The 'importance_method' option of fit_policies must be one of 'auto', "
            f"'dominance', 'relative_weights'; got {importance_method!r}."
        )


def _column_patterns(X_all, rows: _Rows, G: int, p: int) -> list[tuple[tuple[int, ...], np.ndarray]]:
    """Group raters by which design columns vary in their cases.

    A dummy level a rater never saw (or a cue constant in their cases) cannot get
    a weight; those raters are fitted on the remaining columns.
    """
    if rows.group.size == 0:
        return []
    starts = np.r_[0, np.flatnonzero(np.diff(rows.group)) + 1]
    present = rows.group[starts]
    varies = np.zeros((G, p), dtype=bool)
    if p:
        varies[present] = (np.maximum.reduceat(X_all, starts, axis=0)
                           > np.minimum.reduceat(X_all, starts, axis=0))
    patterns: dict[tuple[int, ...], list[int]] = {}
    for g in present:
        patterns.setdefault(tuple(np.flatnonzero(varies[g])), []).append(g)
    return [(cols, np.array(members)) for cols, members in sorted(patterns.items())]


def _fit_pattern(design, rows: _Rows, X_all, active, members, arrays: _Arrays, *,
                 n_boot, rng, alpha, method) -> None:
    p_all = design.n_columns
    for g in members:
        missing_cols = [design.columns[j] for j in range(p_all) if j not in set(active.tolist())]
        if missing_cols:
            arrays.notes[g].append(
                "No weight for " + ", ".join(f"'{c}'" for c in missing_cols)
                + ": it does not vary in this rater's cases."
            )
    # Raters with too few cases or constant judgments are reported, not fitted.
    n_active = active.size
    in_batch = np.isin(rows.group, members)
    y_high = np.full(arrays.G, -np.inf)
    np.maximum.at(y_high, rows.group[in_batch], rows.y[in_batch])
    y_low = np.full(arrays.G, np.inf)
    np.minimum.at(y_low, rows.group[in_batch], rows.y[in_batch])
    keep = []
    for g in members:
        if arrays.n[g] < n_active + 2:
            arrays.notes[g].append(
                f"Only {int(arrays.n[g])} usable cases for {n_active} weights; no policy fitted "
                f"(at least {n_active + 2} needed)."
            )
        elif y_high[g] == y_low[g]:
            arrays.notes[g].append("All judgments are the same; consistency cannot be measured.")
        elif n_active == 0:
            arrays.notes[g].append("No cue varies in this rater's cases; no policy fitted.")
        else:
            keep.append(g)
    if not keep:
        return
    members = np.array(keep)
    local = np.full(arrays.G, -1)
    local[members] = np.arange(members.size)
    sel = np.flatnonzero(local[rows.group] >= 0)
    groups = local[rows.group[sel]]
    X = X_all[sel][:, active]
    y = rows.y[sel]
    Gb = members.size
    cue_groups = _local_cue_groups(design, active)
    k_idx = [c for c, cols in enumerate(cue_groups) if cols]
    cue_groups = [cue_groups[c] for c in k_idx]

    stats = grouped_sscp(np.column_stack([X, y]), groups, Gb)
    fit = ols_from_sscp(stats, np.arange(n_active), n_active)
    ok = fit.rank_ok
    for g in members[~ok]:
        arrays.notes[g].append("Cues are perfectly collinear in this rater's cases; no policy fitted.")
    df = fit.df_resid
    se = fit.se
    with np.errstate(invalid="ignore", divide="ignore"):
        t_crit = sps.t.ppf(1 - alpha / 2, np.where(df > 0, df, np.nan))
        tvals = fit.coef / se
        x_mean = stats.mean[:, :n_active]
        icpt_var = fit.sigma2 * (1.0 / fit.n + np.einsum("gi,gij,gj->g", x_mean, fit.xtx_inv, x_mean))
    corr = stats.correlation()
    corr_xx = corr[:, :n_active, :n_active]
    corr_xy = corr[:, :n_active, n_active:]
    r2 = np.where(ok, fit.r2, np.nan)
    sdx = np.sqrt(np.einsum("gii->gi", stats.sscp)[:, :n_active])
    sdy = np.sqrt(stats.sscp[:, n_active, n_active])

    rows_g = members
    cols = active
    A = arrays
    A.fitted[rows_g] = ok
    A.intercept[rows_g] = fit.intercept
    A.intercept_se[rows_g] = np.sqrt(icpt_var)
    A.coef[np.ix_(rows_g, cols)] = fit.coef
    A.se[np.ix_(rows_g, cols)] = se
    A.p_value[np.ix_(rows_g, cols)] = 2 * sps.t.sf(np.abs(tvals), df[:, None])
    A.ci_low[np.ix_(rows_g, cols)] = fit.coef - t_crit[:, None] * se
    A.ci_high[np.ix_(rows_g, cols)] = fit.coef + t_crit[:, None] * se
    A.std[np.ix_(rows_g, cols)] = fit.coef * sdx / sdy[:, None]
    A.util[np.ix_(rows_g, cols)] = corr_xy[:, :, 0]
    A.r2[rows_g] = r2
    A.r2_adj[rows_g] = np.where(ok, fit.r2_adj, np.nan)

    safe_xx = np.where(ok[:, None, None], corr_xx, np.eye(n_active))
    safe_xy = np.where(ok[:, None, None], corr_xy, 0.0)
    imp, _ = cue_importance(safe_xx, safe_xy, cue_groups, method=method)
    rw = relative_weights(safe_xx, safe_xy, cue_groups)
    cue_cols = np.array(k_idx)
    A.imp_r2[np.ix_(rows_g, cue_cols)] = np.where(ok[:, None], imp[:, 0, :], np.nan)
    A.rw_r2[np.ix_(rows_g, cue_cols)] = np.where(ok[:, None], rw[:, 0, :], np.nan)
    vif, gvif = dg.variance_inflation(safe_xx, cue_groups)
    A.vif[np.ix_(rows_g, cols)] = np.where(ok[:, None], vif, np.nan)
    A.gvif[np.ix_(rows_g, cue_cols)] = np.where(ok[:, None], gvif, np.nan)
    A.cond[rows_g] = np.where(ok, dg.condition_number(safe_xx), np.nan)

    influence = dg.case_influence(X, y, groups, stats, fit)
    loo_stats = grouped_sscp(np.column_stack([y, influence.loo_prediction]), groups, Gb)
    A.r_cv[rows_g] = np.where(ok, loo_stats.correlation()[:, 0, 1], np.nan)
    reset = dg.reset_test(X, y, influence.fitted, groups, Gb, fit)
    A.reset_f[rows_g] = np.where(ok, reset.statistic, np.nan)
    A.reset_p[rows_g] = np.where(ok, reset.p_value, np.nan)
    top = dg.top_rows_per_group(groups, np.abs(influence.studentized), N_LOOK_AGAIN)
    case_ids = design.case_ids
    for i in top:
        g = members[groups[i]]
        if ok[groups[i]]:
            A.look_again[g].append(CaseToReview(
                case=case_ids[rows.case_row[sel[i]]], judgment=float(y[i]),
                predicted=float(influence.fitted[i]),
                predicted_without=float(influence.loo_prediction[i]),
                residual=float(influence.residual[i]),
                studentized=float(influence.studentized[i]),
            ))
    if n_boot > 0 and ok.any():
        _bootstrap_pattern(X, y, groups, members, ok, rows.case_row[sel],
                           cue_groups, cue_cols, A, n_boot=n_boot, rng=rng, alpha=alpha,
                           method=method, r2=r2, imp=imp[:, 0, :])


def _local_cue_groups(design: CueDesign, active: np.ndarray) -> list[list[int]]:
    position = {j: i for i, j in enumerate(active.tolist())}
    return [[position[j] for j in cols if j in position] for cols in design.cue_groups()]


def _bootstrap_pattern(X, y, groups, members, ok, case_row, cue_groups, cue_cols,
                       A: _Arrays, *, n_boot, rng, alpha, method, r2, imp) -> None:
    """Resample cases per block of raters who saw the same cases; one count matrix per block."""
    starts = np.r_[0, np.flatnonzero(np.diff(groups)) + 1]
    ends = np.r_[starts[1:], groups.size]
    blocks: dict[bytes, list[int]] = {}
    for gl, (s, e) in enumerate(zip(starts, ends)):
        if ok[gl]:
            blocks.setdefault(case_row[s:e].tobytes(), []).append(gl)
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
            units.append(_ResampleUnit(raters=members[local], raters_local=local,
                                       X=X[s0:e0], Y=Y, counts=counts, n_boot=n_boot))
    _resampled_intervals(units, cue_groups, cue_cols, A, alpha=alpha, method=method,
                         r2=r2, imp=imp)


def _fit_logistic(rows: _Rows, X_all, arrays: _Arrays) -> None:
    """Logistic weights for every fitted rater, batched by column pattern."""
    fitted = np.flatnonzero(arrays.fitted)
    if fitted.size == 0:
        return
    by_cols: dict[tuple[int, ...], list[int]] = {}
    for g in fitted:
        by_cols.setdefault(tuple(np.flatnonzero(np.isfinite(arrays.coef[g]))), []).append(g)
    for cols, members in by_cols.items():
        members = np.array(members)
        local = np.full(arrays.G, -1)
        local[members] = np.arange(members.size)
        sel = np.flatnonzero(local[rows.group] >= 0)
        groups = local[rows.group[sel]]
        X = X_all[sel][:, list(cols)]
        y = rows.y[sel]
        b0, b, cov, prob, converged, separation = _logistic_batched(X, y, groups, members.size)
        se_all = np.sqrt(np.clip(np.einsum("gii->gi", cov), 0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            pvals = 2 * sps.norm.sf(np.abs(b / se_all[:, 1:]))
            ones = np.bincount(groups, weights=prob * y, minlength=members.size) / np.bincount(
                groups, weights=y, minlength=members.size)
            zeros = np.bincount(groups, weights=prob * (1 - y), minlength=members.size) / np.bincount(
                groups, weights=1 - y, minlength=members.size)
        good = ~separation
        idx = np.ix_(members, list(cols))
        arrays.lg_intercept[members] = np.where(good, b0, np.nan)
        arrays.lg_coef[idx] = np.where(good[:, None], b, np.nan)
        arrays.lg_se[idx] = np.where(good[:, None], se_all[:, 1:], np.nan)
        arrays.lg_p[idx] = np.where(good[:, None], pvals, np.nan)
        arrays.tjur[members] = ones - zeros
        arrays.lg_converged[members] = converged
        arrays.lg_separation[members] = separation
        for g in members[separation]:
            arrays.notes[g].append(
                "The cues separate this rater's decisions perfectly (or almost): weights in odds "
                "terms would be infinite and are not reported; the linear probability results stand."
            )


def _assemble(design: CueDesign, rows: _Rows, A: _Arrays, *, scale, n_boot, alpha, method,
              inconsistent_below) -> PolicySet:
    columns, cues = design.columns, design.cues
    r = np.sqrt(A.r2)
    reset_adj = dg.holm_adjust(A.reset_p)
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = importance_shares(A.imp_r2, A.r2)
        structure = A.util / r[:, None]
        per_weight = A.n / np.maximum(np.isfinite(A.coef).sum(axis=1), 1)
        gvif_scaled = A.gvif ** (1.0 / np.array([max(len(g), 1) for g in design.cue_groups()]))
    typical_low = _typical_lower_end_of_others(A.r_lo)
    policies = []
    for g, rater in enumerate(rows.raters):
        flags, notes = [], list(A.notes[g])
        if not A.fitted[g]:
            flags.append("not_fitted")
        else:
            if per_weight[g] < dg.FEW_CASES_PER_WEIGHT:
                flags.append("few_cases")
                notes.append(
                    f"{per_weight[g]:.1f} cases per weight (under {dg.FEW_CASES_PER_WEIGHT:g}, a rule of "
                    "thumb): the weights are unstable."
                )
            if np.nanmax(gvif_scaled[g], initial=0) > dg.COLLINEAR_VIF or A.cond[g] > dg.COLLINEAR_CONDITION:
                flags.append("collinear_cues")
                notes.append(
                    f"Cues are strongly related in this rater's cases (condition number {A.cond[g]:.1f}); "
                    "individual weights are uncertain, importance and R_s are not affected."
                )
            if reset_adj[g] < alpha:
                flags.append("curvature")
                notes.append(
                    "The judgments bend away from a straight-line policy (RESET "
                    f"p = {reset_adj[g]:.3g} after Holm adjustment across raters)."
                )
            upper = A.r_hi[g]
            if upper < inconsistent_below or upper < typical_low[g]:
                flags.append("inconsistent")
                notes.append(
                    f"R_s = {r[g]:.2f}, interval up to {upper:.2f}: below "
                    + (f"{inconsistent_below:.2f}" if upper < inconsistent_below
                       else f"the typical panel member's interval (from {typical_low[g]:.2f})")
                    + "; similar cases get noticeably different judgments."
                )
        if A.lg_separation[g]:
            flags.append("separation")
        logistic = None
        if scale == "binary" and A.fitted[g]:
            logistic = LogisticPolicy(
                intercept=float(A.lg_intercept[g]),
                weights=_named(columns, A.lg_coef[g]),
                se=_named(columns, A.lg_se[g]),
                odds_ratios=_named(columns, np.exp(A.lg_coef[g])),
                p_value=_named(columns, A.lg_p[g]),
                tjur_r2=float(A.tjur[g]),
                converged=bool(A.lg_converged[g]),
                separation=bool(A.lg_separation[g]),
            )
        policies.append(RaterPolicy(
            rater=rater, n_cases=int(A.n[g]), intercept=float(A.intercept[g]),
            intercept_se=float(A.intercept_se[g]),
            weights=_named(columns, A.coef[g]), se=_named(columns, A.se[g]),
            ci_low=_named(columns, A.ci_low[g]), ci_high=_named(columns, A.ci_high[g]),
            p_value=_named(columns, A.p_value[g]), std_weights=_named(columns, A.std[g]),
            utilization=_named(columns, A.util[g]), structure=_named(columns, structure[g]),
            r=float(r[g]), r_ci=(float(A.r_lo[g]), float(A.r_hi[g])), r2=float(A.r2[g]),
            r2_adj=float(A.r2_adj[g]), r_cv=float(A.r_cv[g]),
            importance=_named(cues, shares[g]), importance_r2=_named(cues, A.imp_r2[g]),
            importance_ci={c: (float(A.imp_lo[g, i]), float(A.imp_hi[g, i])) for i, c in enumerate(cues)},
            importance_method=method, relative_weights_r2=_named(cues, A.rw_r2[g]),
            cases_per_weight=float(per_weight[g]), vif=_named(columns, A.vif[g]),
            gvif=_named(cues, A.gvif[g]), condition_number=float(A.cond[g]),
            reset={"statistic": float(A.reset_f[g]), "p_value": float(A.reset_p[g]),
                   "p_adjusted": float(reset_adj[g])},
            look_again=tuple(A.look_again[g]), logistic=logistic,
            flags=tuple(flags), warnings=tuple(notes),
        ))
    panel_notes = tuple(f"Rater '{p.rater}': {w}" for p in policies for w in p.warnings)
    return PolicySet(raters=tuple(policies), columns=columns,
                     cue_of_column=design.cue_of_column, cues=cues, scale=scale,
                     n_boot=n_boot, alpha=alpha, warnings=panel_notes)


def _typical_lower_end_of_others(lower: np.ndarray) -> np.ndarray:
    """Per rater, the median lower interval end of the other fitted raters (NaN under 5)."""
    out = np.full(lower.shape, np.nan)
    finite = np.flatnonzero(np.isfinite(lower))
    if finite.size < 5:
        return out
    order = finite[np.argsort(lower[finite], kind="stable")]
    values = lower[order]
    rank = np.arange(order.size)
    m = order.size - 1  # size of "the others"

    def reduced(j):  # j-th smallest of the others, for every left-out rank at once
        return np.where(j < rank, values[np.minimum(j, m)], values[np.minimum(j + 1, m)])

    if m % 2:
        out[order] = reduced(m // 2)
    else:
        out[order] = 0.5 * (reduced(m // 2 - 1) + reduced(m // 2))
    return out


def _named(names, values) -> dict[str, float]:
    return {n: float(v) for n, v in zip(names, values)}


# --------------------------------------------------------------------------- policies.json


def captured_policies(policy_set: PolicySet, design: CueDesign) -> dict[str, Any]:
    """The captured policies as a JSON-ready dict (policies.json) for scoring new cases.

    Holds how to rebuild the design for a new case (each cue's kind, columns,
    reference level, and the mean that fills a missing value when the cue has a
    ``:missing`` indicator column) and, per rater, the intercept and the weight of
    every design column. A new case's predicted judgment is
    ``intercept + sum(weight[c] * x[c])`` over the design columns.
    """
    matrix = design.matrix
    cues = []
    for cue, cols in zip(design.cues, design.cue_groups()):
        entry: dict[str, Any] = {"name": cue, "kind": design.kinds.get(cue, "numeric"),
                                 "columns": [design.columns[j] for j in cols]}
        if entry["kind"] == "categorical":
            entry["reference_level"] = design.reference_levels.get(cue)
            entry["levels"] = [design.columns[j].split("=", 1)[1] for j in cols]
        else:
            value_col = cols[0] if cols else None
            indicator = [j for j in cols if design.columns[j].endswith(":missing")]
            entry["missing_rule"] = design.missing_rules.get(cue, "drop")
            entry["missing_indicator"] = design.columns[indicator[0]] if indicator else None
            entry["fill_value"] = design.fill_values.get(cue)
            if value_col is not None:
                with np.errstate(invalid="ignore"):
                    entry["mean"] = float(np.nanmean(matrix[:, value_col])) if np.isfinite(
                        matrix[:, value_col]).any() else None
        cues.append(entry)
    raters = []
    for p in policy_set.raters:
        raters.append({
            "rater": p.rater, "n_cases": p.n_cases, "fitted": "not_fitted" not in p.flags,
            "intercept": p.intercept, "weights": dict(p.weights), "r": p.r,
            "logistic": None if p.logistic is None else {
                "intercept": p.logistic.intercept, "weights": dict(p.logistic.weights)},
        })
    return jsonable({
        "schema": POLICIES_SCHEMA,
        "scale": policy_set.scale,
        "design": {"columns": list(design.columns), "cues": cues},
        "policies": raters,
    })
