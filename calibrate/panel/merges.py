"""The merge sequence of the policy grouping, computed from sufficient statistics.

Each rater is summarised by the centred sums of squares and cross-products (SSCP)
of ``[cues..., judgment]``. A group's common equation (shared cue weights, an
intercept per rater) is the regression on the *sum* of its raters' SSCPs, so a merge
costs ``RSS_{a+b} - RSS_a - RSS_b`` without refitting rows (Ward 1963, error sum of
squares criterion). :func:`agglomerate` runs a batch of groupings in lockstep (the
full data, every case resample, every simulated panel), and :func:`stacked_sscp`
builds the SSCPs of all those variants by sparse matrix products.

Used by :mod:`calibrate.panel.grouping` (the public entry point) and
:mod:`calibrate.panel.stability`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

from ..policy.linalg import GroupedSSCP, grouped_sscp, ols_from_sscp

__all__ = [
    "Agglomeration",
    "agglomerate",
    "batched_rss",
    "group_label",
    "labels_at",
    "merged_rss",
    "name_groups",
    "release_work_memory",
    "stacked_sscp",
    "standardized_weights",
]

#: Largest batch of small regressions solved in one call (bounds memory).
_FIT_CHUNK = 50_000

#: Pair-cost matrices kept between groupings. Memory a process touches for the first
#: time costs far more than memory it reuses (measured on the 2-core machine: first
#: writes to 400 MB took 1.1 s, a second write 0.05 s), and a number-of-groups test
#: allocates the same B x R x R matrices once per level. Released by
#: :func:`release_work_memory`.
_SPARE: dict[str, np.ndarray] = {}


def _borrow(name: str, size: int, dtype) -> np.ndarray:
    """A flat array of ``size`` items, reusing the spare one of that name if big enough."""
    spare = _SPARE.pop(name, None)
    if spare is None or spare.size < size or spare.dtype != dtype:
        spare = np.empty(size, dtype=dtype)
    return spare


def _give_back(name: str, array: np.ndarray) -> None:
    _SPARE[name] = array


def release_work_memory() -> None:
    """Free the matrices kept between groupings (:func:`calibrate.panel.grouping.group_raters`
    calls this when it is done)."""
    _SPARE.clear()


def _compact_slots(array: np.ndarray, order: np.ndarray, square: bool) -> np.ndarray:
    """``array[b][order[b]]`` (and the same on axis 2 when ``square``), in its own memory.

    ``array`` (C-contiguous, batches on axis 0, slots on axis 1) is overwritten from
    the front: batch b's result ends before batch b + 1's input begins, and each batch
    is read whole before it is written, so nothing is read after being overwritten.
    """
    B, keep = order.shape
    shape = (B, keep) + ((keep,) if square else ()) + array.shape[3 if square else 2:]
    out = array.reshape(-1)[:int(np.prod(shape))].reshape(shape)
    for b in range(B):
        taken = array[b, order[b]]
        out[b] = taken[:, order[b]] if square else taken
    return out


def _nonzero(mask: np.ndarray) -> tuple[np.ndarray, ...]:
    """``np.nonzero(mask)``, from the flat positions (the same indices in the same order).

    Measured on a (20, 1,200) mask with 20 entries set: 62 us for np.nonzero, 8 us
    this way; the merge loop calls it five times a step.
    """
    return np.unravel_index(np.flatnonzero(mask), mask.shape)


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


#: Safety margins of the lower bound on a merge cost. A pair is skipped only when its
#: bound clears the current cheapest merge by more than rounding in either number can
#: explain: the bound is shrunk by a relative 1e-6, and by 1e-8 of the pair's pooled
#: sum of squares of judgments (rounding in an exact cost is about 1e-16 of that times
#: the condition number of the cues; our choice, generous on purpose).
_BOUND_RELATIVE_SLACK = 1e-6
_BOUND_ABSOLUTE_SLACK = 1e-8

#: Pair bounds computed per block of about this many entries (1 MB: in cache).
_BOUND_BLOCK = 131_072

#: Panels smaller than this use the plain engine (:class:`_AllCosts`): measured with
#: 100 resamples and 100 simulated panels, 16 raters took 0.132 s with it against
#: 0.145 s with :class:`_PairCosts`, 24 raters 0.256 s against 0.237 s.
_SMALL_PANEL = 20

#: Panels of at least this many raters use the compiled engine
#: (:mod:`calibrate.panel.compiled_merges`). Measured: CPU seconds of every merge of one
#: ``group_raters`` (numpy engine / compiled with numba's import and cache load, medians
#: of 3 fresh processes): 20 raters 0.24 / 0.53, 50 0.70 / 0.77, 100 0.82 / 0.95,
#: 200 0.89 / 0.72, 400 2.50 / 1.45, 2,000 20.4 / 9.0 (DEVELOPERS.md, "Speed at scale").
_COMPILED_PANEL = 200


def bound_metric(group_sscp, group_n, active, p):
    """``(W^1/2, W^-1/2)`` of the panel's pooled cue covariance W, the metric of the
    lower bound (see :class:`_PairCosts`); None when W is not positive definite."""
    pooled = group_sscp[active][:, :p, :p].sum(axis=0) / group_n[active].sum()
    evals, evecs = np.linalg.eigh(pooled)
    if not evals[0] > 0:
        return None
    return (evecs * np.sqrt(evals)) @ evecs.T, (evecs / np.sqrt(evals)) @ evecs.T


def bound_profiles(sscp, p, root, inv_root, low=None):
    """What the lower bound needs of each group of ``sscp`` (M, k, k): ``u = W^1/2 beta``,
    its squared length, ``1 / a``, ``a`` and the absolute slack (margins folded in).

    ``low``: a lower bound on each group's ``a`` already known (with its margin),
    instead of an eigen-decomposition (see :meth:`_PairCosts.refresh_profiles`).
    """
    cues = sscp[:, :p, :p]
    try:
        beta = np.linalg.solve(cues, sscp[:, :p, p:])[..., 0]
        if low is None:
            low = np.linalg.eigvalsh(inv_root @ cues @ inv_root)[:, 0]
            low = low * (1.0 - _BOUND_RELATIVE_SLACK)
    except np.linalg.LinAlgError:  # a sum of full-rank SSCPs is never singular
        beta, low = np.zeros((len(sscp), p)), np.zeros(len(sscp))
    u = beta @ root
    ok = np.isfinite(u).all(axis=1) & np.isfinite(low)
    # A group without a usable profile gets a = 0: its bounds are never above a cost.
    u = np.where(ok[:, None], u, 0.0)
    low = np.where(ok, low, 0.0)
    # Rounding of |u_x - u_y|^2 by expansion is far below 1e-12 of |u_x|^2 + |u_y|^2.
    norm = (1.0 - 1e-12) * np.einsum("mp,mp->m", u, u)
    with np.errstate(divide="ignore"):
        inv_a = np.where(low > 0, 1.0 / np.maximum(low, 1e-300), np.inf)
    return u, norm, inv_a, low, _BOUND_ABSOLUTE_SLACK * sscp[:, p, p]


@dataclass
class Agglomeration:
    """Lockstep merge state for a batch of B groupings of R raters."""

    labels: np.ndarray          # (B, R) slot each rater currently belongs to; -1 absent
    history: list               # per step: (b-array, i, j, cost, rss_total, n_groups)
    last_cost: np.ndarray       # (B,) RSS cost of each batch's last merge (NaN: none)
    tss: np.ndarray             # (B,) sum of the active raters' centred SS of judgments
    n_exact: int = 0            # pair costs computed exactly (the rest were ruled out)


class _PairCosts:
    """Merge costs of every pair of groups, exact where needed and bounded elsewhere.

    Entry ``cost[b, x, y]`` is the exact cost of merging groups x and y of batch b
    where ``exact[b, x, y]``, and otherwise a lower bound on it (inf for a dead group
    or the diagonal). Invariant kept for every live row x: each bounded entry of the
    row exceeds the row's smallest exact entry, so the row minimum (``row_min``,
    ``row_arg``: the smallest column holding it) is exact without computing the row.

    Lower bound. With ``A``, ``B`` the cue SSCPs of two groups and ``d`` the
    difference of their common weights, the cost of the merge is
    ``d' (A^-1 + B^-1)^-1 d`` (the numerator of the test of equal slopes, Chow 1960,
    Econometrica 28:591-605). For a fixed positive-definite metric ``W`` (the panel's
    pooled cue covariance) and ``a = lambda_min(W^-1/2 A W^-1/2)``, ``A >= a W``, so
    ``A^-1 + B^-1 <= (1/a + 1/b) W^-1`` and
    ``cost >= a b / (a + b) * |W^1/2 d|^2``: O(p) per pair once each group's ``a``
    and ``W^1/2 d`` are known (our derivation; tested against exact costs).
    """

    def __init__(self, group_sscp, group_n, group_rss, active, p, prune):
        self.sscp, self.n, self.rss, self.p = group_sscp, group_n, group_rss, p
        B, R = active.shape
        self.alive = active.copy()
        # Step of the last merge into each slot (-1: never). An exact cost subtracts the
        # RSS of the side merged into most recently first, as the costs were always
        # formed, so every digit stays as it was.
        self.last_merge = np.full((B, R), -1)
        self.prune = prune and bool(active.any())
        # Per group, for the bound (see _bound): W^1/2 beta, its squared length, 1 / a
        # and the absolute slack, each with its safety margin folded in.
        self.u = np.zeros((B, R, p))
        self.norm = np.zeros((B, R))
        self.inv_a = np.full((B, R), np.inf)
        self.low = np.zeros((B, R))   # the a of each group, its safety margin folded in
        self.slack = _BOUND_ABSOLUTE_SLACK * group_sscp[:, :, p, p]
        if self.prune:
            metric = bound_metric(group_sscp, group_n, active, p)
            self.prune = metric is not None
            if self.prune:
                self.root, self.inv_root = metric
        # Every batch of cost is set below; dead groups are masked by alive.
        self.cost_memory = _borrow("cost", B * R * R, float)
        self.exact_memory = _borrow("exact", B * R * R, bool)
        self.cost = self.cost_memory[:B * R * R].reshape(B, R, R)
        self.exact = self.exact_memory[:B * R * R].reshape(B, R, R)
        self.exact[...] = False
        self.row_min = np.full((B, R), np.inf)
        self.row_arg = np.full((B, R), -1)
        self.slot_of = np.broadcast_to(np.arange(R), (B, R)).copy()  # see compact()
        self.n_exact = 0
        self.refresh_profiles(*np.nonzero(active))
        # A few batches at a time keeps the temporaries small.
        per = max(1, 1_000_000 // max(R * R, 1))  # temporaries under 8 MB: see _SPARE
        for start in range(0, B, per):
            self._first_minima(slice(start, min(start + per, B)), active)

    def _first_minima(self, part, active):
        """Bound every pair of batches ``part`` (a slice), then settle every row's minimum."""
        R = active.shape[1]
        live = active[part]
        cost = self.cost[part]  # a view
        self.all_pair_bounds(part, out=cost)
        if not live.all():
            cost[~live] = np.inf
            np.copyto(cost, np.inf, where=~live[:, None, :])
        cost[:, np.arange(R), np.arange(R)] = np.inf
        # First each row's smallest bound (all entries are bounds yet), then every
        # entry bounded below the row's exact minimum so far.
        pb, pr = _nonzero(live)
        b, x, y, value = self.fill_exact(part.start + pb, pr, cost.argmin(axis=2)[pb, pr])
        known_min = np.where(live, np.inf, -np.inf)
        b -= part.start
        np.minimum.at(known_min, (b, x), value)
        np.minimum.at(known_min, (b, y), value)
        b, x, y = _nonzero(cost <= known_min[:, :, None])
        self.fill_exact(part.start + b, x, y)
        arg = cost.argmin(axis=2)
        self.row_arg[part] = np.where(live, arg, -1)
        smallest = np.take_along_axis(cost, arg[:, :, None], axis=2)[:, :, 0]
        self.row_min[part] = np.where(live, smallest, np.inf)

    # ------------------------------------------------------------------ profiles, bounds

    def refresh_profiles(self, bb, gg, low=None):
        """Metric weights ``W^1/2 beta`` and ``lambda_min`` of groups (bb, gg).

        ``low``: a lower bound on each group's ``a`` already known (with its margin),
        instead of an eigen-decomposition: for a merged group the sum of its two sides'
        (Weyl's inequality: ``lambda_min(A + B) >= lambda_min(A) + lambda_min(B)``).
        A smaller ``a`` only loosens the bound; the merges and digits do not change.
        """
        if not self.prune or bb.size == 0:
            return
        profile = bound_profiles(self.sscp[bb, gg], self.p, self.root, self.inv_root, low)
        for name, values in zip(("u", "norm", "inv_a", "low", "slack"), profile):
            getattr(self, name)[bb, gg] = values

    @staticmethod
    def _bound(dot, x, y):
        """Bounds from dot products ``dot`` of u (overwritten) and group quantities.

        ``x``, ``y``: (norm, inv_a, slack) of each side, broadcasting against ``dot``.
        ``|u_x - u_y|^2 / (1/a_x + 1/a_y)`` is the bound of the class docstring.
        """
        dot *= -2.0
        dot += x[0]
        dot += y[0]
        np.maximum(dot, 0.0, out=dot)
        dot /= x[1] + y[1]
        dot -= x[2]
        dot -= y[2]
        return dot

    def all_pair_bounds(self, part, out):
        """Bounds for every pair in batches ``part`` (a slice), written into ``out``."""
        if not self.prune:
            out[...] = -np.inf
            return out
        u = self.u[part]
        each = [q[part] for q in (self.norm, self.inv_a, self.slack)]
        # A block of rows at a time: the bound's nine passes then run over a block that
        # stays in cache instead of the whole (b, R, R) matrix (the same arithmetic
        # element by element). einsum: three times faster than matmul on a transposed
        # (b, p, R) view here.
        rows = max(1, _BOUND_BLOCK // max(out.shape[0] * out.shape[2], 1))
        for start in range(0, out.shape[1], rows):
            block = slice(start, start + rows)
            self._bound(np.einsum("brp,bsp->brs", u[:, block], u, out=out[:, block]),
                        [q[:, block, None] for q in each], [q[:, None, :] for q in each])
        return out

    def row_bounds(self, bb, gg):
        """(M, R) bounds between groups (bb, gg) and every slot of their batch."""
        if not self.prune:
            return np.full((bb.size, self.cost.shape[2]), -np.inf)
        whole = bb.size == self.u.shape[0] and (bb == np.arange(bb.size)).all()
        quantities = (self.u, self.norm, self.inv_a, self.slack)
        u, *rest = quantities if whole else [q[bb] for q in quantities]
        mine = [q[bb, gg][:, None] for q in quantities[1:]]
        return self._bound((u @ self.u[bb, gg][:, :, None])[:, :, 0], mine, rest)

    # ------------------------------------------------------------------ exact costs

    def fill_exact(self, bb, xx, yy):
        """Compute the exact costs of pairs (bb, xx, yy) not yet exact (each once).

        Returns the pairs computed (batch, lower slot, higher slot) and their costs.
        """
        R = self.cost.shape[1]
        lo, hi = np.minimum(xx, yy), np.maximum(xx, yy)
        key = np.unique((bb * R + lo) * R + hi)
        key = key[~self.exact.reshape(-1)[key]]
        if key.size == 0:
            return key, key, key, np.zeros(0)
        self.n_exact += key.size
        bb, rest = np.divmod(key, R * R)
        lo, hi = np.divmod(rest, R)
        merged = merged_rss(self.sscp[bb, lo] + self.sscp[bb, hi],
                            self.n[bb, lo] + self.n[bb, hi], self.p)
        hi_first = self.last_merge[bb, hi] > self.last_merge[bb, lo]
        first = np.where(hi_first, hi, lo)
        second = np.where(hi_first, lo, hi)
        value = merged - self.rss[bb, first] - self.rss[bb, second]
        self.cost[bb, lo, hi] = value
        self.cost[bb, hi, lo] = value
        self.exact[bb, lo, hi] = True
        self.exact[bb, hi, lo] = True
        return bb, lo, hi, value

    def settle_rows(self, bb, rows, extra=None):
        """Make the minimum of rows (bb, rows) exact and record it (rows distinct).

        ``extra``: (positions in ``rows``, columns) of further entries of those rows
        to compute exactly along the way.
        """
        if bb.size == 0:
            return
        at = np.arange(bb.size)
        live = self.alive[bb]
        live[at, rows] = False
        # Entries of dead groups are never cleared from the matrix: masked here.
        if not self.prune:  # no bounds: every entry is exact once ``extra`` is
            if extra is not None and extra[0].size:
                self.fill_exact(bb[extra[0]], rows[extra[0]], extra[1])
            stored = np.where(live, self.cost[bb, rows], np.inf)
            arg = stored.argmin(axis=1)
            self.row_arg[bb, rows] = arg
            self.row_min[bb, rows] = stored[at, arg]
            return
        stored = np.where(live, self.cost[bb, rows], np.inf)
        bounded = live & ~self.exact[bb, rows]
        known_min = np.where(bounded, np.inf, stored).min(axis=1)

        def fill(m, other):  # exact costs, copied into this call's view of the rows
            if m.size:
                self.fill_exact(bb[m], rows[m], other)
                stored[m, other] = self.cost[bb[m], rows[m], other]
                bounded[m, other] = False

        # First the smallest bound of each row, then every bounded entry not above the
        # row's exact minimum so far. An entry computed for another row is left as
        # its bound here: it lies above this row's minimum, so no answer changes.
        candidate = np.where(bounded, stored, np.inf)
        best = candidate.argmin(axis=1)
        m = np.flatnonzero(bounded[at, best] & (candidate[at, best] <= known_min))
        other = best[m]
        if extra is not None:
            m, other = np.concatenate([m, extra[0]]), np.concatenate([other, extra[1]])
        fill(m, other)
        np.minimum.at(known_min, m, stored[m, other])
        m, other = _nonzero(bounded & (stored <= known_min[:, None]))
        fill(m, other)
        arg = stored.argmin(axis=1)
        self.row_arg[bb, rows] = arg
        self.row_min[bb, rows] = stored[at, arg]

    # ------------------------------------------------------------------ a merge

    def merge(self, todo, i, j, step, step_cost):
        """Merge slot j into slot i in batches ``todo``, then bring the costs up to date."""
        at = np.arange(todo.size)
        # Every batch still merging (the usual case): whole arrays, not gathered copies.
        # ``arg`` and ``current`` are read after settling only where rows are fresh,
        # which settling leaves alone, so views serve.
        whole = todo.size == self.alive.shape[0]
        _pool(self, todo, i, j, step_cost)
        self.last_merge[todo, i] = step
        self.alive[todo, j] = False
        self.row_min[todo, j] = np.inf
        self.refresh_profiles(todo, i, low=self.low[todo, i] + self.low[todo, j])
        others = self.alive.copy() if whole else self.alive[todo]
        others[at, i] = False
        bound = np.where(others, self.row_bounds(todo, i), np.inf)
        # Row and column i (the matrix stays symmetric); j's are masked by ``alive``.
        self.cost[todo, i, :] = bound
        self.cost[todo, :, i] = bound
        self.exact[todo, i, :] = False
        self.exact[todo, :, i] = False
        arg = self.row_arg if whole else self.row_arg[todo]
        stale = others & ((arg == i[:, None]) | (arg == j[:, None]))
        fresh = others & ~stale
        current = self.row_min if whole else self.row_min[todo]
        # Row i and the rows whose minimum was i or j are settled together. A row whose
        # minimum lies elsewhere needs the new cost only if it could undercut it.
        m, other = _nonzero(stale)
        wanted = fresh & (bound <= current) if self.prune else others
        self.settle_rows(np.concatenate([todo, todo[m]]), np.concatenate([i, other]),
                         extra=_nonzero(wanted))
        # A fresh row's minimum moves to i only where its cost to i was made exact above
        # (few entries): compare those alone.
        m, other = _nonzero(fresh & self.exact[todo, i, :])
        value = self.cost[todo[m], i[m], other]
        was = current[m, other]
        better = (value < was) | ((value == was) & (i[m] < arg[m, other]))
        m, other = m[better], other[better]
        self.row_min[todo[m], other] = value[better]
        self.row_arg[todo[m], other] = i[m]

    def compact(self):
        """Drop the slots of dead groups once a quarter of them are dead.

        Every step costs time in proportion to the number of slots, so the later
        steps get cheaper (measured on 50 simulated panels of 1,000 raters: about
        a fifth of the merging time saved). Live slots keep their order,
        so ties still go to the same pair; ``slot_of`` maps a slot to the rater slot
        it started as. Batches with fewer groups are padded with dead slots.
        """
        B, width = self.alive.shape
        keep = int(self.alive.sum(axis=1).max())
        if width < 32 or keep > 0.75 * width:
            return
        order = np.argsort(~self.alive, axis=1, kind="stable")[:, :keep]
        live = np.take_along_axis(self.alive, order, axis=1)
        at = np.arange(B)[:, None]
        position = np.zeros((B, width), dtype=np.intp)
        position[at, order] = np.arange(keep)
        arg = np.take_along_axis(self.row_arg, order, axis=1)
        self.row_arg = np.where(live, np.take_along_axis(position, np.maximum(arg, 0), axis=1), -1)
        self.row_min = np.where(live, np.take_along_axis(self.row_min, order, axis=1), np.inf)
        self.slot_of = np.where(live, np.take_along_axis(self.slot_of, order, axis=1), -1)
        for name in ("n", "rss", "last_merge", "u", "norm", "inv_a", "low", "slack"):
            setattr(self, name, getattr(self, name)[at, order])
        # The big ones are compacted in their own memory (see _SPARE).
        self.sscp = _compact_slots(self.sscp, order, square=False)
        self.cost = _compact_slots(self.cost, order, square=True)
        self.exact = _compact_slots(self.exact, order, square=True)
        self.alive = live


def _pool(state, todo, i, j, step_cost):
    """Add group j's sufficient statistics and RSS (plus the merge cost) into group i."""
    state.sscp[todo, i] += state.sscp[todo, j]
    state.n[todo, i] += state.n[todo, j]
    state.sscp[todo, j] = 0.0
    state.n[todo, j] = 0.0
    state.rss[todo, i] += state.rss[todo, j] + step_cost
    state.rss[todo, j] = 0.0


class _AllCosts:
    """Every pair's merge cost, the new group's recomputed in full at each merge.

    The plain bookkeeping: fastest for small panels, where the bound of
    :class:`_PairCosts` costs more to keep than it saves. Same interface and the same
    arithmetic, so the same merges and digits.
    """

    def __init__(self, group_sscp, group_n, group_rss, active, p):
        self.sscp, self.n, self.rss, self.p = group_sscp, group_n, group_rss, p
        B, R = active.shape
        self.alive = active.copy()
        self.slot_of = np.broadcast_to(np.arange(R), (B, R)).copy()
        self.cost = np.full((B, R, R), np.inf)
        upper, lower = np.triu_indices(R, k=1)
        all_bb, all_pair = np.nonzero(active[:, upper] & active[:, lower])
        self.n_exact = all_bb.size
        for start in range(0, all_bb.size, _FIT_CHUNK):
            bb, pair = all_bb[start:start + _FIT_CHUNK], all_pair[start:start + _FIT_CHUNK]
            self._fill(bb, upper[pair], lower[pair])
        self._minima()

    def _fill(self, bb, first, second):
        """Exact costs of pairs (bb, first, second); ``first``'s RSS is subtracted first."""
        merged = merged_rss(self.sscp[bb, first] + self.sscp[bb, second],
                            self.n[bb, first] + self.n[bb, second], self.p)
        value = merged - self.rss[bb, first] - self.rss[bb, second]
        self.cost[bb, first, second] = value
        self.cost[bb, second, first] = value

    def _minima(self):
        self.row_arg = self.cost.argmin(axis=2)
        self.row_min = np.take_along_axis(self.cost, self.row_arg[:, :, None], axis=2)[:, :, 0]

    def merge(self, todo, i, j, step, step_cost):
        """Merge slot j into slot i in batches ``todo``, then recompute i's costs."""
        _pool(self, todo, i, j, step_cost)
        self.cost[todo, j, :] = np.inf
        self.cost[todo, :, j] = np.inf
        self.alive[todo, j] = False
        live = self.alive[todo]
        live[np.arange(todo.size), i] = False
        rows, other = _nonzero(live)
        self.n_exact += rows.size
        self._fill(todo[rows], i[rows], other)
        self._minima()

    def compact(self):
        """Nothing to gain on small panels."""


def agglomerate(sscp: np.ndarray, n: np.ndarray, active: np.ndarray, p: int,
                stop_at: int, record: bool, *, prune: bool = True,
                compact: bool | None = None) -> Agglomeration:
    """Merge groups bottom-up, the cheapest merge first, in every batch at once.

    sscp : (B, R, k, k) centred SSCP per rater; n : (B, R) judgments per rater;
    active : (B, R) raters taking part. Merging stops in a batch when it has
    ``stop_at`` groups. Ties go to the lowest (i, j) slot pair, so runs repeat.

    Each row's cheapest merge is kept, so a step scans R row minima instead of all
    R^2 pairs, and only the costs that involve the new group change. A cost is
    computed exactly only when its lower bound (see :class:`_PairCosts`) does not
    rule it out; ``prune=False`` computes every cost: same merges, same digits.
    Without ``record``, or with ``compact=True``, the slots of dead groups are dropped
    as merging goes on (:meth:`_PairCosts.compact`); the merges are the same, only the
    recorded RSS totals then sum over fewer slots (a last-digit change: the number-of-
    groups test and the resamples, which read only the merged pairs, compact).
    Panels under ``_SMALL_PANEL`` raters use the
    plain :class:`_AllCosts` instead (again the same merges and digits); panels of
    ``_COMPILED_PANEL`` raters and more (with ``prune``) the compiled loop of
    :mod:`calibrate.panel.compiled_merges` (the same merges, costs equal to rounding).
    """
    R = active.shape[1]
    group_sscp = np.where(active[:, :, None, None], sscp, 0.0)
    group_n = np.where(active, n, 0.0)
    group_rss = np.where(active, batched_rss(group_sscp, group_n, p), 0.0)
    labels = np.where(active, np.arange(R)[None, :], -1)
    if R < _SMALL_PANEL:
        costs = _AllCosts(group_sscp, group_n, group_rss, active, p)
        history, last_cost = _merge_until(costs, labels, active, stop_at, record)
        n_exact = costs.n_exact
    elif prune and R >= _COMPILED_PANEL:
        from .compiled_merges import merge_batches  # loads numba: only for panels this big

        labels, history, last_cost, n_exact = merge_batches(group_sscp, group_n, group_rss,
                                                            active, p, stop_at, record)
    else:
        costs = _PairCosts(group_sscp, group_n, group_rss, active, p, prune)
        try:
            history, last_cost = _merge_until(costs, labels, active, stop_at, record,
                                              compact=(not record) if compact is None else compact)
        finally:
            _give_back("cost", costs.cost_memory)
            _give_back("exact", costs.exact_memory)
        n_exact = costs.n_exact
    tss = np.where(active, sscp[:, :, p, p], 0.0).sum(axis=1)
    return Agglomeration(labels=labels, history=history, last_cost=last_cost, tss=tss,
                         n_exact=n_exact)


def _merge_until(costs, labels, active, stop_at, record, compact=None):
    """The merge loop of :func:`agglomerate`; updates ``labels`` in place."""
    B = active.shape[0]
    history = []
    joins = []   # (batches, slot kept, slot absorbed) per step, for the labels at the end
    last_cost = np.full(B, np.nan)
    n_groups = active.sum(axis=1)
    batch = np.arange(B)
    step = 0
    while True:
        todo = batch[n_groups > stop_at]
        if todo.size == 0:
            break
        row_min = costs.row_min[todo]
        first = row_min.argmin(axis=1)
        second = costs.row_arg[todo, first]
        i, j = np.minimum(first, second), np.maximum(first, second)
        step_cost = costs.cost[todo, i, j]
        last_cost[todo] = step_cost
        slot_i, slot_j = costs.slot_of[todo, i], costs.slot_of[todo, j]
        if record:
            history.append((todo.copy(), slot_i, slot_j, step_cost.copy(),
                            costs.rss[todo].sum(axis=1), n_groups[todo].copy()))
        costs.merge(todo, i, j, step, step_cost)
        joins.append((todo, slot_i, slot_j))
        n_groups[todo] -= 1
        # The recorded totals sum over every rater slot, dead ones included, as they
        # always have (the order of a sum sets its last digit): no compacting there
        # unless the caller reads only the merged pairs.
        if (not record) if compact is None else compact:
            costs.compact()
        step += 1
    # Each slot's final group, from the last merge back: an absorbed slot ends where the
    # slot that absorbed it ends (O(batches) a step instead of relabelling every rater).
    final = np.broadcast_to(np.arange(labels.shape[1]), labels.shape).copy()
    for todo, kept, absorbed in reversed(joins):
        final[todo, absorbed] = final[todo, kept]
    np.copyto(labels, np.take_along_axis(final, np.maximum(labels, 0), axis=1),
              where=labels >= 0)
    return history, last_cost


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


def stacked_sscp(Z, who, R, *, weights=None, judgments=None, base=None):
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
    base = grouped_sscp(Z, who, R) if base is None else base  # the caller may have it
    centred = Z - base.mean[who]

    def scatter(values):  # (m, w) -> sparse (m, R * w), rater blocks side by side
        # Built in CSR form directly: row t holds w entries in columns who[t] * w + 0..w-1,
        # already in order, so no (row, column) pairs need sorting (the same matrix as
        # the coordinate form gave).
        w = values.shape[1]
        cols = (who[:, None] * w + np.arange(w)[None, :]).ravel()
        return sparse.csr_array((np.ascontiguousarray(values).ravel(), cols,
                                 np.arange(0, m * w + 1, w)), shape=(m, R * w))

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

