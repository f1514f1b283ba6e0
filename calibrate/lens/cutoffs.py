r"""Cutoff rules that a linear policy misses.

Some raters decline every file below a threshold on one cue, whatever the other
cues say. A linear policy smooths that into a slope. For each rater the linear
policy is set against the best policy that adds one step term
``1[x_j < t]`` for a numeric cue ``j`` and a threshold ``t``: the search runs over
every cue and every threshold between distinct observed values that leaves at
least ``min_side`` cases on each side. The gain is the drop in residual sum of
squares, as a share of the linear policy's residual sum of squares.

Because the search picks the best of many thresholds, the gain is large even for a
purely linear rater. It is therefore judged against its distribution under the
rater's own fitted linear policy: a parametric bootstrap simulates judgments from
that policy and repeats the whole search on each simulated set. Adding one
regressor ``d`` to a least-squares fit lowers the residual sum of squares by
``(e'd)^2 / (d'Md)`` (``e`` the residuals, ``M`` the residual-maker of the linear
design), and for the step terms of one cue, in that cue's order, both ``e'd`` and
``d'Md`` are running sums. So every threshold of every simulation is one cumulative
sum over a (simulations x cases) array; nothing is refitted.

The null is the rater's straight-line policy seen through the judgment scale
(``policy/linear_nulls.py``, shared with the curvature test):

* continuous: least squares with normal errors. The statistic's null distribution then
  does not depend on the rater's weights or error variance, so the bootstrap p-value
  ``(1 + #{simulated >= observed}) / (1 + n_sim)`` is an exact Monte Carlo test
  (Dwass 1957; Davison & Hinkley 1997, sec. 4.2.5).
* ordinal in whole steps with ends (``scale_min``/``scale_max``): a straight-line
  *latent* policy fitted by maximum likelihood as an interval-censored normal regression
  (ordered probit with thresholds fixed at the half-steps, Aitchison & Silvey 1957;
  censored ends, Tobin 1958), drawn, rounded and clipped exactly as the scale does.
  Rounding and the ends bend a straight line, which a least-squares null can mistake for a cut-off.
* binary: a logistic policy (``policy/logistic.py``) passed through Bernoulli draws.

The last two are parametric bootstraps (Efron & Tibshirani 1993, ch. 16), approximate
because the null's parameters are estimated; their size is measured in
``benchmarks/bench_scale_nulls.py``. Simulated sets whose statistic is undefined (every
judgment equal) are left out of the share. The null is fitted for all raters at once;
raters who read the same cases share one plan of thresholds, and the search runs on the
simulated sets of many raters at once, in rounds (40 sets, then twice as many each round;
one generator draws every round's sets, so a rater's draws depend on the panel, as they did
when raters drew one after another). Simulation stops
early for a rater once enough simulated values have reached the observed one (Besag &
Clifford 1991), so ordinary raters cost a few dozen draws and only raters near or past
the cut-off get all ``n_sim``. On panels of :data:`COMPILED_SEARCH_FROM` tested raters and
more, the rounds' searches run compiled (``lens/compiled_search.py``), with the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ..data.cues import CueDesign
from ..data.rows import RaterLookup, line_up
from ..errors import DataError
from ..policy.linear_nulls import LinearNull, fit_linear_null, whole_step_bounds
from ..pvalues import holm_adjust
from ..result_base import ResultMixin

CUTOFF_FLAG = "cutoff_rule"
#: Panels up to this many tested raters stop each rater's simulation at ``enough_hits``;
#: larger ones at REDUCED_ENOUGH_HITS (size measured in benchmarks/bench_scale_nulls.py).
FULL_HITS_UP_TO = 1000
REDUCED_ENOUGH_HITS = 10


@dataclass(frozen=True)
class RaterCutoff(ResultMixin):
    """The best one-cue threshold added to a rater's linear policy, and its test.

    ``step`` is the shift of the judgments of cases below ``threshold`` beyond what
    the linear policy gives them (negative: marked down below the cut);
    ``delta_r2`` the gain in R^2; ``statistic`` the gain as a share of the linear
    policy's residual sum of squares; ``p_value`` from the parametric bootstrap;
    ``p_adjusted`` Holm across raters (the flag uses ``p_value``, so each linear
    rater is flagged at the nominal rate).
    """

    rater: str
    n: int
    cue: str | None
    threshold: float
    n_below: int
    step: float
    delta_r2: float
    statistic: float
    p_value: float
    p_adjusted: float
    flagged: bool
    warnings: tuple[str, ...] = ()

    @property
    def flags(self) -> tuple[str, ...]:
        return (CUTOFF_FLAG,) if self.flagged else ()


@dataclass(frozen=True)
class CutoffResult(RaterLookup, ResultMixin):
    raters: tuple[RaterCutoff, ...]
    alpha: float
    n_sim: int
    min_side: int | None   # None: max(5, ceil(0.05 n)) per rater
    cues_searched: tuple[str, ...]
    warnings: tuple[str, ...] = ()
    reduced_forms: tuple[str, ...] = ()   # plain sentences, one per reduced extra

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{k: v for k, v in r.to_dict().items() if k != "warnings"}
                             for r in self.raters])


def _candidate_cuts(x_sorted: np.ndarray, min_side: int) -> np.ndarray:
    """Counts k of cases below each admissible threshold (between distinct values)."""
    n = x_sorted.size
    k = np.arange(1, n)
    distinct = x_sorted[1:] > x_sorted[:-1]
    return k[distinct & (k >= min_side) & (k <= n - min_side)]


@dataclass(frozen=True)
class _StepPlan:
    """What the threshold search needs from one rater's design, computed once.

    ``Q`` is an orthonormal basis of [1, X]; per searched column, the case order,
    the admissible counts below a threshold and ``1 / d'Md`` for each; ``weights`` holds
    the same ``1 / d'Md`` at row ``count - 1`` of a column of zeros (one row per case up
    to the largest count), for the cases-first search. ``case_orders`` and ``step_weights``
    are the same for all searched columns at once: the orders end to end, and
    ``(columns, cases)`` weights, zero past each column's largest count.
    """

    Q: np.ndarray
    positions: tuple[int, ...]
    orders: tuple[np.ndarray, ...]
    cuts: tuple[np.ndarray, ...]
    inverse_spread: tuple[np.ndarray, ...]
    weights: tuple[np.ndarray, ...] = ()
    case_orders: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    step_weights: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))


def _step_plan(Q, positions, orders, cuts, inverse, weights) -> _StepPlan:
    """A :class:`_StepPlan` with its all-columns layout laid out from the per-column one."""
    n = Q.shape[0]
    step_weights = np.zeros((len(orders), n))
    for row, weight in zip(step_weights, weights):
        row[:weight.shape[0]] = weight[:, 0]
    case_orders = np.concatenate(orders) if orders else np.zeros(0, dtype=np.intp)
    return _StepPlan(Q, tuple(positions), tuple(orders), tuple(cuts), tuple(inverse), tuple(weights),
                     case_orders, step_weights)


def _plan_steps(X: np.ndarray, search_columns: list[int], min_side: int) -> _StepPlan:
    n = X.shape[0]
    Q, r_factor = np.linalg.qr(np.column_stack([np.ones(n), X]))
    return _plan_from_basis(X, Q, r_factor, search_columns, min_side)


def _plan_from_basis(X: np.ndarray, Q: np.ndarray, r_factor: np.ndarray, search_columns: list[int],
                     min_side: int) -> _StepPlan:
    """:func:`_plan_steps` from the QR factors of ``[1, X]``."""
    diag = np.abs(np.diag(r_factor))
    Q = Q[:, diag > 1e-10 * diag.max()]
    positions, orders, cuts_all, inverse, weights = [], [], [], [], []
    for pos, j in enumerate(search_columns):
        order = np.argsort(X[:, j], kind="stable")
        cuts = _candidate_cuts(X[order, j], min_side)
        if cuts.size == 0:
            continue
        q_run = np.cumsum(Q[order], axis=0)[cuts - 1]            # Q'd for each threshold
        spread = cuts - np.einsum("kq,kq->k", q_run, q_run)       # d'Md
        # a step that the cues already span (a cue with two values) adds nothing
        usable = spread > 1e-8 * cuts
        if usable.any():
            positions.append(pos)
            orders.append(order)
            cuts_all.append(cuts[usable])
            inverse.append(1.0 / spread[usable])
            weight = np.zeros((int(cuts[usable][-1]), 1))
            weight[cuts[usable] - 1, 0] = inverse[-1]
            weights.append(weight)
    return _step_plan(Q, positions, orders, cuts_all, inverse, weights)


def _plans_of_blocks(Xs: list[np.ndarray], search_columns: list[int], min_side: int) -> list[_StepPlan]:
    """:func:`_plan_steps` of many designs at once, one batched pass per case count: the QR
    factors in one call (each matrix factored as on its own), and per searched column the
    case orders, the admissible counts and ``d'Md`` of every design as arrays. A design
    whose ``[1, X]`` is not of full rank takes :func:`_plan_from_basis` on its own."""
    plans: list[_StepPlan | None] = [None] * len(Xs)
    by_size: dict[int, list[int]] = {}
    for i, X in enumerate(Xs):
        by_size.setdefault(X.shape[0], []).append(i)
    for n, members in by_size.items():
        X = np.stack([Xs[i] for i in members])                                  # (B, n, p)
        Q, r_factor = np.linalg.qr(np.concatenate([np.ones((len(members), n, 1)), X], axis=2))
        diag = np.abs(np.diagonal(r_factor, axis1=1, axis2=2))
        full = (diag > 1e-10 * diag.max(axis=1, keepdims=True)).all(axis=1)
        for b in np.flatnonzero(~full):
            plans[members[b]] = _plan_from_basis(Xs[members[b]], Q[b], r_factor[b], search_columns, min_side)
        keep = np.flatnonzero(full)
        if not keep.size:
            continue
        X, Q = X[keep], Q[keep]
        count = np.arange(1, n)
        first_row = (np.arange(keep.size) * n)[:, None]
        per_column = []
        for j in search_columns:
            order = np.argsort(X[:, :, j], axis=1, kind="stable")
            rows_in_order = (order + first_row).ravel()
            xs = X[:, :, j].ravel()[rows_in_order].reshape(order.shape)
            admissible = (xs[:, 1:] > xs[:, :-1]) & (count >= min_side) & (count <= n - min_side)
            q_run = np.cumsum(Q.reshape(-1, Q.shape[2])[rows_in_order].reshape(Q.shape), axis=1)[:, :-1]
            spread = count - np.einsum("bkq,bkq->bk", q_run, q_run)             # d'Md
            per_column.append((order, admissible & (spread > 1e-8 * count), spread))
        # Every design's weights at once, (designs, columns, cases); each plan takes views.
        orders_all = np.stack([order for order, _, _ in per_column], axis=1)
        usable_all = np.stack([usable for _, usable, _ in per_column], axis=1)
        spread_all = np.stack([spread for _, _, spread in per_column], axis=1)
        weights_all = np.zeros(orders_all.shape)
        with np.errstate(divide="ignore"):
            weights_all[:, :, :-1] = np.where(usable_all, 1.0 / spread_all, 0.0)
        searched = usable_all.any(axis=2)
        reach = n - 1 - np.argmax(usable_all[:, :, ::-1], axis=2)   # the largest admissible count
        for b, i in enumerate(keep):
            columns = np.flatnonzero(searched[b])
            plans[members[i]] = _StepPlan(
                Q[b], tuple(columns.tolist()), tuple(orders_all[b, columns]),
                tuple(count[usable_all[b, c]] for c in columns),
                tuple(weights_all[b, c, :-1][usable_all[b, c]] for c in columns),
                tuple(weights_all[b, c, :reach[b, c], None] for c in columns),
                orders_all[b, columns].ravel(), weights_all[b, columns])
    return plans


#: From this many response sets a search lays cases first (sets along the contiguous
#: axis), where each step of a running sum is one vector operation over the sets.
_CASES_FIRST_FROM = 96
#: Sets searched together in the cases-first layout (its arrays stay near the cache).
_CASES_FIRST_SETS = 512
#: Cases per block of the blocked running sum.
_RUN_BLOCK = 12
#: From this many tested raters the simulated rounds' searches run compiled
#: (:mod:`calibrate.lens.compiled_search`, the same numbers to the bit); smaller panels keep
#: numpy and never load numba (its import and cache load: 2.1 s CPU in a bare process,
#: 0.1-0.5 s inside the stage of an audit, measured here; DEVELOPERS.md "Speed at scale").
COMPILED_SEARCH_FROM = 400


def _best_steps(plan: _StepPlan, responses: np.ndarray, *, locate: bool = False, compiled: bool = False):
    """Statistic per response row; with ``locate`` also the winning (column position, count below).
    ``compiled`` (without ``locate``) runs the search of :mod:`calibrate.lens.compiled_search`."""
    if not locate and responses.shape[0] >= _CASES_FIRST_FROM and plan.weights:
        return _best_steps_cases_first(plan, responses, compiled=compiled), None
    resid = responses - (responses @ plan.Q) @ plan.Q.T
    if not locate and compiled and plan.step_weights.shape[0]:
        from .compiled_search import best_running_gain
        best = best_running_gain(resid, plan.case_orders, plan.step_weights)
        return _share_of_rss(best, np.einsum("sn,sn->s", resid, resid)), None
    return _steps_from_residuals(resid, plan.case_orders[None, :], plan.step_weights[None],
                                 np.asarray(plan.positions, dtype=np.intp), locate=locate)


def _steps_from_residuals(resid: np.ndarray, case_orders: np.ndarray, step_weights: np.ndarray,
                          positions: np.ndarray, *, locate: bool):
    """:func:`_best_steps` from the residuals of the linear policy, (S, n), with each row's
    ``case_orders`` (S or 1, columns * n) and ``step_weights`` (S or 1, columns, n).

    Every searched column's running sums ``e'd`` in one pass, each in its own order (the
    same additions as a running sum per column); a count that is no admissible threshold
    has weight zero, and the best gain is never below zero, so the largest weighted square
    is the largest admissible gain. The winner is the first column, then the first count,
    that reaches it.
    """
    S, n = resid.shape
    C = step_weights.shape[1]
    rss = np.einsum("sn,sn->s", resid, resid)
    where = np.zeros((S, 2), dtype=np.intp) if locate else None
    if not C:
        return np.full(S, np.nan), where
    if case_orders.shape[0] == 1:
        gains = resid[:, case_orders[0]]
    else:
        gains = np.take_along_axis(resid, case_orders, axis=1)
    gains = np.cumsum(gains.reshape(S, C, n), axis=2)
    np.square(gains, out=gains)
    gains *= step_weights
    gains = gains.reshape(S, C * n)
    if locate:
        gains[np.broadcast_to(step_weights.reshape(-1, C * n) == 0, gains.shape)] = -np.inf
        at = np.argmax(gains, axis=1)
        best = gains[np.arange(S), at]
        where[:, 0] = positions[at // n]
        where[:, 1] = at % n + 1
    else:
        best = gains.max(axis=1)
    return _share_of_rss(best, rss), where


def _share_of_rss(best: np.ndarray, rss: np.ndarray) -> np.ndarray:
    """The statistic from the best gain: its share of the linear policy's RSS, NaN where undefined."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.isfinite(best), best / rss, np.nan)


def _observed_steps(plans: list[_StepPlan], responses: list[np.ndarray], max_floats: int = 1_000_000):
    """:func:`_best_steps` with ``locate`` of each (plan, response rows) pair, the pairs whose
    plans have the same shape searched together (rows from many plans in one pass)."""
    out: list = [None] * len(plans)
    by_shape: dict[tuple[int, ...], list[int]] = {}
    for i, plan in enumerate(plans):
        by_shape.setdefault(plan.Q.shape + plan.step_weights.shape, []).append(i)
    for (n, q, C, _), members in by_shape.items():
        if len(members) == 1 or not C:
            for i in members:
                out[i] = _best_steps(plans[i], responses[i], locate=True)
            continue
        Y = np.concatenate([responses[i] for i in members])
        plan_of_row = np.repeat(np.arange(len(members)), [responses[i].shape[0] for i in members])
        Q = np.stack([plans[i].Q for i in members])
        case_orders = np.stack([plans[i].case_orders for i in members])
        step_weights = np.stack([plans[i].step_weights for i in members])
        positions = np.stack([np.asarray(plans[i].positions, dtype=np.intp) for i in members])
        statistic, where = np.empty(Y.shape[0]), np.empty((Y.shape[0], 2), dtype=np.intp)
        per_chunk = max(1, max_floats // (C * n))
        for r0 in range(0, Y.shape[0], per_chunk):
            rows = slice(r0, r0 + per_chunk)
            at = plan_of_row[rows]
            y, basis = Y[rows, None, :], Q[at]
            resid = (y - np.matmul(np.matmul(y, basis), np.swapaxes(basis, 1, 2)))[:, 0]
            statistic[rows], found = _steps_from_residuals(resid, case_orders[at], step_weights[at],
                                                           np.arange(C), locate=True)
            where[rows, 0] = positions[at, found[:, 0]]
            where[rows, 1] = found[:, 1]
        starts = np.r_[0, np.cumsum([responses[i].shape[0] for i in members])]
        for j, i in enumerate(members):
            out[i] = statistic[starts[j]:starts[j + 1]], where[starts[j]:starts[j + 1]]
    return out


def _best_steps_cases_first(plan: _StepPlan, responses: np.ndarray, *, compiled: bool = False) -> np.ndarray:
    """The statistic of :func:`_best_steps` with the response sets along the contiguous axis.

    The running sums ``e'd`` are formed in blocks of :data:`_RUN_BLOCK` cases (a sum
    within each block, then the blocks' totals carried on), so that every step is one
    vector operation over all the sets, and over all the searched columns at once; the
    sums differ from a case-by-case running sum only by rounding (about 1e-15 of their
    size). Non-admissible counts get weight zero in ``plan.step_weights``, so the largest
    weighted square is the largest admissible gain.
    """
    S, n = responses.shape
    out = np.empty(S)
    columns = plan.step_weights.shape[0]
    padded = -(-n // _RUN_BLOCK) * _RUN_BLOCK
    weight = np.zeros((columns, padded, 1))
    weight[:, :n, 0] = plan.step_weights
    order = plan.case_orders.reshape(columns, n)
    run = None
    for s0 in range(0, S, _CASES_FIRST_SETS):
        Yt = np.ascontiguousarray(responses[s0:s0 + _CASES_FIRST_SETS].T)      # (n, sets)
        resid = Yt - plan.Q @ (plan.Q.T @ Yt)
        rss = np.einsum("ns,ns->s", resid, resid)
        if compiled:
            from .compiled_search import best_blocked_gain
            best = best_blocked_gain(resid, plan.case_orders, plan.step_weights, _RUN_BLOCK)
        else:
            if run is None or run.shape[2] != Yt.shape[1]:
                run = np.empty((columns, padded, Yt.shape[1]))   # (columns, cases, sets)
            best = _blocked_gain(resid, order, weight, run, n, padded)
        out[s0:s0 + Yt.shape[1]] = _share_of_rss(best, rss)
    return out


def _blocked_gain(resid, order, weight, run, n, padded):
    """The best weighted square per set of the cases-first search, its numpy form."""
    columns = order.shape[0]
    np.take(resid, order, axis=0, out=run[:, :n])
    run[:, n:] = 0.0
    blocks = run.reshape(columns, padded // _RUN_BLOCK, _RUN_BLOCK, -1)
    for i in range(1, _RUN_BLOCK):
        np.add(blocks[:, :, i], blocks[:, :, i - 1], out=blocks[:, :, i])
    totals = blocks[:, :, -1]
    for b in range(1, totals.shape[1]):
        np.add(totals[:, b], totals[:, b - 1], out=totals[:, b])
    blocks[:, 1:, :-1] += totals[:, :-1, None, :]
    np.square(run, out=run)
    run *= weight
    return run.reshape(-1, run.shape[2]).max(axis=0)


def step_search(X: np.ndarray, responses: np.ndarray, search_columns: list[int],
                min_side: int) -> tuple[np.ndarray, np.ndarray]:
    r"""Best single step term for each response vector.

    Parameters
    ----------
    X : (n, p) cue design of one rater.
    responses : (S, n) response vectors.
    search_columns : design columns to search thresholds on.
    min_side : fewest cases allowed on either side of a threshold.

    Returns
    -------
    statistic : (S,) max over columns and thresholds of
        :math:`(e'd)^2 / (d'Md) / e'e`.
    where : (S, 2) int, the winning (position in ``search_columns``, cases below
        the threshold in that column's order).
    """
    return _best_steps(_plan_steps(X, search_columns, min_side), responses, locate=True)


def sequential_p_values(plan: _StepPlan, observed: np.ndarray, simulate, n_sim: int,
                        enough_hits: int | None, first_chunk: int = 40,
                        max_floats: int = 250_000, compiled: bool = False) -> np.ndarray:
    """Monte Carlo p-values of raters who share one design, stopping early per rater.

    ``simulate(size, raters)`` returns ``(size, len(raters), n)`` simulated judgment sets
    of the listed raters (positions in ``observed``). Rounds draw for every rater still
    running at once (the first ``first_chunk`` sets, then twice as many each round), so
    one threshold search serves many raters. With ``enough_hits = h``, a rater stops at
    its ``l``-th usable draw once ``h`` draws have reached its observed value, with
    p-value ``h / l``; otherwise ``(1 + g) / (1 + usable)`` with ``g`` hits in all
    ``n_sim`` draws (draws whose statistic is undefined not counted). Both are valid
    p-values (Besag & Clifford 1991, Biometrika 78:301-304, from memory); a rater whose
    pattern is ordinary costs a few dozen draws instead of ``n_sim``. ``compiled`` runs each
    search compiled (:mod:`calibrate.lens.compiled_search`, the same statistics to the bit).
    """
    n = plan.Q.shape[0]
    p_value = np.full(observed.size, np.nan)
    hits, usable = np.zeros(observed.size), np.zeros(observed.size)
    margin = observed - 1e-12 * np.abs(observed)
    running = np.arange(observed.size)
    drawn, size = 0, first_chunk
    while running.size and drawn < n_sim:
        size = min(size, n_sim - drawn)
        stat = np.empty((running.size, size))
        per_call = max(1, max_floats // (size * n))   # bounds the memory of one search
        for start in range(0, running.size, per_call):
            some = running[start:start + per_call]
            sets = simulate(size, some)
            found, _ = _best_steps(plan, np.swapaxes(sets, 0, 1).reshape(-1, n), compiled=compiled)
            stat[start:start + some.size] = found.reshape(some.size, size)
        finite = np.isfinite(stat)   # an undefined statistic is no draw of the null
        so_far = hits[running, None] + np.cumsum(finite & (stat >= margin[running, None]), axis=1)
        seen = usable[running, None] + np.cumsum(finite, axis=1)
        stopped = np.zeros(running.size, dtype=bool)
        if enough_hits:
            enough = so_far >= enough_hits
            stopped = enough.any(axis=1)
            at = np.argmax(enough, axis=1)
            p_value[running[stopped]] = enough_hits / seen[stopped, at[stopped]]
        hits[running], usable[running] = so_far[:, -1], seen[:, -1]
        running = running[~stopped]
        drawn += size
        size *= 2
    p_value[running] = (1.0 + hits[running]) / (1.0 + usable[running])
    return p_value


def step_coefficient(X: np.ndarray, y: np.ndarray, below: np.ndarray) -> float:
    """Least-squares weight of the step indicator ``below`` added to the linear policy."""
    design = np.column_stack([np.ones(y.size), X, below.astype(float)])
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    return float(coef[-1])


def cutoff_check(
    design: CueDesign,
    first: pd.DataFrame,
    *,
    rng: np.random.Generator | int | None = None,
    n_sim: int = 999,
    scale: str = "continuous",
    scale_min: float | None = None,
    scale_max: float | None = None,
    alpha: float = 0.05,
    min_side: int | None = None,
    enough_hits: int | None = 20,
    scale_down: bool = True,
) -> CutoffResult:
    r"""Test each rater for a threshold rule on one cue that a linear policy misses.

    Parameters
    ----------
    design, first : the phase's cue design and first judgments.
    rng : seed or generator of the parametric bootstrap.
    n_sim : simulated judgment sets per rater (999 gives p-values in steps of 0.001).
    scale : "continuous", "ordinal" or "binary": picks the null (module docstring).
    scale_min, scale_max : ends of the scale. On an ordinal scale whose judgments all sit
        on whole steps from ``scale_min`` the null is rounded and clipped to them; without
        them an ordinal scale is treated as continuous. On a binary scale ``scale_max`` is
        the "yes" value (default: the larger value seen).
    alpha : level of the per-rater flag ``cutoff_rule`` (on the unadjusted p-value).
    min_side : fewest cases on either side of a threshold; default
        ``max(5, ceil(0.05 n))`` per rater (common practice, so that a step does not
        just fit a handful of outlying cases).
    enough_hits : stop simulating for a rater once this many simulated statistics
        reach the observed one (sequential p-value, Besag & Clifford 1991); None runs
        all ``n_sim`` draws.
    scale_down : on panels of more than :data:`FULL_HITS_UP_TO` raters, stop at
        :data:`REDUCED_ENOUGH_HITS` instead (still a valid p-value; only ordinary raters'
        p-values get coarser), as ``reduced_forms`` says; False keeps ``enough_hits``.

    Returns
    -------
    CutoffResult
        Per rater: the best cue and threshold, the step, ``delta_r2``, the statistic
        ``max_{j,t} (e'd)^2/(d'Md) / e'e`` and its bootstrap p-value.
    """
    if scale not in ("continuous", "ordinal", "binary"):
        raise DataError(f"scale must be 'continuous', 'ordinal' or 'binary'; got {scale!r}.")
    if n_sim < 19:
        raise DataError(f"n_sim must be at least 19 for a test at the 5% level; got {n_sim}.")
    rng = np.random.default_rng(rng)
    rows = line_up(design, first)
    # Thresholds make sense on a numeric cue's own column, not on dummies or missing flags.
    search = [j for j, (name, cue) in enumerate(zip(design.columns, design.cue_of_column))
              if name == cue and design.kinds.get(cue) != "categorical"]
    search_names = tuple(design.columns[j] for j in search)
    warnings: list[str] = []
    if not search:
        warnings.append("No numeric cue to search for a threshold; the cutoff check was not run.")
    # each rater's rows in design order, so that raters who read the same cases line up
    order = np.lexsort((rows.design_row, rows.group))
    per_rater = np.split(order, np.cumsum(rows.counts())[:-1])
    sides = {}
    for g, idx in enumerate(per_rater):
        n = idx.size
        side = min_side if min_side is not None else max(5, int(np.ceil(0.05 * n)))
        if search and n >= design.n_columns + 2 + 2 * side and np.ptp(rows.y[idx]) > 0:
            sides[g] = side
    nulls = _fit_nulls(rows.X, rows.y, per_rater, list(sides), scale, scale_min, scale_max)
    reduced: tuple[str, ...] = ()
    if scale_down and enough_hits and enough_hits > REDUCED_ENOUGH_HITS and len(sides) > FULL_HITS_UP_TO:
        reduced = (f"Cut-off check: simulation for a rater stops once {REDUCED_ENOUGH_HITS} simulated "
                   f"values reach its own instead of {enough_hits}, on panels of more than "
                   f"{FULL_HITS_UP_TO:,} raters.",)
        enough_hits = REDUCED_ENOUGH_HITS
    compiled = len(sides) >= COMPILED_SEARCH_FROM
    results: list[RaterCutoff | None] = [None] * len(rows.raters)
    for g, name in enumerate(rows.raters):
        if g not in sides:
            n = per_rater[g].size
            results[g] = replace(_untested(name, n), warnings=(
                f"Rater '{name}': {n} cases (or constant judgments) are too few for the cutoff check.",))
    # Raters who read the same cases share one plan of thresholds and one search per draw.
    blocks: dict[tuple[bytes, int], list[int]] = {}
    for g, side in sides.items():
        blocks.setdefault((rows.design_row[per_rater[g]].tobytes(), side), []).append(g)
    plans = {}
    for side in set(sides.values()):
        keys = [key for key in blocks if key[1] == side]
        designs = [rows.X[per_rater[blocks[key][0]]] for key in keys]
        plans.update(zip(keys, _plans_of_blocks(designs, search, side)))
    responses = {key: np.stack([rows.y[per_rater[g]] for g in members]) for key, members in blocks.items()}
    observed = dict(zip(blocks, _observed_steps([plans[key] for key in blocks], list(responses.values()))))
    for key, members in blocks.items():
        X = rows.X[per_rater[members[0]]]
        plan = plans[key]
        Y = responses[key]
        stat, where = observed[key]
        tested = []
        for i, g in enumerate(members):
            name, n = rows.raters[g], Y.shape[1]
            null, null_rows = nulls[g]
            if not np.isfinite(stat[i]):
                results[g] = replace(_untested(name, n), warnings=(
                    f"Rater '{name}': no admissible threshold on any numeric cue.",))
            elif not null.usable[null_rows].all():
                results[g] = replace(_untested(name, n), warnings=(
                    f"Rater '{name}': the cues all but fix every decision (the logistic weights run "
                    "off to infinity), so no straight-line policy can be simulated; the cutoff "
                    "check was not run.",)
                    if null.kind == "binary" else (
                    f"Rater '{name}': the straight-line policy could not be fitted; the cutoff "
                    "check was not run.",))
            else:
                tested.append(i)
        if not tested:
            continue
        tested = np.array(tested)

        # the same cases vary the same columns, so the block's raters share one fitted null
        null = nulls[members[0]][0]
        null_rows = [np.arange(nulls[members[i]][1].start, nulls[members[i]][1].stop) for i in tested]

        def simulate(size, which, null=null, null_rows=null_rows):
            picked = np.concatenate([null_rows[i] for i in which])
            return null.draw(rng, size, picked).reshape(size, which.size, -1)

        p_values = sequential_p_values(plan, stat[tested], simulate, n_sim, enough_hits, compiled=compiled)
        for i, p_value in zip(tested, p_values):
            g = members[i]
            results[g] = _rater_result(rows.raters[g], X, Y[i], plan, search, where[i], stat[i],
                                       p_value, design, alpha)
    adjusted = holm_adjust(np.array([r.p_value for r in results]))
    results = [replace(r, p_adjusted=float(a)) for r, a in zip(results, adjusted)]
    return CutoffResult(tuple(results), alpha, n_sim, min_side,
                        search_names, tuple(warnings), reduced)


def _untested(name: str, n: int) -> RaterCutoff:
    return RaterCutoff(name, n, None, float("nan"), 0, float("nan"), float("nan"),
                       float("nan"), float("nan"), float("nan"), False)


def _rater_result(name, X, y, plan, search, where, observed, p_value, design, alpha) -> RaterCutoff:
    """One tested rater's best threshold, its step and gain, and the p-value.

    From the plan, without a refit: the linear policy's residuals ``e = y - QQ'y``, and by
    the Frisch-Waugh-Lovell theorem the step's least-squares weight in ``[1, X, d]`` is
    ``e'd / d'Md`` (:func:`step_coefficient` gives the same from the full fit).
    """
    n = y.size
    column = search[where[0]]
    entry = plan.positions.index(int(where[0]))
    order = plan.orders[entry]
    below_count = int(where[1])
    xs = X[order, column]
    threshold = 0.5 * (xs[below_count - 1] + xs[below_count])
    below = X[:, column] < threshold
    tss = float(((y - y.mean()) ** 2).sum())
    resid = y - plan.Q @ (plan.Q.T @ y)
    rss0 = float(resid @ resid)
    inverse = plan.inverse_spread[entry][np.searchsorted(plan.cuts[entry], below_count)]
    return RaterCutoff(
        rater=name, n=n, cue=design.cue_of_column[column], threshold=float(threshold),
        n_below=int(below.sum()), step=float(resid[order[:below_count]].sum() * inverse),
        delta_r2=float(observed * rss0 / tss), statistic=float(observed),
        p_value=float(p_value), p_adjusted=float("nan"), flagged=bool(p_value < alpha),
    )


def _fit_nulls(X_all: np.ndarray, y_all: np.ndarray, per_rater: list[np.ndarray],
               raters: list[int], scale: str, scale_min: float | None,
               scale_max: float | None) -> dict[int, tuple[LinearNull, np.ndarray]]:
    """Each listed rater's straight-line null under the scale: ``{rater: (null, its rows)}``.

    Raters are fitted together, one batch per set of design columns that vary in their
    cases (a column constant for a rater has no weight to fit).
    """
    if not raters:
        return {}
    y_seen = np.concatenate([y_all[per_rater[g]] for g in raters])
    if scale == "binary":
        yes = float(np.max(y_seen)) if scale_max is None else float(scale_max)
        kind, y_all = "binary", (y_all == yes).astype(float)
    else:
        bounds = whole_step_bounds(y_seen, scale, scale_min, scale_max)
        kind = "continuous" if bounds is None else "rounded"
    batches: dict[tuple[int, ...], list[int]] = {}
    for g in raters:
        batches.setdefault(tuple(np.flatnonzero(np.ptp(X_all[per_rater[g]], axis=0) > 0)), []).append(g)
    nulls = {}
    for columns, members in batches.items():
        idx = np.concatenate([per_rater[g] for g in members])
        groups = np.repeat(np.arange(len(members)), [per_rater[g].size for g in members])
        null = fit_linear_null(X_all[np.ix_(idx, columns)], y_all[idx], groups, len(members),
                               kind=kind, scale_min=scale_min, scale_max=scale_max)
        starts = np.r_[0, np.cumsum([per_rater[g].size for g in members])]
        for i, g in enumerate(members):
            nulls[g] = (null, slice(starts[i], starts[i + 1]))
    return nulls
