"""The merge sequence of the policy grouping, computed from sufficient statistics.

Each rater is summarised by the centred sums of squares and cross-products (SSCP)
of ``[cues..., judgment]``. A group's common equation (shared cue weights, an
intercept per rater) is the regression on the *sum* of its raters' SSCPs, so a merge
costs ``RSS_{a+b} - RSS_a - RSS_b`` without refitting rows (Ward 1963, error sum of
squares criterion). :func:`agglomerate` runs a batch of groupings in lockstep (the
full data, every case resample, every simulated panel), and :func:`stacked_sscp`
builds the SSCPs of all those variants by sparse matrix products.

Used by :mod:`calibrate.grouping` (the public entry point) and
:mod:`calibrate.grouping_stability`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

from .linalg import GroupedSSCP, grouped_sscp, ols_from_sscp

__all__ = [
    "Agglomeration",
    "agglomerate",
    "batched_rss",
    "group_label",
    "labels_at",
    "merged_rss",
    "name_groups",
    "stacked_sscp",
    "standardized_weights",
]

#: Largest batch of small regressions solved in one call (bounds memory).
_FIT_CHUNK = 50_000


def group_label(i: int) -> str:
    """'A'..'Z', then 'AA', 'AB', ... (spreadsheet-style)."""
    label = ""
    i += 1
    while i:
        i, rem = divmod(i - 1, 26)
        label = chr(65 + rem) + label
    return label


def batched_rss(sscp: np.ndarray, n: np.ndarray, p: int) -> np.ndarray:
    """RSS of the judgment (last column) on the p cues for a stack of centred SSCPs.

    NaN where the cues are rank-deficient in that SSCP.
    """
    shape = sscp.shape[:-2]
    k = sscp.shape[-1]
    flat = sscp.reshape(-1, k, k)
    flat_n = np.broadcast_to(n, shape).reshape(-1)
    out = np.empty(flat.shape[0])
    cols = np.arange(p)
    for start in range(0, flat.shape[0], _FIT_CHUNK):
        stop = start + _FIT_CHUNK
        stats = GroupedSSCP(n=flat_n[start:stop], mean=np.zeros((len(flat_n[start:stop]), k)),
                            sscp=flat[start:stop])
        out[start:stop] = ols_from_sscp(stats, cols, p).rss
    return out.reshape(shape)


def merged_rss(sscp: np.ndarray, n: np.ndarray, p: int) -> np.ndarray:
    """RSS for stacked SSCPs of merged groups, (M, k, k) -> (M,).

    A sum of full-rank rater SSCPs is full rank, so a batched solve on the
    correlation-scaled cue block suffices (no eigen-decomposition: about 10 times
    faster than :func:`ols_from_sscp`, which also checks rank). Should a chunk still
    prove singular, it goes through the rank-checked path.
    """
    out = np.empty(sscp.shape[0])
    for start in range(0, sscp.shape[0], _FIT_CHUNK):
        part = sscp[start:start + _FIT_CHUNK]
        d = np.sqrt(np.einsum("mii->mi", part[:, :p, :p]))
        corr = part[:, :p, :p] / (d[:, :, None] * d[:, None, :])
        rhs = part[:, :p, p] / d
        try:
            coef = np.linalg.solve(corr, rhs[..., None])[..., 0]
        except np.linalg.LinAlgError:
            out[start:start + _FIT_CHUNK] = batched_rss(part, n[start:start + _FIT_CHUNK], p)
            continue
        out[start:start + _FIT_CHUNK] = np.maximum(
            part[:, p, p] - np.einsum("mp,mp->m", coef, rhs), 0.0)
    return out


@dataclass
class Agglomeration:
    """Lockstep merge state for a batch of B groupings of R raters."""

    labels: np.ndarray          # (B, R) slot each rater currently belongs to; -1 absent
    history: list               # per step: (b-array, i, j, cost, rss_total, n_groups)
    last_cost: np.ndarray       # (B,) RSS cost of each batch's last merge (NaN: none)
    tss: np.ndarray             # (B,) sum of the active raters' centred SS of judgments


def agglomerate(sscp: np.ndarray, n: np.ndarray, active: np.ndarray, p: int,
                stop_at: int, record: bool) -> Agglomeration:
    """Merge groups bottom-up, the cheapest merge first, in every batch at once.

    sscp : (B, R, k, k) centred SSCP per rater; n : (B, R) judgments per rater;
    active : (B, R) raters taking part. Merging stops in a batch when it has
    ``stop_at`` groups. Ties go to the lowest (i, j) slot pair, so runs repeat.
    """
    B, R = active.shape
    group_sscp = np.where(active[:, :, None, None], sscp, 0.0)
    group_n = np.where(active, n, 0.0)
    group_rss = np.where(active, batched_rss(group_sscp, group_n, p), 0.0)
    labels = np.where(active, np.arange(R)[None, :], -1)

    cost = np.full((B, R, R), np.inf)
    iu, ju = np.triu_indices(R, k=1)
    all_bb, all_pair = np.nonzero(active[:, iu] & active[:, ju])
    # In chunks: B * R^2 / 2 stacked SSCPs at once would take gigabytes for big panels.
    for start in range(0, all_bb.size, _FIT_CHUNK):
        bb, pair = all_bb[start:start + _FIT_CHUNK], all_pair[start:start + _FIT_CHUNK]
        a, b = iu[pair], ju[pair]
        pair_rss = merged_rss(group_sscp[bb, a] + group_sscp[bb, b],
                               group_n[bb, a] + group_n[bb, b], p)
        cost[bb, a, b] = pair_rss - group_rss[bb, a] - group_rss[bb, b]
        cost[bb, b, a] = cost[bb, a, b]
    alive = active.copy()

    history = []
    last_cost = np.full(B, np.nan)
    n_groups = active.sum(axis=1)
    batch = np.arange(B)
    while True:
        todo = batch[n_groups > stop_at]
        if todo.size == 0:
            break
        flat = (cost if todo.size == B else cost[todo]).reshape(todo.size, -1).argmin(axis=1)
        i, j = np.divmod(flat, R)
        i, j = np.minimum(i, j), np.maximum(i, j)
        step_cost = cost[todo, i, j]
        last_cost[todo] = step_cost
        if record:
            history.append((todo.copy(), i.copy(), j.copy(), step_cost.copy(),
                            group_rss[todo].sum(axis=1), n_groups[todo].copy()))
        group_sscp[todo, i] += group_sscp[todo, j]
        group_n[todo, i] += group_n[todo, j]
        group_sscp[todo, j] = 0.0
        group_n[todo, j] = 0.0
        group_rss[todo, i] += group_rss[todo, j] + step_cost
        group_rss[todo, j] = 0.0
        moved = labels[todo] == j[:, None]
        labels[todo] = np.where(moved, i[:, None], labels[todo])
        cost[todo, j, :] = np.inf
        cost[todo, :, j] = np.inf
        n_groups[todo] -= 1
        alive[todo, j] = False
        live = alive[todo]
        live[np.arange(todo.size), i] = False
        rows, other = np.nonzero(live)
        tb, ti = todo[rows], i[rows]
        new_rss = merged_rss(group_sscp[tb, ti] + group_sscp[tb, other],
                              group_n[tb, ti] + group_n[tb, other], p)
        cost[tb, ti, other] = new_rss - group_rss[tb, ti] - group_rss[tb, other]
        cost[tb, other, ti] = cost[tb, ti, other]
    tss = np.where(active, sscp[:, :, p, p], 0.0).sum(axis=1)
    return Agglomeration(labels=labels, history=history, last_cost=last_cost, tss=tss)


def labels_at(labels_start: np.ndarray, history: list, n_steps: int) -> np.ndarray:
    """Slot labels (single batch) after the first ``n_steps`` merges."""
    labels = labels_start.copy()
    for _, i, j, *_ in history[:n_steps]:
        labels = np.where(labels == j[0], i[0], labels)
    return labels


def name_groups(slots: np.ndarray, raters: list[str]) -> list[str | None]:
    """Letters by group size (largest 'A'); ties by the group's first rater id."""
    present = sorted({int(s) for s in slots if s >= 0})
    members = {s: [raters[k] for k in np.flatnonzero(slots == s)] for s in present}
    order = sorted(present, key=lambda s: (-len(members[s]), min(members[s])))
    name = {s: group_label(pos) for pos, s in enumerate(order)}
    return [name[int(s)] if s >= 0 else None for s in slots]


def standardized_weights(coef: np.ndarray, sscp: np.ndarray, p: int) -> np.ndarray:
    """Standardized weights b_j * sd(x_j) / sd(y) from a centred SSCP (any leading shape)."""
    d = np.sqrt(np.einsum("...ii->...i", sscp))
    with np.errstate(invalid="ignore", divide="ignore"):
        return coef * d[..., :p] / d[..., p:p + 1]


def stacked_sscp(Z, who, R, *, weights=None, judgments=None):
    """Per-rater centred SSCPs for B variants of the data, without copying rows.

    Variant ``b`` either weights the rows by ``weights[b]`` (case resamples as count
    vectors) or replaces the judgment column by ``judgments[b]`` (simulated
    judgments). Rows are first centred at each rater's full-data mean (so the
    moments below suffer no cancellation), then every variant's weighted sums
    and cross-products come from one sparse matrix product per moment:
    ``S = sum w z z' - (sum w z)(sum w z)' / sum w``. Returns ``sscp`` (B, R, k, k)
    and ``n`` (B, R); equal to :func:`grouped_sscp` per variant (tested).
    """
    m, k = Z.shape
    p = k - 1
    base = grouped_sscp(Z, who, R)
    centred = Z - base.mean[who]
    rows = np.arange(m)

    def scatter(values):  # (m, w) -> sparse (m, R * w), rater blocks side by side
        w = values.shape[1]
        cols = (who[:, None] * w + np.arange(w)[None, :]).ravel()
        return sparse.csr_array((values.ravel(), (np.repeat(rows, w), cols)), shape=(m, R * w))

    def times(dense, matrix):  # dense (B, m) @ sparse (m, c) -> dense (B, c)
        return np.asarray((matrix.T @ dense.T).T)

    indicator = scatter(np.ones((m, 1)))
    if judgments is None:
        B = weights.shape[0]
        n = times(weights, indicator)
        sums = times(weights, scatter(centred)).reshape(B, R, k)
        outer = (centred[:, :, None] * centred[:, None, :]).reshape(m, k * k)
        moments = times(weights, scatter(outer)).reshape(B, R, k, k)
        with np.errstate(invalid="ignore", divide="ignore"):
            shift = sums[..., :, None] * sums[..., None, :] / n[..., None, None]
        sscp = moments - np.where(n[..., None, None] > 0, shift, 0.0)
        diagonal = np.einsum("brii->bri", sscp)  # a writable view
        np.maximum(diagonal, 0.0, out=diagonal)  # rounding can leave -1e-17
        return sscp, n
    B = judgments.shape[0]
    n = np.broadcast_to(base.n, (B, R)).copy()
    sums = times(judgments, indicator)
    cross = times(judgments, scatter(centred[:, :p])).reshape(B, R, p)
    with np.errstate(invalid="ignore", divide="ignore"):
        ss = times(judgments * judgments, indicator) - np.where(n > 0, sums * sums / n, 0.0)
    sscp = np.broadcast_to(base.sscp, (B, R, k, k)).copy()
    sscp[..., :p, p] = cross
    sscp[..., p, :p] = cross
    sscp[..., p, p] = np.maximum(ss, 0.0)
    return sscp, n

