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

The join of the keep-apart rule's pieces (:func:`join_pieces`, for
``stability._join_pieces_lockstep``) is compiled here too, on the same terms: the
numpy join's pick and verdicts, one batch after another, one P x P pair matrix.

Imported only when :func:`calibrate.panel.merges.agglomerate` or the join picks this
engine, so small panels, the demo and ``calibrate --help`` never load numba. The first
call on a machine compiles (seconds) into numba's cache beside this file; ``make`` runs
:func:`warm_up` after installing, so that an audit only loads the compiled code.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .merges import _BOUND_ABSOLUTE_SLACK, batched_rss, bound_metric, bound_profiles
from .stability import _BRACKET_SLACK, KeepApartRule, common_weights

__all__ = ["join_pieces", "merge_batches", "warm_up"]


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
def _back_solve(chol, solved, p):
    """``solved`` from ``L^-1 rhs`` to ``L'^-1 L^-1 rhs``, in place (``chol``: L)."""
    for a in range(p - 1, -1, -1):
        value = solved[a]
        for t in range(a + 1, p):
            value -= chol[t, a] * solved[t]
        solved[a] = value / chol[a, a]


@njit(cache=True)
def _refresh_profile(i, low_merged, groups, profiles, root, work):
    """The bound's profile of merged group i (as :func:`merges.bound_profiles` with
    ``low`` given): beta by Cholesky of the cue block, ``u = beta W^1/2``."""
    sscp, _, _, p = groups
    u, norm, inv_a, low, slack, _ = profiles
    chol, beta = work[0], work[1]
    usable = np.isfinite(_forward_solve(sscp[i], sscp[i, :p, p], p, chol, beta))
    if usable:
        _back_solve(chol, beta, p)
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


@njit(cache=True)
def _size_class(smaller):
    """:func:`stability.size_class` of one count: floor(log2(max(n, 1))), in whole numbers."""
    remaining, out = max(smaller, 1), -1
    while remaining:
        remaining >>= 1
        out += 1
    return out


@njit(cache=True, error_model="numpy")
def _kept_apart(loss, smaller, rule):
    """:meth:`stability.KeepApartRule.apart` of one merge (NaN never kept apart)."""
    threshold, alpha, scale, null_max = rule
    if not loss > threshold or scale.size == 0:
        return False
    scaled = loss / scale[min(_size_class(smaller), scale.size - 1)]
    if not np.isfinite(scaled):
        return False
    # numpy's searchsorted (side "left"): how many of the sorted null_max lie below
    # scaled; a NaN there sorts last and is never below.
    lo, hi = 0, null_max.size
    while lo < hi:
        middle = (lo + hi) // 2
        if null_max[middle] < scaled:
            lo = middle + 1
        else:
            hi = middle
    return (1.0 + (null_max.size - lo)) / (null_max.size + 1.0) < alpha


@njit(cache=True)
def _common_weights(sscp, lo, hi, p, work, out):
    """Common weights of the summed SSCPs of groups ``lo`` and ``hi`` into ``out``
    (Cholesky of the cue block; NaN when it proves not positive definite)."""
    chol, rhs, summed = work[0], work[2], work[3]
    for a in range(p):
        for c in range(a + 1):
            summed[a, c] = sscp[lo, a, c] + sscp[hi, a, c]
        rhs[a] = sscp[lo, a, p] + sscp[hi, a, p]
    if np.isfinite(_forward_solve(summed, rhs, p, chol, out)):
        _back_solve(chol, out, p)
    else:
        out[:] = np.nan


@njit(cache=True, error_model="numpy")
def _side_loss(first, second, pieces, work, merged):
    """:func:`stability.merge_side_loss` of joining two pieces, their own weights kept."""
    group, _, own_weights, _, p = pieces
    _common_weights(group, first, second, p, work, merged)
    worst = -np.inf
    for side in (first, second):
        quadratic = 0.0
        for a in range(p):
            gap_a = merged[a] - own_weights[side, a]
            for c in range(p):
                quadratic += gap_a * group[side, a, c] * (merged[c] - own_weights[side, c])
        loss = quadratic / group[side, p, p]
        if np.isnan(loss) or np.isnan(worst):  # np.maximum: a NaN side wins
            worst = np.nan
        elif loss > worst:
            worst = loss
    return worst


@njit(cache=True, error_model="numpy")
def _score_pieces(first, second, pieces, rule, pairs, work):
    """Cost and verdict of joining pieces ``first < second`` (as the numpy join's
    ``score``: the verdict from the cost's bracket where it is certain, else from the
    side loss)."""
    group, own_rss, _, size, p = pieces
    cost, allowed, nothing, merged = pairs
    both = _merged_rss(group, first, second, p, work)
    value = both - own_rss[first] - own_rss[second]
    cost[first, second] = value
    smaller = min(size[first], size[second])
    syy_a, syy_b = group[first, p, p], group[second, p, p]
    slack = _BRACKET_SLACK * (abs(both) + own_rss[first] + own_rss[second])
    low = (value - slack) / (syy_a + syy_b) * (1.0 - _BRACKET_SLACK)
    high = (value + slack) / min(syy_a, syy_b) * (1.0 + _BRACKET_SLACK)
    together = not _kept_apart(high, smaller, rule)
    sure = (together or _kept_apart(low, smaller, rule)) and np.isfinite(low) and np.isfinite(high)
    if not sure:
        together = not _kept_apart(_side_loss(first, second, pieces, work, merged), smaller, rule)
    allowed[first, second] = together
    return together


@njit(cache=True)
def _join_key(cost, allowed, x, y):
    """The numpy join's ranking of pair (x, y): its cost if allowed (NaN first, then a
    cost of -inf, as ``nan_to_num(nan=-inf)`` orders them), +inf if not."""
    if not allowed[x, y]:
        return np.inf
    value = cost[x, y]
    if np.isnan(value):
        return -np.inf
    if value == -np.inf:
        return -np.finfo(np.float64).max
    return value


@njit(cache=True)
def _row_minimum(x, n_pieces, cost, allowed, row_best, row_arg):
    """Row x's cheapest allowed pair (the first column on a tie; column 0 if none)."""
    best, column = np.inf, 0
    for y in range(n_pieces):
        value = _join_key(cost, allowed, x, y)
        if value < best:
            best, column = value, y
    row_best[x] = best
    row_arg[x] = column


@njit(cache=True, error_model="numpy")
def _join_batch(n_pieces, pieces, rule, pairs, work, final):
    """Join one batch's pieces, cheapest allowed pair first, while any pair is allowed.

    Writes each piece's final piece into ``final``. The order and bookkeeping are the
    numpy join's (``stability._join_pieces_lockstep``) for one batch.
    """
    group, own_rss, own_weights, size, p = pieces
    cost, allowed, nothing, _ = pairs
    alive = np.zeros(n_pieces, np.bool_)
    alive[:] = True
    n_allowed = 0
    for x in range(n_pieces):
        for y in range(n_pieces):
            allowed[x, y] = False
    for x in range(n_pieces):
        for y in range(x + 1, n_pieces):
            n_allowed += int(_score_pieces(x, y, pieces, rule, pairs, work))
    row_best, row_arg = np.full(n_pieces, np.inf), np.zeros(n_pieces, np.int64)
    for x in range(n_pieces):
        _row_minimum(x, n_pieces, cost, allowed, row_best, row_arg)
    kept, absorbed = np.empty(n_pieces, np.int64), np.empty(n_pieces, np.int64)
    n_joins = 0
    while n_allowed > 0:
        keep = 0
        for x in range(1, n_pieces):
            if row_best[x] < row_best[keep]:
                keep = x
        gone = row_arg[keep]
        if row_best[keep] == np.inf:  # every allowed pair costs +inf: the first allowed
            found = False
            for x in range(n_pieces):
                for y in range(x + 1, n_pieces):
                    if allowed[x, y] and not found:
                        keep, gone, found = x, y, True
        kept[n_joins], absorbed[n_joins] = keep, gone
        n_joins += 1
        for a in range(p + 1):
            for c in range(p + 1):
                group[keep, a, c] = group[keep, a, c] + group[gone, a, c]
        size[keep] += size[gone]
        alive[gone] = False
        for slot in (gone, keep):
            for y in range(n_pieces):
                n_allowed -= int(allowed[slot, y]) + int(allowed[y, slot])
                allowed[slot, y] = False
                allowed[y, slot] = False
        own_rss[keep] = _merged_rss(group, keep, nothing, p, work)
        _common_weights(group, keep, nothing, p, work, own_weights[keep])
        for y in range(n_pieces):
            if alive[y] and y != keep:
                n_allowed += int(_score_pieces(min(y, keep), max(y, keep), pieces, rule, pairs,
                                               work))
        # Rows whose cheapest pair was cleared, and the two joined rows, in full; a row
        # below ``keep`` gained one new pair (column keep) and keeps its minimum unless
        # that pair undercuts it.
        for x in range(n_pieces):
            if x == keep or x == gone or row_arg[x] == keep or row_arg[x] == gone:
                _row_minimum(x, n_pieces, cost, allowed, row_best, row_arg)
            elif alive[x] and x < keep:
                value = _join_key(cost, allowed, x, keep)
                if value < row_best[x] or (value == row_best[x] and keep < row_arg[x]):
                    row_best[x], row_arg[x] = value, keep
    for x in range(n_pieces):  # each piece's final piece, from the last join back
        final[x] = x
    for s in range(n_joins - 1, -1, -1):
        final[absorbed[s]] = final[kept[s]]


@njit(cache=True)
def _join_all(group, n_pieces, own_rss, own_weights, size, p, rule):
    """Every batch's joins, one batch after another, on one P x P pair matrix.

    ``group`` (B, P + 1, k, k) with an all-zero last slot (a piece's own fit is the
    merged fit of it and that slot); the arrays are work copies (overwritten).
    """
    B, P = size.shape
    pairs = (np.empty((P, P)), np.zeros((P, P), np.bool_), P, np.empty(p))
    work = (np.empty((p, p)), np.empty(p), np.empty(p), np.empty((p, p)))
    final = np.zeros((B, P), np.int64)
    for x in range(P):
        final[:, x] = x
    for b in range(B):
        pieces = (group[b], own_rss[b], own_weights[b], size[b], p)
        _join_batch(n_pieces[b], pieces, rule, pairs, work, final[b])
    return final


def join_pieces(group, n_pieces, own_rss, own_weights, size, rule, p):
    """The joins of :func:`calibrate.panel.stability._join_pieces_lockstep`, compiled.

    ``group`` (B, P, k, k), ``own_rss`` (B, P), ``own_weights`` (B, P, p) and ``size``
    (B, P) of every batch's pieces, live in the first ``n_pieces[b]`` slots; not
    modified. Returns (B, P) each slot's final slot.
    """
    B, P = size.shape
    padded = np.zeros((B, P + 1) + group.shape[2:])
    padded[:, :P] = group
    rule_arrays = (float(rule.threshold), float(rule.alpha),
                   np.ascontiguousarray(rule.scale, dtype=float),
                   np.ascontiguousarray(rule.null_max, dtype=float))
    return _join_all(padded, np.asarray(n_pieces, dtype=np.int64),
                     np.array(own_rss, dtype=float), np.array(own_weights, dtype=float),
                     np.array(size, dtype=np.int64), int(p), rule_arrays)


def warm_up() -> None:
    """Compile the merge loop and the join into numba's cache (or load them from
    there) on a tiny panel."""
    rng = np.random.default_rng(0)
    B, R, p = 2, 6, 2
    rows = rng.normal(size=(B, R, 12, p + 1))
    centred = rows - rows.mean(axis=2, keepdims=True)
    sscp = np.einsum("brmi,brmj->brij", centred, centred)
    n = np.full((B, R), 12.0)
    active = np.ones((B, R), bool)
    merge_batches(sscp.copy(), n, batched_rss(sscp, n, p), active, p, 1, True)
    rule = KeepApartRule(0.0, 0.05, np.array([0.01]), np.array([0.0, 1.0]))
    join_pieces(sscp, np.full(B, R), batched_rss(sscp, n, p),
                common_weights(sscp.reshape(B * R, p + 1, p + 1), p).reshape(B, R, p),
                np.ones((B, R), int), rule, p)
