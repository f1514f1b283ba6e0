"""Capture each rater's policy: the regression of their judgments on the cues.

One call, :func:`fit_policies`, fits every rater of one phase. Nothing loops over
raters with a model library: one pass over the long table builds every rater's
centred sums of squares and cross-products, and all raters are solved in one
batched call (:mod:`calibrate.policy.linalg`). The bootstrap treats a resample as a
vector of counts over cases; raters who saw the same cases share it, so they
share the resampled cue cross-products and only their judgments differ.

Per rater it reports the policy (intercept, raw weights with SE, 95% CI and
p-value, standardized weights, cue utilization and structure coefficients),
consistency R_s = sqrt(R^2) with a bias-corrected (BCa) bootstrap interval,
adjusted R^2, the exact leave-one-out cross-validated r, relative importance
per cue (:mod:`calibrate.policy.importance`) with BCa intervals for the shares,
diagnostics (:mod:`calibrate.policy.diagnostics`) and, for binary decisions, a logistic
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
    median of the other raters' lower ends while R_s itself is under
    ``TYPICAL_R_S`` (0.80): the rater's interval lies wholly under that of a
    typical panel member *and* below the consistency usual for expert judges.
    The second condition keeps a rater at a usual level (say R_s = .86) from
    being called inconsistent only because the rest of the panel is unusually
    consistent (after a training, for example). The bounds 0.70 and 0.80 are our
    own choice, set at and under the mean R_s of about .80 reported across 249
    judgment tasks by Karelaia & Hogarth (2008) (figure from memory).
``separation``
    Binary decisions that the cues predict perfectly: logistic weights are
    infinite and not reported.

The work is split by concern: this module prepares the rows, fits and flags;
:mod:`calibrate.policy.results` holds the result objects,
:mod:`calibrate.policy.resampling` the case bootstrap and the BCa interval (Efron
1987), :mod:`calibrate.policy.logistic` the batched logistic fit (Tjur 2009). Their
public names are importable from here too.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats as sps

from ..data.cues import CueDesign
from ..errors import CalibrateError, DataError, DataProblem
from ..pvalues import holm_adjust
from ..result_base import jsonable
from . import diagnostics as dg
from .importance import MAX_DOMINANCE_CUES, cue_importance, importance_shares, relative_weights
from .linalg import grouped_sscp, ols_from_sscp
from .linear_nulls import fit_linear_null, whole_step_bounds
from .logistic import fit_logistic
from .resampling import bca_interval, case_bootstrap_intervals
from .results import CaseToReview, LogisticPolicy, PolicySet, PredictionTerms, RaterPolicy

# Mean consistency of expert judges across 249 tasks (Karelaia & Hogarth 2008; from memory).
TYPICAL_R_S = 0.80

__all__ = [
    "POLICIES_SCHEMA", "SCALES", "CaseToReview", "LogisticPolicy", "PolicySet", "RaterPolicy",
    "bca_interval", "captured_policies", "fit_policies",
]

POLICIES_SCHEMA = "calibrate.policies/2"
SCALES = ("continuous", "ordinal", "binary")
N_LOOK_AGAIN = 5
CURVATURE_NOTE = "The judgments bend away from a straight-line policy (RESET p = {p:.3g} after Holm adjustment {scope})."


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
    rows = pd.Index(design.case_ids).get_indexer(case_names).astype(np.intp)
    if (rows < 0).any():
        unknown = sorted(set(case_names[rows < 0]))
        raise DataError([DataProblem(
            f"Case '{c}' has judgments but no row in the cue design; add its cues to the "
            f"cases table.", column="case") for c in unknown])
    y = pd.to_numeric(first["judgment"], errors="coerce").to_numpy(dtype=float)
    if scale == "binary":
        y = _binary_judgments(y, scale_min, scale_max)
    # the sorted distinct raters and each row's index among them (np.unique's answer,
    # without sorting every row's Python string)
    group, raters = pd.factorize(rater_names, sort=True)
    raters = np.asarray(raters, dtype=object)
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


# --------------------------------------------------------------------------- main


@dataclass
class _Arrays:
    """Working arrays for all raters (full column / cue space, NaN = not estimated)."""

    G: int
    p: int
    k: int

    def __post_init__(self):
        G, p, k = self.G, self.p, self.k
        nan = lambda *shape: np.full(shape, np.nan)
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
        # What a prediction interval for a new case needs (see captured_policies).
        self.sigma2, self.df_resid = nan(G), nan(G)
        self.x_mean, self.x_min, self.x_max = nan(G, p), nan(G, p), nan(G, p)
        self.xtx_inv = nan(G, p, p)
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
    curvature_resolution: float | None = None,
    scale_down: bool = True,
) -> PolicySet:
    """Fit every rater's policy in one phase, with intervals and diagnostics.

    Parameters
    ----------
    design : the cue design over cases (:func:`calibrate.data.cues.build_cue_design`).
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
    curvature_resolution : on an ordinal scale, the smallest p-value the curvature test
        must be able to tell apart (an audit passes ``alpha / m`` for ``m`` tests in the
        panel); raters with a first p-value at most ``alpha`` get more draws.
    scale_down : on panels of more than :data:`IMPORTANCE_FULL_UP_TO` raters, the
        importance intervals come from the first :data:`IMPORTANCE_REDUCED_RESAMPLES`
        resamples (R_s keeps all ``n_boot``) and the curvature test's first pass from
        :data:`CURVATURE_REDUCED_SIMULATIONS` draws, as ``PolicySet.reduced_forms`` says;
        False keeps the full forms at every size.

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
    curvature_null = _curvature_null(rows.y, scale, scale_min, scale_max)
    patterns = _column_patterns(X_all, rows, G, p)
    seeds = generator.spawn(len(patterns)) if patterns else []
    n_imp, reduced = _importance_resamples(n_boot, G, scale_down)
    curvature_draws = CURVATURE_SIMULATIONS
    if scale_down and G > IMPORTANCE_FULL_UP_TO and curvature_null is not None and curvature_null[0] == "rounded":
        curvature_draws = CURVATURE_REDUCED_SIMULATIONS
        reduced += (f"Curvature test: {CURVATURE_REDUCED_SIMULATIONS} simulated judgment sets per "
                    f"rater instead of {CURVATURE_SIMULATIONS} before the extra draws for small "
                    f"p-values, on panels of more than {IMPORTANCE_FULL_UP_TO:,} raters.",)
    for (active, members), seed in zip(patterns, seeds):
        _fit_pattern(design, rows, X_all, np.asarray(active), members, arrays,
                     n_boot=n_boot, rng=seed, alpha=alpha, method=method, curvature_null=curvature_null,
                     curvature_resolution=curvature_resolution, n_boot_importance=n_imp,
                     curvature_draws=curvature_draws)
    if scale == "binary":
        _fit_logistic(rows, X_all, arrays)
    policy_set = _assemble(design, rows, arrays, scale=scale, n_boot=n_boot, alpha=alpha,
                           method=method, inconsistent_below=inconsistent_below)
    return replace(policy_set, reduced_forms=reduced)


#: Panels up to this many raters get importance intervals from every resample.
IMPORTANCE_FULL_UP_TO = 1000
#: Above it, the importance intervals use this many resamples (R_s keeps them all).
IMPORTANCE_REDUCED_RESAMPLES = 250


def _importance_resamples(n_boot: int, n_raters: int, scale_down: bool) -> tuple[int, tuple[str, ...]]:
    """Resamples behind the importance intervals, and the sentence saying so when fewer.

    The dominance weights of every resample are the largest part of the policy stage on
    a large panel (2**k subsets per rater and resample); their percentile intervals from 250
    resamples covered as those from 1,000 in ``benchmarks/bench_importance_resamples.py``.
    """
    if not scale_down or n_raters <= IMPORTANCE_FULL_UP_TO or n_boot <= IMPORTANCE_REDUCED_RESAMPLES:
        return n_boot, ()
    return IMPORTANCE_REDUCED_RESAMPLES, (
        f"Cue importance intervals from {IMPORTANCE_REDUCED_RESAMPLES} resamples instead of "
        f"{n_boot:,} on panels of more than {IMPORTANCE_FULL_UP_TO:,} raters (the R_s intervals "
        f"keep all {n_boot:,}).",)


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


CURVATURE_SIMULATIONS = 199
#: Above IMPORTANCE_FULL_UP_TO raters (an exact Monte Carlo test at any count; its size with
#: 99 draws is checked in tests/unit/test_scale_nulls.py).
CURVATURE_REDUCED_SIMULATIONS = 99
CURVATURE_MAX_DRAWS = 20_000   # bounds the cost of the refinement for very large panels
CURVATURE_ENOUGH_HITS = 10


def _curvature_null(y, scale, scale_min, scale_max) -> tuple[str, float | None, float | None] | None:
    """The scale-aware null of the curvature test: (kind, min, max), or None for the F table.

    On a continuous scale the RESET F table is exact for a linear rater with normal errors.
    """
    if scale == "binary":
        return ("binary", None, None)
    bounds = whole_step_bounds(y, scale, scale_min, scale_max)
    return None if bounds is None else ("rounded", *bounds)


def _refine_scale_p(X, y, groups, p_first, curvature_null, *, alpha, resolution, rng,
                    null=None, first_draws=CURVATURE_SIMULATIONS) -> np.ndarray:
    """More draws for the raters whose curvature p-value is at most ``alpha`` after the first ones.

    ``first_draws`` (199, or 99 in the reduced form) gave ``p_first``. A panel-wide
    adjustment compares the smallest p-value with ``alpha / m``; 199 draws
    cannot go below 0.005. The raters in question get further draws in doubling rounds
    until ``1 / (1 + draws)`` is at most a fifth of ``resolution`` (capped at
    ``CURVATURE_MAX_DRAWS``); a rater leaves once ``CURVATURE_ENOUGH_HITS`` simulated
    statistics have reached the observed one, so ordinary raters cost a few hundred
    draws (sequential Monte Carlo test, Besag & Clifford 1991, from memory). The p-value
    pools all draws, ``(1 + hits) / (1 + draws)``. Hits are recovered from each round's
    p-value as ``p (1 + draws) - 1``, exact when every simulated set gives a defined
    statistic (sets with every judgment at one end are the exception).
    """
    hits = np.round(p_first * (1 + first_draws) - 1)
    draws = np.full(p_first.size, float(first_draws))
    active = np.isfinite(p_first) & (p_first <= alpha)
    target = min(int(np.ceil(5.0 / resolution)) - 1, CURVATURE_MAX_DRAWS)
    size = 400
    while active.any() and draws[active].max() < target:
        candidates = np.flatnonzero(active)
        more = int(min(size, target - draws[candidates].max()))
        local = np.full(p_first.size, -1)
        local[candidates] = np.arange(candidates.size)
        rows = local[groups] >= 0
        _, p_more = dg.scale_reset_p(X[rows], y[rows], local[groups[rows]], candidates.size,
                                     kind=curvature_null[0], scale_min=curvature_null[1],
                                     scale_max=curvature_null[2], n_sim=more, rng=rng,
                                     null=None if null is None else null.of_rows(rows))
        good = np.isfinite(p_more)
        hits[candidates[good]] += np.round(p_more[good] * (1 + more) - 1)
        draws[candidates[good]] += more
        active[candidates[~good]] = False
        active &= hits < CURVATURE_ENOUGH_HITS
        size *= 2
    refined = np.isfinite(p_first) & (draws > first_draws)
    out = p_first.copy()
    out[refined] = (1.0 + hits[refined]) / (1.0 + draws[refined])
    return out


def _fit_pattern(design, rows: _Rows, X_all, active, members, arrays: _Arrays, *,
                 n_boot, rng, alpha, method, curvature_null=None, curvature_resolution=None,
                 n_boot_importance=None, curvature_draws=CURVATURE_SIMULATIONS) -> None:
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
    A.sigma2[rows_g] = np.where(ok, fit.sigma2, np.nan)
    A.df_resid[rows_g] = df
    A.x_mean[np.ix_(rows_g, cols)] = x_mean
    A.xtx_inv[np.ix_(rows_g, cols, cols)] = fit.xtx_inv
    starts = np.r_[0, np.flatnonzero(np.diff(groups)) + 1]
    A.x_min[np.ix_(rows_g, cols)] = np.minimum.reduceat(X, starts, axis=0)
    A.x_max[np.ix_(rows_g, cols)] = np.maximum.reduceat(X, starts, axis=0)
    A.r2_adj[rows_g] = np.where(ok, fit.r2_adj, np.nan)

    safe_xx = np.where(ok[:, None, None], corr_xx, np.eye(n_active))
    safe_xy = np.where(ok[:, None, None], corr_xy, 0.0)
    imp = _point_importance(safe_xx, safe_xy, cue_groups, method)
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
    if curvature_null is not None and curvature_null[0] == "binary":
        # On 0/1 decisions test the bend inside the logistic policy itself (score test,
        # chi-square table): the logistic bootstrap of the least-squares F was conservative,
        # and a table p-value needs no refinement draws for the panel-wide adjustment.
        binary_reset = dg.logistic_reset_test(X, y, groups, Gb)
        A.reset_f[rows_g] = np.where(ok, binary_reset.statistic, np.nan)
        A.reset_p[rows_g] = np.where(ok, binary_reset.p_value, np.nan)
    elif curvature_null is not None:
        # Rounding and the scale ends bend a straight-line policy; the F table would call
        # that curvature. Calibrate the same F against the rater's straight-line policy
        # seen through the scale instead (own stream, so the bootstrap intervals keep
        # their numbers).
        kind, low, high = curvature_null
        null = fit_linear_null(X, y, groups, Gb, kind=kind, scale_min=low, scale_max=high)
        _, scale_p = dg.scale_reset_p(X, y, groups, Gb, kind=kind, scale_min=low, scale_max=high,
                                      n_sim=curvature_draws, rng=rng.spawn(1)[0], null=null)
        if curvature_resolution is not None:
            scale_p = _refine_scale_p(X, y, groups, scale_p, curvature_null, alpha=alpha,
                                      resolution=curvature_resolution, rng=rng.spawn(1)[0],
                                      null=null, first_draws=curvature_draws)
        A.reset_p[rows_g] = np.where(ok, scale_p, np.nan)
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
        intervals = case_bootstrap_intervals(
            X, y, groups, ok, rows.case_row[sel], cue_groups, n_boot=n_boot, rng=rng,
            alpha=alpha, method=method, r2=r2, importance_r2=imp[:, 0, :],
            n_boot_importance=n_boot_importance)
        A.r_lo[rows_g], A.r_hi[rows_g] = intervals.r_low, intervals.r_high
        A.imp_lo[np.ix_(rows_g, cue_cols)] = intervals.share_low
        A.imp_hi[np.ix_(rows_g, cue_cols)] = intervals.share_high


def _point_importance(corr_xx, corr_xy, cue_groups, method) -> np.ndarray:
    """Each rater's cue importance, (G, 1, k). Raters who read the same cases have the same
    cue correlations: then one matrix serves them all, its subsets solved once for every
    rater's correlations with the cues (the same solves, with many right-hand sides)."""
    flat = corr_xx.reshape(corr_xx.shape[0], -1)
    if flat.shape[0] > 1 and (flat == flat[0]).all():
        shared, _ = cue_importance(corr_xx[:1], corr_xy[:, :, 0].T[None], cue_groups, method=method)
        return shared[0][:, None, :]
    return cue_importance(corr_xx, corr_xy, cue_groups, method=method)[0]


def _local_cue_groups(design: CueDesign, active: np.ndarray) -> list[list[int]]:
    position = {j: i for i, j in enumerate(active.tolist())}
    return [[position[j] for j in cols if j in position] for cols in design.cue_groups()]


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
        fits = fit_logistic(X, y, groups, members.size)
        good = ~fits.separation
        idx = np.ix_(members, list(cols))
        arrays.lg_intercept[members] = np.where(good, fits.intercept, np.nan)
        arrays.lg_coef[idx] = np.where(good[:, None], fits.coef, np.nan)
        arrays.lg_se[idx] = np.where(good[:, None], fits.se, np.nan)
        arrays.lg_p[idx] = np.where(good[:, None], fits.p_value, np.nan)
        arrays.tjur[members] = fits.tjur_r2
        arrays.lg_converged[members] = fits.converged
        arrays.lg_separation[members] = fits.separation
        for g in members[fits.separation]:
            arrays.notes[g].append(
                "The cues separate this rater's decisions perfectly (or almost): weights in odds "
                "terms would be infinite and are not reported; the linear probability results stand."
            )


def _assemble(design: CueDesign, rows: _Rows, A: _Arrays, *, scale, n_boot, alpha, method,
              inconsistent_below) -> PolicySet:
    columns, cues = design.columns, design.cues
    r = np.sqrt(A.r2)
    reset_adj = holm_adjust(A.reset_p)
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
                notes.append(CURVATURE_NOTE.format(p=reset_adj[g], scope="across raters"))
            upper = A.r_hi[g]
            if upper < inconsistent_below or (upper < typical_low[g] and r[g] < TYPICAL_R_S):
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
            importance_ci=dict(zip(cues, zip(A.imp_lo[g].tolist(), A.imp_hi[g].tolist()))),
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
                     n_boot=n_boot, alpha=alpha, warnings=panel_notes,
                     prediction=tuple(_prediction_terms(rater, g, columns, A)
                                      for g, rater in enumerate(rows.raters) if A.fitted[g]))


def _prediction_terms(rater: str, g: int, columns, A: _Arrays) -> PredictionTerms:
    used = np.flatnonzero(np.isfinite(A.coef[g]))
    names = [columns[j] for j in used]
    pick = lambda values: dict(zip(names, values[used].tolist()))
    return PredictionTerms(
        rater=rater, n_cases=int(A.n[g]), residual_variance=float(A.sigma2[g]),
        df_resid=float(A.df_resid[g]), columns=tuple(names),
        column_means=pick(A.x_mean[g]), column_min=pick(A.x_min[g]), column_max=pick(A.x_max[g]),
        centred_inverse=tuple(map(tuple, A.xtx_inv[g][np.ix_(used, used)].tolist())),
    )


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
    return dict(zip(names, np.asarray(values, dtype=float).tolist()))


# --------------------------------------------------------------------------- policies.json


def captured_policies(policy_set: PolicySet, design: CueDesign) -> dict[str, Any]:
    """The captured policies as a JSON-ready dict (policies.json) for scoring new cases.

    Holds how to rebuild the design for a new case (each cue's kind, columns,
    reference level, and the mean that fills a missing value when the cue has a
    ``:missing`` indicator column) and, per rater, the intercept and the weight of
    every design column. A new case's predicted judgment is
    ``intercept + sum(weight[c] * x[c])`` over the design columns.

    Schema 2 adds, per fitted rater, ``prediction``: the residual variance and its
    degrees of freedom, the fitted cases' mean, minimum and maximum of each used
    column, and the inverse of the centred cross-products of those columns, so a
    new case's prediction interval is
    ``t * sqrt(s2 * (1 + 1/n + d' S^-1 d))`` with ``d`` = case minus column means.
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
    terms = {t.rater: t for t in policy_set.prediction}
    for p in policy_set.raters:
        raters.append({
            "rater": p.rater, "n_cases": p.n_cases, "fitted": "not_fitted" not in p.flags,
            "intercept": p.intercept, "weights": dict(p.weights), "r": p.r,
            "logistic": None if p.logistic is None else {
                "intercept": p.logistic.intercept, "weights": dict(p.logistic.weights)},
            "prediction": terms[p.rater].to_dict() if p.rater in terms else None,
        })
    return jsonable({
        "schema": POLICIES_SCHEMA,
        "scale": policy_set.scale,
        "design": {"columns": list(design.columns), "cues": cues},
        "policies": raters,
    })
