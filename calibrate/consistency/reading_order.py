"""Drift over the reading order, per rater, for one phase.

Raters read files one after another; over a long session they may grow more
lenient or harsher (leniency drift) or less careful (consistency drift). On all
judgments in reading order, repeats included, for each rater:

* **leniency drift**: the slope of the judgment on the position in the reading
  order, with the cues held constant (OLS of judgment on cues + position), so a
  run of strong files late in the pile is not mistaken for drift. It is given
  per position and per whole session (slope x (last position - first position)),
  i.e. in scale points from the first file read to the last.
* **consistency drift**: the slope of the absolute residual of that model on
  position (Glejser 1969, Journal of the American Statistical Association
  64:316-323, from memory): positive means the rater strays further from their
  own policy as the session goes on.
* **R_s in the first and the second half** of the rater's reading order, each
  half with its own policy fit, and the change with a bootstrap interval.

A rater is flagged ``drift`` when either slope differs from zero after Holm's
(1979) step-down adjustment over all the tests in the panel (two per rater), so
the chance that anyone in a drift-free panel is flagged stays at most ``alpha``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as sps

from ..data.cues import CueDesign
from ..data.rows import JudgmentRows, RaterLookup, line_up
from ..errors import DataError, DataProblem
from ..policy.linalg import GroupedSSCP, grouped_sscp, ols_from_sscp, r_squared_from_sscp
from ..policy.resampling import held_resamples
from ..policy.stacked import scaled_cue_factor
from ..pvalues import holm_adjust
from ..result_base import ResultMixin

DRIFT_FLAG = "drift"
DRIFT_METHOD = (
    "per-rater OLS of judgment on cues + reading position (leniency) and of the absolute "
    "residual on position (consistency); Holm across raters and both tests"
)
DEFAULT_DRIFT_RESAMPLES = 500
#: Up to this many raters the R_s change intervals always use all the resamples asked for.
DRIFT_FULL_RESAMPLE_RATERS = 500
#: Above it (unless the full form is asked for), raters x resamples is held to this...
DRIFT_RESAMPLE_WORK = DRIFT_FULL_RESAMPLE_RATERS * DEFAULT_DRIFT_RESAMPLES
#: ... with never fewer resamples than this (coverage measured in benchmarks/bench_drift_resamples.py).
DRIFT_MIN_RESAMPLES = 100
#: A resampled sum of squares under this share of the full sample's is rounding noise.
ROUNDING_SHARE = 1e-10


@dataclass(frozen=True)
class RaterDrift(ResultMixin):
    """Drift over one rater's reading order.

    slope, se : leniency drift in scale points per position (cues held constant).
    slope_per_session, ci_low, ci_high : the same over the rater's whole session
        (first to last position), with a 95% t interval.
    p_value, p_adjusted : two-sided t test of the leniency slope; Holm-adjusted
        over all drift tests in the panel.
    consistency_slope, consistency_slope_per_session, consistency_p_value,
        consistency_p_adjusted : the same for the absolute residual.
    r_s_first_half, r_s_second_half : R_s fitted on each half of the reading order.
    r_s_change, r_s_change_ci_low, r_s_change_ci_high : second minus first, with
        a 95% percentile bootstrap interval (cases resampled within each half).
    flagged : either adjusted p-value below alpha; ``reasons`` says which.
    """

    rater: str
    n: int
    span: float
    slope: float
    se: float
    slope_per_session: float
    ci_low: float
    ci_high: float
    p_value: float
    p_adjusted: float
    consistency_slope: float
    consistency_slope_per_session: float
    consistency_p_value: float
    consistency_p_adjusted: float
    n_first_half: int
    n_second_half: int
    r_s_first_half: float
    r_s_second_half: float
    r_s_change: float
    r_s_change_ci_low: float
    r_s_change_ci_high: float
    flagged: bool
    reasons: tuple[str, ...] = ()


@dataclass(frozen=True)
class DriftResult(RaterLookup, ResultMixin):
    """Drift for every rater of one phase; ``raters`` sorted by rater name."""

    method: str
    alpha: float
    n_resamples: int
    raters: tuple[RaterDrift, ...]
    warnings: tuple[str, ...] = ()
    reduced_forms: tuple[str, ...] = ()

    @property
    def flagged_raters(self) -> tuple[str, ...]:
        return tuple(r.rater for r in self.raters if r.flagged)

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "alpha": self.alpha,
            "n_resamples": self.n_resamples,
            "raters": {r.rater: r.to_dict() for r in self.raters},
            "warnings": list(self.warnings),
            "reduced_forms": list(self.reduced_forms),
        }

    def to_frame(self) -> pd.DataFrame:
        columns = list(RaterDrift.__dataclass_fields__)
        frame = pd.DataFrame([r.to_dict() for r in self.raters], columns=columns)
        frame["reasons"] = frame["reasons"].map(lambda v: ",".join(v) if v else "")
        return frame


def _slope_test(fit, column: int):
    """Coefficient, SE and two-sided t-test p-value of one column, per group."""
    slope = fit.coef[:, column]
    se = fit.se[:, column]
    with np.errstate(invalid="ignore", divide="ignore"):
        p = 2.0 * sps.t.sf(np.abs(slope / se), fit.df_resid)
    ok = fit.rank_ok & (fit.df_resid > 0) & np.isfinite(se) & (se > 0)
    nan = np.full(slope.shape, np.nan)
    return (np.where(ok, slope, nan), np.where(ok, se, nan), np.where(ok, p, nan),
            np.where(ok, sps.t.ppf(0.975, np.maximum(fit.df_resid, 1)), nan))


def _half_of_each_row(rater: np.ndarray, position: np.ndarray, n_raters: int) -> np.ndarray:
    """0 for the first half of each rater's reading order, 1 for the second.

    Rows are ranked by position within rater; with an odd count the middle row
    goes to the first half.
    """
    order = np.lexsort((position, rater))
    counts = np.bincount(rater, minlength=n_raters)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    rank = np.empty(rater.size, dtype=np.intp)
    rank[order] = np.arange(rater.size) - starts[rater[order]]
    return (rank >= (counts[rater] + 1) // 2).astype(np.intp)


def _r_s_from(stats: GroupedSSCP, p: int) -> np.ndarray:
    """R_s of the judgment (column p) on the p cues, per group."""
    return _r_s_stack_last(np.ascontiguousarray(stats.sscp.transpose(1, 2, 0)), stats.n, p)


def _r_s_stack_last(S: np.ndarray, n: np.ndarray, p: int, *, rcond: float = 1e-12) -> np.ndarray:
    """R_s of column p on columns 0..p-1 for every group of ``S`` (k, k, groups), the
    groups' SSCPs stacked last.

    The same R^2 and rank rule as :func:`calibrate.policy.linalg.r_squared_from_sscp`,
    at a fraction of its cost on the million small systems of the bootstrap:
    ``R^2 = |L^-1 r|^2`` with ``L`` the Cholesky factor of the correlation-scaled cue
    matrix, full rank decided for certain where a bound allows
    (:func:`calibrate.policy.stacked.surely_full_rank_inverse_factor`) and by
    ``r_squared_from_sscp`` itself for the few groups near the line.
    """
    Syy = S[p, p]
    inverse, sure, safe, candidate = scaled_cue_factor(S, n, p, rcond)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = S[:p, p] / (safe * np.sqrt(Syy))
        z = (inverse * r[None, :, :]).sum(axis=1)
        r2 = np.where(sure & (Syy > 0), (z * z).sum(axis=0), np.nan)
    near = np.flatnonzero(candidate & ~sure)
    if near.size:
        k = S.shape[0]
        r2[near] = r_squared_from_sscp(GroupedSSCP(n=n[near], mean=np.zeros((near.size, k)),
                                                   sscp=S[:, :, near].transpose(2, 0, 1)),
                                       np.arange(p), p, rcond=rcond)[0]
    with np.errstate(invalid="ignore"):
        return np.sqrt(np.clip(r2, 0.0, 1.0))


#: Uniform draws per chunk of resamples in the R_s change bootstrap: small enough that
#: the chunk's arrays stay near the cache (the draws do not depend on the chunk size).
_DRAWS_PER_CHUNK = 4_000_000


def _bootstrap_r_s_change(Z, cell, position, n_cells, p, n_resamples, rng, chunk=None):
    """Percentile interval of R_s(second) - R_s(first) per rater, cases resampled per half.

    Each half (cell) is resampled with replacement to its own size. The resampled
    sums of squares and cross-products come from one batched matrix product of
    the draw counts with the per-row moments, with rows centred at their cell's
    mean first so that no digits are lost. Rows are put in reading order within
    each half, so the draws do not depend on the row order of the input table.
    """
    order = np.lexsort((position, cell))
    Z, cell = Z[order], cell[order]
    k = Z.shape[1]
    sizes = np.bincount(cell, minlength=n_cells)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    slot = np.arange(cell.size) - starts[cell]
    longest = max(int(sizes.max()), 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        centre = np.stack([np.bincount(cell, weights=Z[:, j], minlength=n_cells)
                           for j in range(k)], axis=1) / sizes[:, None]
    Zc = Z - centre[cell]
    upper_i, upper_j = np.triu_indices(k)
    # Where each (i, j) of the k x k matrix sits among the upper-triangle products.
    full_index = np.empty((k, k), dtype=np.intp)
    full_index[upper_i, upper_j] = full_index[upper_j, upper_i] = np.arange(upper_i.size)
    full_index = full_index.ravel()
    # Whole rows, row-major, scattered by one flat index: ``Zc[:, upper_i]`` comes out
    # column-major, and scattering it by two index arrays took about 1.8 s wall at 2,000 raters.
    per_row = np.empty((len(Zc), k + upper_i.size))
    per_row[:, :k] = Zc
    np.multiply(np.take(Zc, upper_i, axis=1), np.take(Zc, upper_j, axis=1), out=per_row[:, k:])
    moments = np.zeros((n_cells, longest, per_row.shape[1]))
    moments.reshape(n_cells * longest, -1)[cell * longest + slot] = per_row
    del per_row
    noise_floor = ROUNDING_SHARE * np.stack([np.bincount(cell, weights=Zc[:, j] ** 2, minlength=n_cells)
                                             for j in range(k)], axis=1)  # (cells, k)
    padding = ~(np.arange(longest)[None, :] < sizes[:, None])[None]     # (1, cells, longest)
    last = np.maximum(sizes - 1, 0)[None, :, None]
    if chunk is None:
        chunk = int(np.clip(_DRAWS_PER_CHUNK // (n_cells * longest), 1, 50))
    diffs = []
    for done in range(0, n_resamples, chunk):
        B = min(chunk, n_resamples - done)
        drawn = rng.random((B, n_cells, longest))
        np.multiply(drawn, sizes[None, :, None], out=drawn)
        drawn = drawn.astype(np.intp)
        np.minimum(drawn, last, out=drawn)
        # Each (resample, cell) counts into longest + 1 slots, the last one taking the
        # draws of the padding beyond the cell's size (dropped below).
        base = (np.arange(B)[:, None, None] * n_cells + np.arange(n_cells)[None, :, None]) * (longest + 1)
        drawn += base
        if padding.any():
            np.copyto(drawn, np.broadcast_to(base + longest, drawn.shape), where=padding)
        counts = np.bincount(drawn.ravel(), minlength=B * n_cells * (longest + 1)) \
            .reshape(B, n_cells, longest + 1)
        as_float = np.empty((n_cells, B, longest))
        np.copyto(as_float, counts[:, :, :longest].transpose(1, 0, 2), casting="unsafe")
        summed = np.matmul(as_float, moments)  # (cells, B, m)
        with np.errstate(invalid="ignore", divide="ignore"):
            shift = summed[..., :k] / sizes[:, None, None]
        products = summed[..., k:] - sizes[:, None, None] * shift[..., upper_i] * shift[..., upper_j]
        # Stack last, (k, k, cells * B): each step of the R_s solve then runs on contiguous rows.
        sscp = np.ascontiguousarray(products.reshape(-1, upper_i.size).T)[full_index].reshape(k, k, -1)
        # A column constant in the resample has no spread, but its sum of squares comes
        # out as rounding noise (of either sign); below a tiny share of the half's own it
        # is zero, so that the cue counts as constant (no fit) as on the rows themselves.
        diagonal = np.arange(k)
        spread = sscp[diagonal, diagonal]
        sscp[diagonal, diagonal] = np.where(spread > np.repeat(noise_floor, B, axis=0).T, spread, 0.0)
        r_s = _r_s_stack_last(sscp, np.repeat(sizes.astype(float), B), p).reshape(n_cells // 2, 2, B)
        diffs.append((r_s[:, 1] - r_s[:, 0]).T)
    diffs = np.concatenate(diffs)
    # nanpercentile goes rater by rater in Python; the raters without a NaN draw (nearly
    # all) take the same percentiles in one call.
    whole = ~np.isnan(diffs).any(axis=0)
    low, high = np.empty(diffs.shape[1]), np.empty(diffs.shape[1])
    low[whole], high[whole] = np.percentile(diffs[:, whole], [2.5, 97.5], axis=0)
    if not whole.all():
        with warnings.catch_warnings():
            # A rater whose halves are too small has only NaN draws; NaN is the answer.
            warnings.simplefilter("ignore", RuntimeWarning)
            low[~whole], high[~whole] = np.nanpercentile(diffs[:, ~whole], [2.5, 97.5], axis=0)
    return low, high


def _line_up_ordered(design: CueDesign, ordered: pd.DataFrame) -> tuple[JudgmentRows, np.ndarray]:
    """All judgments in reading order next to their design rows, with their positions.

    ``line_up`` keeps the judgment of every usable row, so it is handed each
    row's number in place of the judgment to learn which rows it kept.
    """
    missing = [c for c in ("rater", "case", "judgment", "position") if c not in ordered.columns]
    if missing:
        raise DataError(
            f"The ordered-judgment table lacks column(s) {', '.join(missing)}; it needs "
            f"rater, case, judgment, position (available: {', '.join(map(str, ordered.columns))})."
        )
    position = pd.to_numeric(ordered["position"], errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(position).all():
        raise DataError([DataProblem(
            f"{int((~np.isfinite(position)).sum())} row(s) of the ordered-judgment table have no "
            "numeric reading position.", column="position")])
    # Rater by rater in reading order, so the sums (and the bootstrap draws) do
    # not depend on the row order of the input table.
    # The raters' codes in sorted order of their names: the same order as sorting the names
    # themselves, at a fraction of the cost of comparing strings row by row.
    rater_rank, _ = pd.factorize(ordered["rater"].astype(str), sort=True)
    in_order = np.lexsort((position, rater_rank))
    ordered, position = ordered.iloc[in_order], position[in_order]
    judgment = pd.to_numeric(ordered["judgment"], errors="coerce").to_numpy(dtype=float)
    numbered = pd.DataFrame({"rater": ordered["rater"].to_numpy(),
                             "case": ordered["case"].to_numpy(),
                             "judgment": np.where(np.isfinite(judgment),
                                                  np.arange(len(ordered), dtype=float), np.nan)})
    lined = line_up(design, numbered)
    kept = lined.y.astype(np.intp)
    rows = JudgmentRows(raters=lined.raters, group=lined.group, design_row=lined.design_row,
                        X=lined.X, y=judgment[kept], n_dropped=lined.n_dropped)
    return rows, position[kept]


def drift(
    design: CueDesign,
    ordered: pd.DataFrame,
    *,
    alpha: float = 0.05,
    n_resamples: int = DEFAULT_DRIFT_RESAMPLES,
    rng: np.random.Generator | int | None = None,
    scale_down: bool = True,
) -> DriftResult:
    """Leniency and consistency drift over each rater's reading order.

    For rater r with judgments :math:`y_i` at positions :math:`t_i`:

    .. math::

        y_i = a + x_i^\\top b + \\delta t_i + e_i, \\qquad
        |\\hat e_i| = c + \\gamma t_i + u_i,

    both by OLS; :math:`\\delta` is leniency drift per position and
    :math:`\\delta (t_{max} - t_{min})` over the whole session, :math:`\\gamma`
    consistency drift. Each slope gets a two-sided t test; the 2K p-values of a
    K-rater panel are Holm-adjusted together (Holm 1979, Scandinavian Journal of
    Statistics 6:65-70) and a rater is flagged when either is below ``alpha``.

    Parameters
    ----------
    design : the phase's cue design.
    ordered : long table with columns ``rater``, ``case``, ``judgment``,
        ``position`` (all judgments, repeats included).
    alpha : family-wise error rate for the ``drift`` flag.
    n_resamples : bootstrap draws for the R_s change interval (0 skips it).
    rng : seed or generator for the bootstrap.
    scale_down : above :data:`DRIFT_FULL_RESAMPLE_RATERS` raters, fewer resamples
        (:func:`drift_resamples`), stated in ``reduced_forms``; False: always all.

    Returns
    -------
    DriftResult
        A rater with too few judgments for a fit (cues + 3) gets NaN and a warning.

    Raises
    ------
    DataError
        Missing columns, unknown cases, or a missing or non-numeric position.
        Missing judgments and cases missing a ``drop`` cue are left out and
        counted in a warning.
    """
    if not 0.0 < alpha < 1.0:
        raise DataError(f"alpha must be between 0 and 1; got {alpha!r}.")
    if n_resamples < 0:
        raise DataError("n_resamples must be zero or a positive integer.")
    rng = np.random.default_rng(rng)
    rows, t = _line_up_ordered(design, ordered)
    K = rows.n_raters
    p = design.matrix.shape[1]
    X, y, g = rows.X, rows.y, rows.group
    notes: list[str] = []

    lenient_fit = ols_from_sscp(grouped_sscp(np.column_stack([X, t, y]), g, K),
                                np.arange(p + 1), p + 1)
    slope, se, p_len, t_crit = _slope_test(lenient_fit, p)
    fitted = lenient_fit.intercept[g] + np.einsum("ij,ij->i", X, lenient_fit.coef[g, :p]) \
        + lenient_fit.coef[g, p] * t
    abs_resid = np.abs(y - fitted)
    spread_fit = ols_from_sscp(grouped_sscp(np.column_stack([t, abs_resid]), g, K), [0], 1)
    c_slope, _, p_con, _ = _slope_test(spread_fit, 0)

    t_max = np.full(K, -np.inf)
    t_min = np.full(K, np.inf)
    np.maximum.at(t_max, g, t)
    np.minimum.at(t_min, g, t)
    span = t_max - t_min

    adjusted = holm_adjust(np.concatenate([p_len, p_con]))
    adj_len, adj_con = adjusted[:K], adjusted[K:]

    half = _half_of_each_row(g, t, K)
    cell = 2 * g + half
    Zh = np.column_stack([X, y])
    r_s = _r_s_from(grouped_sscp(Zh, cell, 2 * K), p).reshape(K, 2)
    n_half = np.bincount(cell, minlength=2 * K).reshape(K, 2)
    ci_change = (np.full(K, np.nan), np.full(K, np.nan))
    used = drift_resamples(n_resamples, K) if scale_down else n_resamples
    reduced = []
    if used < n_resamples:
        reduced.append(f"The intervals of the change in R_s between the halves of the reading order "
                       f"(drift) from {used:,} resamples instead of {n_resamples:,} on this panel size "
                       f"({K:,} raters).")
    if used > 0:
        ci_change = _bootstrap_r_s_change(Zh, cell, t, 2 * K, p, used, rng)

    n = np.bincount(g, minlength=K)
    short = [r for r, ok in zip(rows.raters, np.isfinite(p_len)) if not ok]
    if short:
        notes.append(
            f"Drift could not be estimated for {len(short)} rater(s) (fewer than "
            f"{p + 3} judgments with complete cues, or constant judgments or positions): "
            f"{', '.join(short[:10])}{' ...' if len(short) > 10 else ''}."
        )
    if rows.n_dropped:
        notes.append(f"{rows.n_dropped} judgment(s) left out of drift because the judgment "
                     "or a cue of the case is missing.")

    raters = []
    for k, name in enumerate(rows.raters):
        reasons = tuple(label for label, q in (("leniency", adj_len[k]),
                                               ("consistency", adj_con[k]))
                        if np.isfinite(q) and q < alpha)
        raters.append(RaterDrift(
            rater=name, n=int(n[k]), span=float(span[k]),
            slope=float(slope[k]), se=float(se[k]),
            slope_per_session=float(slope[k] * span[k]),
            ci_low=float((slope[k] - t_crit[k] * se[k]) * span[k]),
            ci_high=float((slope[k] + t_crit[k] * se[k]) * span[k]),
            p_value=float(p_len[k]), p_adjusted=float(adj_len[k]),
            consistency_slope=float(c_slope[k]),
            consistency_slope_per_session=float(c_slope[k] * span[k]),
            consistency_p_value=float(p_con[k]), consistency_p_adjusted=float(adj_con[k]),
            n_first_half=int(n_half[k, 0]), n_second_half=int(n_half[k, 1]),
            r_s_first_half=float(r_s[k, 0]), r_s_second_half=float(r_s[k, 1]),
            r_s_change=float(r_s[k, 1] - r_s[k, 0]),
            r_s_change_ci_low=float(ci_change[0][k]), r_s_change_ci_high=float(ci_change[1][k]),
            flagged=bool(reasons), reasons=reasons,
        ))
    return DriftResult(method=DRIFT_METHOD, alpha=float(alpha), n_resamples=int(used),
                       raters=tuple(raters), warnings=tuple(notes), reduced_forms=tuple(reduced))


def drift_resamples(n_resamples: int, n_raters: int) -> int:
    """Resamples for the R_s change intervals: as asked up to
    :data:`DRIFT_FULL_RESAMPLE_RATERS` raters, then raters x resamples held to
    :data:`DRIFT_RESAMPLE_WORK`, never under :data:`DRIFT_MIN_RESAMPLES` (nor over the ask)."""
    return held_resamples(n_resamples, n_raters, full_up_to=DRIFT_FULL_RESAMPLE_RATERS,
                          work=DRIFT_RESAMPLE_WORK, at_least=DRIFT_MIN_RESAMPLES)


__all__ = ["DRIFT_FLAG", "DriftResult", "RaterDrift", "drift", "drift_resamples"]
