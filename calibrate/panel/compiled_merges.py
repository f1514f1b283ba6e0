"""The merge loop of the policy grouping, compiled (numba), one batch after another.

The same algorithm as the lockstep numpy engine of :mod:`calibrate.panel.merges`
(:class:`~calibrate.panel.merges._PairCosts` and ``_merge_until``): each live group
keeps its cheapest merge, a pair's cost is computed exactly only where the lower bound
cannot rule it out, ties go to the lowest (i, j) slot pair, and an exact cost subtracts
the RSS of the side merged into most recently first. What differs is the bookkeeping:
the batches run one after another on one R x R pair matrix (memory O(R^2) instead of
O(B R^2)), and a step visits the live groups one at a time instead of gathering
(batches x slots) arrays. The small solves are a Cholesky factorisation written out
here, so a cost can differ from the numpy engine's in its last digits (tested: within
1e-9 relative, with the same merges).

Imported only when :func:`calibrate.panel.merges.agglomerate` picks this engine, so
small panels, the demo and ``calibrate --help`` never load numba. The first call on a
machine compiles (seconds) into numba's cache beside this file; ``make`` runs
:func:`warm_up` after installing, so that an audit only loads the compiled code.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .merges import _BOUND_ABSOLUTE_SLACK, batched_rss, bound_metric, bound_profiles

__all__ = ["merge_batches", "warm_up"]


@njit(cache=True)
def _forward_solve(matrix, rhs, p, chol, solved):
    """Cholesky factor L of the p x p ``matrix`` (lower triangle read) into ``chol`` and
    ``solved = L^-1 rhs``, a row at a time; returns ``|L^-1 rhs|^2``, or NaN when the
    matrix proves not positive definite."""
    explained = 0.0
    for a in range(p):
        for c in range(a + 1):
            value = matrix[a, c]
            for t in range(c):
                value -= chol[a, t] * chol[c, t]
            if c < a:
                chol[a, c] = value / chol[c, c]
            elif value > 0.0:
                chol[a, a] = np.sqrt(value)
            else:
                return np.nan
        value = rhs[a]
        for t in range(a):
            value -= chol[a, t] * solved[t]
        solved[a] = value / chol[a, a]
        explained += solved[a] * solved[a]
    return explained


@njit(cache=True)
def _merged_rss(sscp, lo, hi, p, work):
    """RSS of the judgment on the cues for the summed SSCPs of groups ``lo`` and ``hi``.

    As :func:`calibrate.panel.merges.merged_rss`: the cue block scaled to correlations
    C, the cue-judgment column to r, then ``S_yy - r' C^-1 r`` as ``S_yy - |L^-1 r|^2``
    with ``C = L L'``. NaN when C proves not positive definite (a sum of full-rank
    SSCPs never is).
    """
    chol, solved, scale, scaled = work
    for a in range(p):
        scale[a] = np.sqrt(sscp[lo, a, a] + sscp[hi, a, a])
    for a in range(p):
        for c in range(a + 1):
            scaled[a, c] = (sscp[lo, a, c] + sscp[hi, a, c]) / (scale[a] * scale[c])
    for a in range(p):  # the scales are not needed past here: r takes their place
        scale[a] = (sscp[lo, a, p] + sscp[hi, a, p]) / scale[a]
    explained = _forward_solve(scaled, scale, p, chol, solved)
    return max(sscp[lo, p, p] + sscp[hi, p, p] - explained, 0.0)


@njit(cache=True)
def _fill(x, y, groups, pairs, work):
    """Compute the exact cost of merging groups x and y, store it both ways, return it."""
    sscp, rss, last_merge, p = groups
    cost, exact, counter = pairs
    lo, hi = min(x, y), max(x, y)
    merged = _merged_rss(sscp, lo, hi, p, work)
    if last_merge[hi] > last_merge[lo]:
        value = merged - rss[hi] - rss[lo]
    else:
        value = merged - rss[lo] - rss[hi]
    cost[x, y] = value
    cost[y, x] = value
    exact[x, y] = True
    exact[y, x] = True
    counter[0] += 1
    return value


@njit(cache=True)
def _bound(x, y, profiles):
    """Lower bound on the cost of merging x and y (see :class:`merges._PairCosts`)."""
    u, norm, inv_a, low, slack, prune = profiles
    if not prune:
        return -np.inf
    dot = 0.0
    for t in range(u.shape[1]):
        dot += u[x, t] * u[y, t]
    distance = max(norm[x] + norm[y] - 2.0 * dot, 0.0)
    return distance / (inv_a[x] + inv_a[y]) - slack[x] - slack[y]


@njit(cache=True)
def _settle(x, live, n_live, groups, pairs, minima, work):
    """Make row x's minimum exact and record it (value and lowest column holding it).

    First the row's smallest bound, then every bound not above the smallest exact cost
    so far; a bound above it cannot hold the minimum, so the smallest exact cost met
    is the row's minimum.
    """
    cost, exact, _ = pairs
    known, column, best, best_column = np.inf, -1, np.inf, -1
    for a in range(n_live):
        y = live[a]
        if y == x:
            continue
        if exact[x, y]:
            if cost[x, y] < known:
                known, column = cost[x, y], y
        elif cost[x, y] < best:
            best, best_column = cost[x, y], y
    _settle_bounded(x, known, column, best, best_column, live, n_live, groups, pairs,
                    minima, work)


@njit(cache=True)
def _settle_bounded(x, known, column, best, best_column, live, n_live, groups, pairs,
                    minima, work):
    """The rest of :func:`_settle`, given the row's smallest exact cost (``known`` at
    ``column``) and smallest bound (``best`` at ``best_column``)."""
    cost, exact, _ = pairs
    row_min, row_arg = minima
    if best_column >= 0 and best <= known:
        value = _fill(x, best_column, groups, pairs, work)
        if value < known or (value == known and best_column < column):
            known, column = value, best_column
    for a in range(n_live):
        y = live[a]
        if y != x and not exact[x, y] and cost[x, y] <= known:
            value = _fill(x, y, groups, pairs, work)
            if value < known or (value == known and y < column):
                known, column = value, y
    row_min[x] = known
    row_arg[x] = column


@njit(cache=True)
def _refresh_profile(i, low_merged, groups, profiles, root, work):
    """The bound's profile of merged group i (as :func:`merges.bound_profiles` with
    ``low`` given): beta by Cholesky of the cue block, ``u = beta W^1/2``."""
    sscp, _, _, p = groups
    u, norm, inv_a, low, slack, _ = profiles
    chol, beta = work[0], work[1]
    usable = np.isfinite(_forward_solve(sscp[i], sscp[i, :p, p], p, chol, beta))
    if usable:
        for a in range(p - 1, -1, -1):
            value = beta[a]
            for t in range(a + 1, p):
                value -= chol[t, a] * beta[t]
            beta[a] = value / chol[a, a]
    length = 0.0
    for t in range(p):
        value = 0.0
        if usable:
            for a in range(p):
                value += beta[a] * root[a, t]
        usable = usable and np.isfinite(value)
        u[i, t] = value
        length += value * value
    usable = usable and np.isfinite(low_merged)
    if not usable:  # a = 0: the group's bounds are never above a cost
        u[i, :] = 0.0
        low_merged, length = 0.0, 0.0
    low[i] = low_merged
    norm[i] = (1.0 - 1e-12) * length
    inv_a[i] = 1.0 / max(low_merged, 1e-300) if low_merged > 0 else np.inf
    slack[i] = _BOUND_ABSOLUTE_SLACK * sscp[i, p, p]


@njit(cache=True)
def _merge_batch(b, groups, profiles, root, alive, stop_at, record, pairs, records):
    """Every merge of batch b, cheapest first, until ``stop_at`` groups are left.

    Writes the merges into ``records`` (per step: slot kept, slot absorbed, cost, RSS
    total, groups before) at column b; returns the number of merges.
    """
    sscp, rss, last_merge, p = groups
    cost, exact, _ = pairs
    kept_at, absorbed_at, cost_at, total_at, groups_at = records
    R = alive.shape[0]
    work = (np.empty((p, p)), np.empty(p), np.empty(p), np.empty((p, p)))
    live = np.empty(R, np.int64)
    n_live = 0
    for r in range(R):
        if alive[r]:
            live[n_live] = r
            n_live += 1
    minima = (np.full(R, np.inf), np.full(R, -1, np.int64))
    row_min, row_arg = minima
    stale_rows = np.empty(R, np.int64)
    closer = np.empty(R, np.int64)
    for a in range(n_live):
        x = live[a]
        for c in range(a + 1, n_live):
            y = live[c]
            value = _bound(x, y, profiles)
            cost[x, y] = value
            cost[y, x] = value
            exact[x, y] = False
            exact[y, x] = False
    for a in range(n_live):
        _settle(live[a], live, n_live, groups, pairs, minima, work)
    low = profiles[3]
    step = 0
    while n_live > stop_at:
        first, best = live[0], np.inf
        for a in range(n_live):
            if row_min[live[a]] < best:
                first, best = live[a], row_min[live[a]]
        second = row_arg[first]
        i, j = min(first, second), max(first, second)
        step_cost = cost[i, j]
        if record:
            total = 0.0
            for a in range(n_live):
                total += rss[live[a]]
            total_at[step, b] = total
        kept_at[step, b] = i
        absorbed_at[step, b] = j
        cost_at[step, b] = step_cost
        groups_at[step, b] = n_live
        # j's statistics into i (as merges._pool)
        sscp[i] += sscp[j]
        sscp[j] = 0.0
        rss[i] += rss[j] + step_cost
        rss[j] = 0.0
        last_merge[i] = step
        row_min[j] = np.inf
        gone = 0
        while live[gone] != j:
            gone += 1
        for a in range(gone, n_live - 1):  # the live slots stay in order: ties as before
            live[a] = live[a + 1]
        n_live -= 1
        if profiles[5]:
            # Weyl's inequality: lambda_min(A + B) >= lambda_min(A) + lambda_min(B)
            _refresh_profile(i, low[i] + low[j], groups, profiles, root, work)
        # Row and column i are all bounds now. The rows whose minimum was i or j are
        # settled again; another row's minimum moves to i only if its cost to i could
        # undercut it, i.e. its bound does not lie above it (few rows).
        n_stale, n_closer, best, best_column = 0, 0, np.inf, -1
        for a in range(n_live):
            y = live[a]
            if y == i:
                continue
            value = _bound(i, y, profiles)
            cost[i, y] = value
            cost[y, i] = value
            exact[i, y] = False
            exact[y, i] = False
            if value < best:
                best, best_column = value, y
            if row_arg[y] == i or row_arg[y] == j:
                stale_rows[n_stale] = y
                n_stale += 1
            elif value <= row_min[y]:
                closer[n_closer] = y
                n_closer += 1
        _settle_bounded(i, np.inf, -1, best, best_column, live, n_live, groups, pairs,
                        minima, work)
        for a in range(n_stale):
            _settle(stale_rows[a], live, n_live, groups, pairs, minima, work)
        for a in range(n_closer):
            y = closer[a]
            value = cost[i, y] if exact[i, y] else _fill(i, y, groups, pairs, work)
            if value < row_min[y] or (value == row_min[y] and i < row_arg[y]):
                row_min[y] = value
                row_arg[y] = i
        step += 1
    return step


@njit(cache=True)
def _merge_all(sscp, rss, active, u, norm, inv_a, low, slack, root, prune, p, stop_at,
               record, n_steps, cost, exact):
    """Every batch's merges, one batch after another, on one R x R pair matrix.

    Inputs are work copies (overwritten). Returns the per-step records (step, batch),
    each batch's number of merges, final slot labels, last costs and exact-cost count.
    """
    B, R = active.shape
    counter = np.zeros(1, np.int64)
    records = (np.zeros((n_steps, B), np.int64), np.zeros((n_steps, B), np.int64),
               np.zeros((n_steps, B)), np.zeros((n_steps, B)), np.zeros((n_steps, B), np.int64))
    steps = np.zeros(B, np.int64)
    labels = np.full((B, R), -1, np.int64)
    last_cost = np.full(B, np.nan)
    final = np.empty(R, np.int64)
    for b in range(B):
        groups = (sscp[b], rss[b], np.full(R, -1, np.int64), p)
        profiles = (u[b], norm[b], inv_a[b], low[b], slack[b], prune)
        steps[b] = _merge_batch(b, groups, profiles, root, active[b], stop_at, record,
                                (cost, exact, counter), records)
        # Each slot's final group, from the last merge back (as merges._merge_until)
        for r in range(R):
            final[r] = r
        for s in range(steps[b] - 1, -1, -1):
            final[records[1][s, b]] = final[records[0][s, b]]
        for r in range(R):
            if active[b, r]:
                labels[b, r] = final[r]
        if steps[b]:
            last_cost[b] = records[2][steps[b] - 1, b]
    return records, steps, labels, last_cost, counter[0]


def merge_batches(group_sscp, group_n, group_rss, active, p, stop_at, record):
    """The merges of :func:`calibrate.panel.merges.agglomerate`, compiled.

    ``group_sscp`` and ``group_rss`` are the caller's work copies (overwritten).
    Returns ``(labels, history, last_cost, n_exact)`` as the numpy engine gives them:
    ``history`` holds per lockstep step ``(batches, slot kept, slot absorbed, cost,
    RSS total, groups)`` over the batches still merging (empty without ``record``).
    """
    B, R = active.shape
    u, norm = np.zeros((B, R, p)), np.zeros((B, R))
    inv_a, low = np.full((B, R), np.inf), np.zeros((B, R))
    slack = _BOUND_ABSOLUTE_SLACK * group_sscp[:, :, p, p]
    metric = bound_metric(group_sscp, group_n, active, p) if active.any() else None
    root = np.eye(p)
    if metric is not None:
        root, inv_root = metric
        bb, gg = np.nonzero(active)
        profile = bound_profiles(group_sscp[bb, gg], p, root, inv_root)
        for array, values in zip((u, norm, inv_a, low, slack), profile):
            array[bb, gg] = values
    n_groups = active.sum(axis=1)
    n_steps = int(np.maximum(n_groups - stop_at, 0).max(initial=0))
    records, steps, labels, last_cost, n_exact = _merge_all(
        np.ascontiguousarray(group_sscp, dtype=float), np.ascontiguousarray(group_rss, dtype=float),
        np.ascontiguousarray(active, dtype=bool), u, norm, inv_a, low, np.ascontiguousarray(slack),
        np.ascontiguousarray(root), metric is not None, int(p), int(stop_at), bool(record), n_steps,
        # The pair matrix comes from numpy, which asks for huge pages on large arrays
        # (numba's own allocator does not): its column writes then miss the TLB far less
        # (4 batches of shared 2,000: 0.6-1.0 s against 1.4-1.5 s, a noisy measurement).
        np.empty((R, R)), np.zeros((R, R), bool))
    history = []
    if record:
        kept, absorbed, costs, totals, sizes = records
        for s in range(n_steps):
            todo = np.flatnonzero(steps > s)
            history.append((todo, kept[s, todo], absorbed[s, todo], costs[s, todo],
                            totals[s, todo], sizes[s, todo]))
    return labels, history, last_cost, int(n_exact)


def warm_up() -> None:
    """Compile the engine into numba's cache (or load it from there) on a tiny panel."""
    rng = np.random.default_rng(0)
    B, R, p = 2, 6, 2
    rows = rng.normal(size=(B, R, 12, p + 1))
    centred = rows - rows.mean(axis=2, keepdims=True)
    sscp = np.einsum("brmi,brmj->brij", centred, centred)
    n = np.full((B, R), 12.0)
    active = np.ones((B, R), bool)
    merge_batches(sscp.copy(), n, batched_rss(sscp, n, p), active, p, 1, True)
