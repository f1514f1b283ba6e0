"""The cut-off check's threshold search over simulated sets, compiled (numba).

The same additions, products and maximum as the numpy searches of
:mod:`calibrate.lens.cutoffs`, so the results are equal to the bit: a running sum of the
residuals per searched column in that column's case order, each count's square times
its weight (zero where the count is no admissible threshold), the largest over columns
and counts. :func:`best_running_gain` follows ``_steps_from_residuals`` (one running sum
case by case); :func:`best_blocked_gain` follows ``_best_steps_cases_first`` (a sum
within each block of cases, the blocks' totals carried on). What differs is that no
(sets x columns x cases) array is written: each set keeps one running sum and one best
value, which is what the many small searches of the per-rater rounds spend their time on.
The inputs are finite (simulated judgments and their residuals), where ``>`` and numpy's
maximum agree.

Imported only when :func:`calibrate.lens.cutoffs._best_steps` takes this path. The first
call on a machine compiles into numba's cache beside this file; ``make`` runs
:func:`warm_up` after installing.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["best_blocked_gain", "best_running_gain", "warm_up"]


@njit(cache=True)
def best_running_gain(resid, case_orders, step_weights):
    """Per row of ``resid`` (sets, cases): the largest ``weight * (running sum)^2`` over the
    searched columns, each column's running sum taken in its order, ``case_orders``
    (columns * cases,), with ``step_weights`` (columns, cases)."""
    sets, n = resid.shape
    columns = step_weights.shape[0]
    best = np.empty(sets)
    for s in range(sets):
        top = -np.inf
        for c in range(columns):
            run = 0.0
            for k in range(n):
                run += resid[s, case_orders[c * n + k]]
                gain = run * run * step_weights[c, k]
                if gain > top:
                    top = gain
        best[s] = top
    return best


@njit(cache=True)
def best_blocked_gain(resid, case_orders, step_weights, block):
    """:func:`best_running_gain` with the sets along the columns of ``resid`` (cases, sets)
    and the running sums formed in blocks of ``block`` cases, as the cases-first numpy
    search forms them: within a block case by case, then plus the carried total of the
    blocks before it."""
    n, sets = resid.shape
    columns = step_weights.shape[0]
    best = np.full(sets, -np.inf)
    local = np.empty(sets)
    carried = np.empty(sets)
    for c in range(columns):
        for start in range(0, n, block):
            local[:] = 0.0
            for k in range(start, min(start + block, n)):
                row = case_orders[c * n + k]
                weight = step_weights[c, k]
                if start == 0:
                    for s in range(sets):
                        local[s] += resid[row, s]
                        gain = local[s] * local[s] * weight
                        if gain > best[s]:
                            best[s] = gain
                else:
                    for s in range(sets):
                        local[s] += resid[row, s]
                        value = local[s] + carried[s]
                        gain = value * value * weight
                        if gain > best[s]:
                            best[s] = gain
            if start == 0:
                carried[:] = local
            else:
                for s in range(sets):
                    carried[s] = local[s] + carried[s]
    return best


def warm_up() -> None:
    """Compile both searches into numba's cache (or load them from there) on a tiny input."""
    rng = np.random.default_rng(0)
    resid = rng.normal(size=(3, 14))
    orders = np.concatenate([rng.permutation(14) for _ in range(2)]).astype(np.intp)
    weights = rng.uniform(size=(2, 14))
    best_running_gain(resid, orders, weights)
    best_blocked_gain(np.ascontiguousarray(resid.T), orders, weights, 12)
