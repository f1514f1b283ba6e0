"""How far to trust a policy grouping: the number of groups, resampling, a cross-check.

Three checks on the grouping made by :func:`calibrate.panel.grouping.group_raters`, all
run on the merge engine of :mod:`calibrate.panel.merges` so that every simulated
panel and every case resample is grouped in lockstep with numpy:

* the simulated test behind the number of groups (a parametric bootstrap of what a
  merge costs the side that fits worse for it, relative to that side's own fit;
  McLachlan 1987 for the bootstrap, the statistic is our own);
* stability under resampling of cases (pair co-assignment, adjusted Rand index,
  each group's best-match Jaccard similarity; Hennig 2007);
* Ward clustering of the raters' standardized weights, compared with the grouping.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.optimize import linear_sum_assignment

from ..policy.linalg import GroupedSSCP, grouped_sscp, ols_from_sscp
from . import merges
from .merges import (
    agglomerate,
    batched_rss,
    merged_rss,
    name_groups,
    stacked_sscp,
    standardized_weights,
)

__all__ = [
    "SURVIVAL_JACCARD",
    "KeepApartRule",
    "ResamplingStability",
    "adjusted_rand_index",
    "co_assignment",
    "common_weights",
    "fewest_null_panels",
    "group_jaccard",
    "groups_by_rule",
    "keep_apart_rule",
    "matched_share",
    "merge_side_loss",
    "null_panel_budget",
    "null_panels",
    "resample_budget",
    "resample_counts",
    "resample_panels",
    "resampled_labels",
    "resampling_stability",
    "rule_and_resampled_groups",
    "rule_from_null_trees",
    "size_class",
    "stability_of",
    "tree_side_losses",
    "ward_cross_check",
]

#: A group whose mean best-match Jaccard similarity over resamples falls below this
#: is reported as not surviving resampling (Hennig 2007, Computational Statistics &
#: Data Analysis 52:258-271, calls clusters at or below 0.5 "dissolved"; from memory).
SURVIVAL_JACCARD = 0.5

#: Work budget: simulations x raters^2 stays under this (the full 200 up to 60 raters).
_RESAMPLE_WORK_BUDGET = 200 * 60**2


def adjusted_rand_index(labels_a, labels_b) -> float:
    """Adjusted Rand index between two labelings of the same items.

    .. math::
        ARI = \\frac{\\sum_{ij} \\binom{n_{ij}}{2} - E}{\\tfrac12\\left[\\sum_i \\binom{a_i}{2}
              + \\sum_j \\binom{b_j}{2}\\right] - E}, \\quad
        E = \\frac{\\sum_i \\binom{a_i}{2} \\sum_j \\binom{b_j}{2}}{\\binom{n}{2}}

    with ``n_ij`` the contingency table and ``a_i``, ``b_j`` its margins (Hubert &
    Arabie 1985, Journal of Classification 2:193-218). Two identical labelings give
    1 (also when both put everything in one group); chance agreement gives about 0.
    """
    a = np.unique(np.asarray(labels_a), return_inverse=True)[1]
    b = np.unique(np.asarray(labels_b), return_inverse=True)[1]
    if a.shape != b.shape:
        raise ValueError("the two labelings must label the same items")
    n = a.size
    table = np.zeros((a.max(initial=-1) + 1, b.max(initial=-1) + 1))
    np.add.at(table, (a, b), 1.0)

    def pairs(counts):
        return (counts * (counts - 1.0) / 2.0).sum()

    sum_cells = pairs(table)
    sum_a = pairs(table.sum(axis=1))
    sum_b = pairs(table.sum(axis=0))
    total = n * (n - 1.0) / 2.0
    expected = sum_a * sum_b / total if total > 0 else 0.0
    top = 0.5 * (sum_a + sum_b) - expected
    if top == 0.0:
        # Both labelings are trivial (all one group, or all singletons): they agree.
        return 1.0
    return float((sum_cells - expected) / (top))


def resample_budget(n_resamples: int, n_raters: int, *, floor: int = 20) -> int:
    """Simulations to run: as asked, fewer for big panels, never fewer than ``floor``."""
    if n_raters < 2:
        return n_resamples
    return min(n_resamples, max(floor, _RESAMPLE_WORK_BUDGET // (n_raters * n_raters)))


#: Merges whose side losses are solved in one call (bounds the gathered sides' memory).
_SIDE_BLOCK = 50_000

#: Relative margin of the cost bracket on a join's side loss (rounding is about 1e-12
#: of the sums involved; ours, generous on purpose).
_BRACKET_SLACK = 1e-9

#: Above this many raters the number-of-groups test runs the fewest simulated panels
#: whose p-value can still fall below alpha (20 at alpha 0.05) instead of the floor of
#: 50: at 2,000 raters each simulated panel is a whole 2,000-rater grouping. Measured
#: size and power with 50 and 20 panels are in DEVELOPERS.md (number of groups).
LARGE_PANEL_RATERS = 1000


def fewest_null_panels(alpha: float) -> int:
    """The fewest simulated panels n whose smallest p-value, 1 / (n + 1), is below alpha."""
    n = max(int(np.ceil(1.0 / alpha)) - 1, 1)
    while 1.0 / (n + 1.0) >= alpha:
        n += 1
    return n


def null_panel_budget(n_null: int, n_raters: int, alpha: float) -> int:
    """Simulated one-policy panels for the number-of-groups test (never more than asked).

    As :func:`resample_budget` with a floor of 50; above ``LARGE_PANEL_RATERS`` raters
    no more than :func:`fewest_null_panels` (a Monte Carlo test with 20 panels rejects
    at 0.05 only when the panel's statistic beats all 20: size 1/21, against 2/51 with
    50 panels; the power lost is measured in DEVELOPERS.md).
    """
    budget = resample_budget(n_null, n_raters, floor=50)
    if n_raters > LARGE_PANEL_RATERS:
        budget = min(budget, max(fewest_null_panels(alpha), 1))
    return budget


def merge_side_loss(sscp_a: np.ndarray, sscp_b: np.ndarray, p: int, *,
                    weights: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """What a merge costs the side that suffers most, as a share of its own spread.

    ``sscp_a`` and ``sscp_b`` (M, k, k) are the pooled-within SSCPs of the two groups
    of M merges. Side ``a`` loses ``d' S_xx,a d`` with ``d = b_{a+b} - b_a`` (the
    rise of its residual sum of squares when it trades its own common weights for
    the merged ones: an exact identity, as ``b_a`` minimises its own quadratic),
    divided by its within-rater sum of squares of judgments ``S_yy,a``: the R^2 that
    side gives up. The larger of the two sides is returned.

    Why not the drop of the whole panel's R^2: a lone rater merged into a panel of
    ``R - 1`` loses as much as ever, but the whole panel's R^2 hardly moves when R
    is large, so a threshold on it absorbed different raters in big panels. The
    loss of the side itself does not depend on how many other raters there are.
    Our own statistic. ``weights``: the two sides' own common weights
    (:func:`common_weights`), when the caller keeps them.
    """
    merged = common_weights(sscp_a + sscp_b, p)
    own_a, own_b = weights if weights is not None else (common_weights(sscp_a, p),
                                                         common_weights(sscp_b, p))

    def loss(sscp, own):
        gap = merged - own
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.einsum("mi,mij,mj->m", gap, sscp[:, :p, :p], gap) / sscp[:, p, p]

    return np.maximum(loss(sscp_a, own_a), loss(sscp_b, own_b))


def common_weights(sscp: np.ndarray, p: int) -> np.ndarray:
    """(M, p) common weights of a stack of pooled-within SSCPs (M, k, k)."""
    try:
        return np.linalg.solve(sscp[:, :p, :p], sscp[:, :p, p:])[..., 0]
    except np.linalg.LinAlgError:  # a singular side somewhere in the stack
        return (np.linalg.pinv(sscp[:, :p, :p]) @ sscp[:, :p, p:])[..., 0]


def tree_side_losses(sscp: np.ndarray, active: np.ndarray, history: list,
                     p: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`merge_side_loss` of every merge of every batch, and its smaller side's size.

    ``sscp`` (B, R, k, k) per rater, ``active`` (B, R) and the ``history`` recorded by
    :func:`calibrate.panel.merges.agglomerate` (``record=True``). Returns two (B, R - 1)
    arrays in merge order: the side loss (NaN pads batches with fewer merges) and the
    number of raters on the smaller side (0 there). One batched solve per step.
    """
    B, R = active.shape
    group = np.where(active[:, :, None, None], sscp, 0.0)
    size = active.astype(int)
    out = np.full((B, max(R - 1, 0)), np.nan)
    smaller = np.zeros((B, max(R - 1, 0)), dtype=int)
    done = np.zeros(B, dtype=int)
    # The sides of a block of steps are gathered first and their losses solved in one
    # call (the same solves, matrix by matrix): one call per step cost 2,000 rounds of
    # small solves per grouping of 2,000 raters.
    per_block = max(1, _SIDE_BLOCK // max(B, 1))
    for start in range(0, len(history), per_block):
        sides_a, sides_b, where = [], [], []
        for todo, i, j, *_ in history[start:start + per_block]:
            a, b = group[todo, i], group[todo, j]
            sides_a.append(a)
            sides_b.append(b)
            where.append((todo, done[todo]))
            smaller[todo, done[todo]] = np.minimum(size[todo, i], size[todo, j])
            group[todo, i] = a + b
            size[todo, i] += size[todo, j]
            done[todo] += 1
        if where:
            loss = merge_side_loss(np.concatenate(sides_a), np.concatenate(sides_b), p)
            out[np.concatenate([t for t, _ in where]), np.concatenate([d for _, d in where])] = loss
    return out, smaller


def size_class(smaller_side) -> np.ndarray:
    """0 for a lone rater, 1 for 2-3 raters, 2 for 4-7, ... (log2 classes)."""
    return np.floor(np.log2(np.maximum(np.asarray(smaller_side), 1))).astype(int)


@dataclass(frozen=True)
class KeepApartRule:
    """When two groups are kept apart (the number-of-groups rule; our own rule).

    A merge keeps its two sides apart when its side loss (:func:`merge_side_loss`)
    exceeds ``threshold`` *and* its scaled loss has a Monte Carlo p-value below
    ``alpha`` against ``null_max``.

    The scaled loss is the side loss divided by ``scale[c]``, where c is the size
    class of the merge's smaller side (:func:`size_class`): a lone rater's loss is
    noisier than a group of ten's, so each class is measured against its own yard.
    ``scale[c]`` is the median, over panels simulated with one shared policy, of the
    largest side loss among that class's merges. ``null_max`` holds, per simulated
    panel, the largest scaled loss of any merge of its whole tree, so the p-value
    ``(1 + #{null_max >= scaled}) / (n + 1)`` is adjusted for every merge of the
    tree at once (single-step max-T; Westfall & Young 1993, Resampling-Based
    Multiple Testing, ch. 2; from memory). The scales come from the same simulated
    panels as ``null_max``.
    """

    threshold: float
    alpha: float
    scale: np.ndarray       # per size class; classes beyond the last use the last
    null_max: np.ndarray    # sorted

    def scaled(self, loss, smaller_side) -> np.ndarray:
        if self.scale.size == 0:
            return np.full(np.shape(loss), np.nan)
        c = np.minimum(size_class(smaller_side), self.scale.size - 1)
        return np.asarray(loss, dtype=float) / self.scale[c]

    def p_value(self, loss, smaller_side) -> np.ndarray:
        scaled = self.scaled(loss, smaller_side)
        above = self.null_max.size - np.searchsorted(self.null_max, scaled, side="left")
        return np.where(np.isfinite(scaled), (1.0 + above) / (self.null_max.size + 1.0), np.nan)

    def apart(self, loss, smaller_side) -> np.ndarray:
        loss = np.asarray(loss, dtype=float)
        with np.errstate(invalid="ignore"):
            return (loss > self.threshold) & (self.p_value(loss, smaller_side) < self.alpha)


def keep_apart_rule(Z, who, eligible, own_rss, own_df, p, n_sims, generator, *,
                    threshold: float, alpha: float, base=None) -> KeepApartRule:
    """The :class:`KeepApartRule` of a panel, from panels simulated with one shared policy.

    Parametric bootstrap: judgments are simulated from the one-group model (the
    pooled-within weights of every eligible rater; each rater's own residual spread,
    normal errors) and grouped from scratch; every merge's side loss and smaller
    side are kept (McLachlan 1987, Applied Statistics 36:318-324, bootstraps the
    test for the number of mixture components this way; from memory).
    """
    sscp, n, active = null_panels(Z, who, eligible, own_rss, own_df, p, n_sims, generator,
                                  base=base)
    agg = agglomerate(sscp, n, active, p, stop_at=1, record=True, compact=True)
    losses, smaller = tree_side_losses(sscp, active, agg.history, p)
    return rule_from_null_trees(losses, smaller, threshold=threshold, alpha=alpha)


def null_panels(Z, who, eligible, own_rss, own_df, p, n_sims, generator, *, base=None):
    """Per-rater SSCPs (B, R, k, k), counts (B, R) and active raters of ``n_sims``
    panels simulated from the one-group model (see :func:`keep_apart_rule`)."""
    R = eligible.size
    base = grouped_sscp(Z, who, R) if base is None else base  # ``base``: the caller's
    pooled = base.sscp[eligible].sum(axis=0)[None]
    fit = ols_from_sscp(GroupedSSCP(n=np.array([base.n[eligible].sum()]),
                                    mean=np.zeros((1, p + 1)), sscp=pooled), np.arange(p), p)
    with np.errstate(invalid="ignore", divide="ignore"):
        sigma = np.where(eligible, np.sqrt(own_rss / own_df), 0.0)
    # The intercepts are left out: centring within rater removes them anyway.
    signal = Z[:, :p] @ fit.coef[0]
    noise = generator.standard_normal((n_sims, Z.shape[0])) * sigma[who]
    sscp, n = stacked_sscp(Z, who, R, judgments=signal[None, :] + noise, base=base)
    return sscp, n, np.broadcast_to(eligible, (n_sims, R))


def rule_from_null_trees(losses, smaller, *, threshold: float, alpha: float) -> KeepApartRule:
    """The rule from the side losses and smaller sides of the simulated panels' trees."""
    finite = np.isfinite(losses)
    if not finite.any():
        return KeepApartRule(threshold, alpha, np.zeros(0), np.zeros(0))
    classes = size_class(smaller)
    scale: list[float] = []
    for c in range(int(classes[finite].max()) + 1):
        in_class = np.where((classes == c) & finite, losses, -np.inf).max(axis=1)
        found = in_class[np.isfinite(in_class)]
        scale.append(float(np.median(found)) if found.size else (scale[-1] if scale else 1.0))
    rule = KeepApartRule(threshold, alpha, np.array(scale), np.zeros(0))
    scaled = np.where(finite, rule.scaled(np.where(finite, losses, 0.0), smaller), -np.inf)
    return KeepApartRule(threshold, alpha, np.array(scale), np.sort(scaled.max(axis=1)))


def rule_and_resampled_groups(Z, who, case_row, n_cases, eligible, own_rss, own_df, p,
                              n_sims, n_resamples, generator, *, threshold: float,
                              alpha: float, base=None):
    """:func:`keep_apart_rule` and the resamples' groups by that rule, in one lockstep.

    The simulated panels and the case resamples are merged in one call of
    :func:`agglomerate` (the resamples' trees do not depend on the rule, only their
    cut does): one merge loop of 2,000 steps instead of two at 2,000 raters, each
    step's fixed cost paid once. The random draws come in the order of the two
    separate calls (simulated judgments, then case counts), so the results are the
    same to the bit. Returns the rule and the (n_resamples, R) slot labels of
    :func:`resampled_labels` (None without resamples).
    """
    null = null_panels(Z, who, eligible, own_rss, own_df, p, n_sims, generator, base=base)
    if not n_resamples:
        agg = agglomerate(*null, p, stop_at=1, record=True, compact=True)
        losses, smaller = tree_side_losses(null[0], null[2], agg.history, p)
        return rule_from_null_trees(losses, smaller, threshold=threshold, alpha=alpha), None
    counts = resample_counts(generator, n_cases, n_resamples)
    boot = resample_panels(Z, who, case_row, counts, eligible, p, base=base)
    sscp, n, active = (np.concatenate([a, b]) for a, b in zip(null, boot))
    agg = agglomerate(sscp, n, active, p, stop_at=1, record=True, compact=True)
    losses, smaller = tree_side_losses(sscp, active, agg.history, p)
    rule = rule_from_null_trees(losses[:n_sims], smaller[:n_sims], threshold=threshold,
                                alpha=alpha)
    history = _batches_from(agg.history, n_sims)
    boot_slots = groups_by_rule(*boot, history, losses[n_sims:], smaller[n_sims:], rule, p)
    return rule, boot_slots


def _batches_from(history: list, first: int) -> list:
    """The recorded merges of batches ``first`` onwards, renumbered from 0."""
    out = []
    for todo, *rest in history:
        keep = todo >= first
        if keep.any():
            out.append((todo[keep] - first, *(part[keep] for part in rest)))
    return out


def groups_by_rule(sscp, n, active, history, losses, smaller, rule: KeepApartRule,
                   p) -> np.ndarray:
    """(B, R) slot labels: the groups the rule keeps apart, in every batch.

    First the tree is cut at every merge the rule keeps apart: the pieces are the
    largest subtrees with no such merge inside. Pieces that the rule would not keep
    apart are then joined again, cheapest merge first (Ward's order), until every
    remaining pair is kept apart. This second step matters: in a large panel the top
    merges of the tree can split raters who share a policy while the different rater
    joins one half lower down; cutting only the tree would then give three groups
    (and reading the tree from the top would absorb the different rater).
    """
    B, R = active.shape
    piece = np.where(active, np.arange(R)[None, :], -1)
    tainted = np.zeros((B, R), dtype=bool)
    apart = rule.apart(losses, smaller)
    done = np.zeros(B, dtype=int)
    for todo, i, j, *_ in history:
        bad = apart[todo, done[todo]] | tainted[todo, i] | tainted[todo, j]
        tainted[todo, i] = bad
        join, ji, jj = todo[~bad], i[~bad], j[~bad]
        if join.size:
            moved = piece[join] == jj[:, None]
            piece[join] = np.where(moved, ji[:, None], piece[join])
        done[todo] += 1
    joined = np.flatnonzero(tainted.any(axis=1))
    if joined.size:
        piece[joined] = _join_pieces_lockstep(sscp[joined], n[joined], piece[joined], rule, p)
    return piece


def _join_pieces(sscp, n, piece, rule, p) -> np.ndarray:
    """:func:`_join_pieces_lockstep` for one batch (``sscp`` (R, k, k), ``piece`` (R,))."""
    return _join_pieces_lockstep(sscp[None], n[None], piece[None], rule, p)[0]


def _join_pieces_lockstep(sscp, n, piece, rule, p) -> np.ndarray:
    """Join pieces, cheapest merge first, while the rule allows it; every batch at once.

    ``sscp`` (B, R, k, k), ``n`` and ``piece`` (B, R). Every pair's cost and verdict is
    computed once and only the merged piece's pairs again after a merge (the others'
    sums have not changed), so joining P pieces costs O(P^2) fits instead of O(P^3).
    Each piece's own RSS and common weights are kept between merges, so scoring a pair
    solves only the merged system (the same solves, matrix by matrix, as
    :func:`merged_rss` and :func:`merge_side_loss`: the same digits). The pick is the
    same as scanning every pair in (first, second) order: the cheapest allowed pair, the
    first one on a tie (row-major order of the upper triangle). The batches merge in
    lockstep, one pick each per round, padded to the largest number of pieces: a
    resample's pieces were joined one batch at a time before, 3,216 rounds of small
    solves for the 21 groupings of a 2,000-rater panel. From ``merges._COMPILED_PANEL``
    raters on, the same joins run compiled, one batch after another
    (:func:`calibrate.panel.compiled_merges.join_pieces`: the same pieces; costs and
    weights by Cholesky, so their last digits can differ).
    """
    ids, *pieces = _piece_sums(sscp, n, piece, p)
    if piece.shape[1] >= merges._COMPILED_PANEL:
        from .compiled_merges import join_pieces  # loads numba: only for panels this big
        group, _, size, alive, own_rss, own_weights = pieces
        final = join_pieces(group, alive.sum(axis=1), own_rss, own_weights, size, rule, p)
    else:
        final = _join_in_lockstep(*pieces, rule, p)
    out = piece.copy()
    for b, own in enumerate(ids):
        if own.size:
            where = out[b] >= 0
            out[b, where] = own[final[b, np.searchsorted(own, out[b, where])]]
    return out


def _piece_sums(sscp, n, piece, p):
    """Each batch's piece labels and, per piece slot, summed SSCP, count, number of
    raters, liveness, own RSS and own common weights (the pieces of a batch in the
    first slots, in label order)."""
    B = piece.shape[0]
    ids = [np.unique(row[row >= 0]) for row in piece]
    P = max(len(i) for i in ids)
    k = sscp.shape[-1]
    group = np.zeros((B, P, k, k))
    count = np.zeros((B, P))
    size = np.zeros((B, P), dtype=int)
    alive = np.zeros((B, P), dtype=bool)
    for b, own in enumerate(ids):
        for g, label in enumerate(own):  # summed rater by rater, in rater order, as before
            member = piece[b] == label
            group[b, g] = sscp[b, member].sum(axis=0)
            count[b, g] = float(n[b, member].sum())
            size[b, g] = int(member.sum())
        alive[b, :own.size] = True
    own_rss = np.zeros((B, P))
    own_weights = np.zeros((B, P, p))
    own_rss[alive] = merged_rss(group[alive], count[alive], p)
    own_weights[alive] = common_weights(group[alive], p)
    return ids, group, count, size, alive, own_rss, own_weights


def _join_in_lockstep(group, count, size, alive, own_rss, own_weights, rule, p):
    """The numpy join of :func:`_join_pieces_lockstep`: (B, P) each slot's final slot.

    The arrays of :func:`_piece_sums` are worked on in place.
    """
    B, P = alive.shape
    cost = np.full((B, P, P), np.inf)
    allowed = np.zeros((B, P, P), dtype=bool)   # upper triangle only, live pieces only

    def score(bb, first, second):
        a, b = group[bb, first], group[bb, second]
        merged = merged_rss(a + b, count[bb, first] + count[bb, second], p)
        value = merged - own_rss[bb, first] - own_rss[bb, second]
        cost[bb, first, second] = value
        smaller = np.minimum(size[bb, first], size[bb, second])
        # The verdict from the cost alone where it is certain: the cost is the two sides'
        # losses weighted by their sums of squares of judgments (an exact identity, see
        # merge_side_loss), so the larger loss lies between cost / (S_yy,a + S_yy,b) and
        # cost / min(S_yy); the rule is monotone in the loss. Margins far above rounding.
        # Only pairs the bracket leaves open get the side loss solved.
        syy_a, syy_b = a[:, p, p], b[:, p, p]
        slack = _BRACKET_SLACK * (np.abs(merged) + own_rss[bb, first] + own_rss[bb, second])
        with np.errstate(invalid="ignore", divide="ignore"):
            low = (value - slack) / (syy_a + syy_b) * (1.0 - _BRACKET_SLACK)
            high = (value + slack) / np.minimum(syy_a, syy_b) * (1.0 + _BRACKET_SLACK)
        verdict = ~rule.apart(high, smaller)       # together for certain
        sure = verdict | rule.apart(low, smaller)  # or apart for certain
        sure &= np.isfinite(low) & np.isfinite(high)
        open_ = np.flatnonzero(~sure)
        if open_.size:
            loss = merge_side_loss(a[open_], b[open_], p,
                                   weights=(own_weights[bb[open_], first[open_]],
                                            own_weights[bb[open_], second[open_]]))
            verdict[open_] = ~rule.apart(loss, smaller[open_])
        allowed[bb, first, second] = verdict

    upper_first, upper_second = np.triu_indices(P, k=1)
    bb, pair = np.nonzero(alive[:, upper_first] & alive[:, upper_second])
    score(bb, upper_first[pair], upper_second[pair])
    joins = []   # (batches, piece kept, piece absorbed) per round
    # Each row's cheapest allowed pair (first column on a tie) is kept, so a round scans
    # B x P row minima instead of every pair (as in the merge engine). A NaN cost ranks
    # first, as argmin over the allowed pairs ranks it.
    def key_of(bb, rows):
        return np.where(allowed[bb, rows], np.nan_to_num(cost[bb, rows], nan=-np.inf,
                                                         posinf=np.inf), np.inf)

    every = np.arange(P)
    row_arg = np.zeros((B, P), dtype=int)
    row_best = np.full((B, P), np.inf)
    n_allowed = allowed.reshape(B, -1).sum(axis=1)
    for b in range(B):
        key = key_of(b, every)
        row_arg[b] = key.argmin(axis=1)
        row_best[b] = key[every, row_arg[b]]
    todo = np.flatnonzero(n_allowed > 0)
    while todo.size:
        at = np.arange(todo.size)
        keep = row_best[todo].argmin(axis=1)
        gone = row_arg[todo, keep]
        stuck = np.flatnonzero(row_best[todo, keep] == np.inf)
        if stuck.size:  # every allowed pair costs +inf: the first allowed in row-major order
            first = allowed[todo[stuck]].reshape(stuck.size, -1).argmax(axis=1)
            keep[stuck], gone[stuck] = np.divmod(first, P)
        joins.append((todo, keep, gone))
        group[todo, keep] = group[todo, keep] + group[todo, gone]
        count[todo, keep] += count[todo, gone]
        size[todo, keep] += size[todo, gone]
        alive[todo, gone] = False
        for slot in (gone, keep):
            n_allowed[todo] -= allowed[todo, slot, :].sum(axis=1) + allowed[todo, :, slot].sum(axis=1)
            allowed[todo, slot, :] = False
            allowed[todo, :, slot] = False
        own_rss[todo, keep] = merged_rss(group[todo, keep], count[todo, keep], p)
        own_weights[todo, keep] = common_weights(group[todo, keep], p)
        others = alive[todo]
        others[at, keep] = False
        m, other = np.nonzero(others)
        if m.size:
            lo, hi = np.minimum(other, keep[m]), np.maximum(other, keep[m])
            score(todo[m], lo, hi)
            np.add.at(n_allowed, todo[m], allowed[todo[m], lo, hi])
        # Rows whose cheapest pair was cleared, and the two merged rows, in full; a row
        # below ``keep`` gained one new pair (column keep) and keeps its minimum unless
        # that pair undercuts it.
        arg = row_arg[todo]
        stale = (arg == keep[:, None]) | (arg == gone[:, None])
        stale[at, keep] = True
        stale[at, gone] = True
        sm, sx = np.nonzero(stale)
        key = key_of(todo[sm], sx)
        row_arg[todo[sm], sx] = key.argmin(axis=1)
        row_best[todo[sm], sx] = key[np.arange(sm.size), row_arg[todo[sm], sx]]
        gained = others & (every[None, :] < keep[:, None]) & ~stale
        gm, gx = np.nonzero(gained)
        value = key_of(todo[gm], gx)[np.arange(gm.size), keep[gm]] if gm.size else np.zeros(0)
        best, where = row_best[todo[gm], gx], row_arg[todo[gm], gx]
        better = (value < best) | ((value == best) & (keep[gm] < where))
        row_best[todo[gm][better], gx[better]] = value[better]
        row_arg[todo[gm][better], gx[better]] = keep[gm][better]
        todo = todo[n_allowed[todo] > 0]
    # Each piece's final piece, from the last join back (as in the merge loop's labels).
    final = np.broadcast_to(np.arange(P), (B, P)).copy()
    for todo, keep, gone in reversed(joins):
        final[todo, gone] = final[todo, keep]
    return final


def resampled_labels(Z, who, case_row, counts, eligible, p, chosen,
                     rule: KeepApartRule | None = None, base=None) -> np.ndarray:
    """Group every resample (rows of ``counts``): by ``rule``, or cut at ``chosen`` groups.

    With a rule, each resample's whole tree is built and :func:`groups_by_rule`
    decides its groups, as on the full data (the number may differ between
    resamples); without one (the chair chose the number) each tree is cut at
    ``chosen`` groups. Returns (B, R) slot labels; -1 for a rater left out of that
    resample.
    """
    sscp, n, active = resample_panels(Z, who, case_row, counts, eligible, p, base=base)
    if rule is None:
        agg = agglomerate(sscp, n, active, p, stop_at=max(chosen, 1), record=False)
        return agg.labels
    agg = agglomerate(sscp, n, active, p, stop_at=1, record=True, compact=True)
    losses, smaller = tree_side_losses(sscp, active, agg.history, p)
    return groups_by_rule(sscp, n, active, agg.history, losses, smaller, rule, p)


def resample_panels(Z, who, case_row, counts, eligible, p, *, base=None):
    """Per-rater SSCPs, counts and active raters of the case resamples (rows of ``counts``).

    A rater takes part in a resample when their own equation can be fitted on it.
    """
    R = eligible.size
    sscp, n = stacked_sscp(Z, who, R, weights=counts[:, case_row], base=base)
    own_rss = batched_rss(sscp, n, p)
    return sscp, n, eligible[None, :] & np.isfinite(own_rss) & (sscp[:, :, p, p] > 0)


def resample_counts(generator, n_cases: int, n_resamples: int) -> np.ndarray:
    """(n_resamples, n_cases) counts of cases drawn with replacement."""
    return generator.multinomial(n_cases, np.full(n_cases, 1.0 / n_cases),
                                 size=n_resamples).astype(float)


def group_jaccard(slots: np.ndarray, boot_slots: np.ndarray, eligible: np.ndarray) -> dict:
    """Per full-data group slot: mean over resamples of the best Jaccard match.

    All groups and resamples at once from one contingency count of (resample, group,
    resample label); a resample in which none of the group's raters took part is
    skipped for that group.
    """
    groups = sorted({int(x) for x in slots[eligible]})
    if not groups or boot_slots.shape[0] == 0:
        return {s: np.nan for s in groups}
    B, R = boot_slots.shape
    index = np.full(R, -1)
    index[np.isin(slots, groups)] = np.searchsorted(groups, slots[np.isin(slots, groups)])
    S = len(groups)
    present = boot_slots >= 0
    label_size = np.zeros((B, R), dtype=np.int64)          # raters with each label
    b_all, r_all = np.nonzero(present)
    np.add.at(label_size, (b_all, boot_slots[b_all, r_all]), 1)
    counted = present & (index >= 0)[None, :]
    b, r = np.nonzero(counted)
    target = np.zeros((B, S), dtype=np.int64)               # the group's raters present
    np.add.at(target, (b, index[r]), 1)
    flat = (b * S + index[r]) * R + boot_slots[b, r]
    cell, inter = np.unique(flat, return_counts=True)       # the non-empty cells only
    cb, rest = np.divmod(cell, S * R)
    cs, cu = np.divmod(rest, R)
    ratio = inter / (label_size[cb, cu] + target[cb, cs] - inter)
    best = np.zeros((B, S))
    np.maximum.at(best, (cb, cs), ratio)
    out = {}
    for k, s in enumerate(groups):
        seen = target[:, k] > 0
        out[s] = float(np.mean(best[seen, k])) if seen.any() else np.nan
    return out


def ward_view(coef, sscp, eligible, p, chosen, raters) -> list[str | None]:
    """Ward clustering (scipy) of the raters' standardized weight profiles."""
    names: list[str | None] = [None] * len(raters)
    idx = np.flatnonzero(eligible)
    if idx.size == 0:
        return names
    if idx.size == 1:
        names[idx[0]] = "A"
        return names
    profiles = standardized_weights(coef[idx], sscp[idx], p)
    tree = linkage(profiles, method="ward")
    cut = fcluster(tree, t=max(chosen, 1), criterion="maxclust")
    slots = np.full(len(raters), -1)
    slots[idx] = cut
    return name_groups(slots, raters)


def matched_share(a: np.ndarray, b: np.ndarray) -> float:
    """Share of items labelled alike after the best one-to-one pairing of labels."""
    ua, ia = np.unique(a, return_inverse=True)
    ub, ib = np.unique(b, return_inverse=True)
    table = np.zeros((ua.size, ub.size))
    np.add.at(table, (ia, ib), 1.0)
    rows, cols = linear_sum_assignment(-table)
    return float(table[rows, cols].sum() / a.size)



@dataclass(frozen=True)
class ResamplingStability:
    """What resampling cases did to a grouping (internal to the grouping)."""

    co_assignment: np.ndarray   # (R, R) share of resamples in which two raters share a group
    ari: np.ndarray             # (B,) adjusted Rand index of each resample against the full data
    jaccard: dict               # full-data group slot -> mean best-match Jaccard similarity
    n_sat_out: int              # resamples in which some grouped rater had to sit out


def co_assignment(boot_slots: np.ndarray) -> np.ndarray:
    """(R, R) share of resamples in which two raters share a group (NaN: never both in).

    Counted by products of 0/1 matrices: ``H H'`` with one column per (resample,
    group) counts the resamples two raters shared a group in, ``P' P`` (P: who took
    part in each resample) those they both took part in. Whole counts, exact in
    floating point; no (resamples, R, R) array.
    """
    B, R = boot_slots.shape
    present = boot_slots >= 0
    b, r = np.nonzero(present)
    column = np.unique(b * R + boot_slots[b, r], return_inverse=True)[1].reshape(-1)
    n_columns = int(column.max()) + 1 if column.size else 0
    if n_columns <= 512:
        member = np.zeros((R, max(n_columns, 1)))
        member[r, column] = 1.0
        together = member @ member.T
    else:  # many groups per resample: the same counts from a sparse product
        member = sparse.csr_array((np.ones(r.size), (r, column)), shape=(R, n_columns))
        together = (member @ member.T).toarray()
    took_part = present.astype(float)
    both = took_part.T @ took_part
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(both > 0, together / both, np.nan)


def resampling_stability(Z, who, case_row, n_cases, slots, eligible, p, chosen,
                         n_resamples, generator,
                         rule: KeepApartRule | None = None, base=None) -> ResamplingStability:
    """Group ``n_resamples`` case resamples in lockstep and compare with ``slots``.

    Cases are drawn with replacement (multinomial counts used as weights), every
    resample is grouped by the same merges and then by ``rule`` (or, without one,
    cut at ``chosen`` groups), as in Hennig 2007.
    """
    if not n_resamples:
        return stability_of(slots, np.zeros((0, eligible.size), dtype=int), eligible)
    counts = resample_counts(generator, n_cases, n_resamples)
    boot_slots = resampled_labels(Z, who, case_row, counts, eligible, p, chosen, rule, base=base)
    return stability_of(slots, boot_slots, eligible)


def stability_of(slots, boot_slots, eligible) -> ResamplingStability:
    """Co-assignment, ARI against ``slots`` and Jaccard matches of the resamples' groups."""
    R = eligible.size
    if boot_slots.shape[0] == 0:
        return ResamplingStability(co_assignment=np.full((R, R), np.nan), ari=np.array([]),
                                   jaccard={}, n_sat_out=0)
    present = boot_slots >= 0
    co = co_assignment(boot_slots)
    ari = np.array([adjusted_rand_index(slots[present[b] & eligible],
                                        boot_slots[b][present[b] & eligible])
                    for b in range(boot_slots.shape[0])])
    return ResamplingStability(
        co_assignment=co,
        ari=ari,
        jaccard=group_jaccard(slots, boot_slots, eligible),
        n_sat_out=int((~present[:, eligible]).any(axis=1).sum()),
    )


def ward_cross_check(coef, sscp, eligible, p, chosen, raters,
                     slots) -> tuple[list[str | None], float, float]:
    """Ward groups of the standardized weights, their ARI with ``slots`` and matched share."""
    ward_names = ward_view(coef, sscp, eligible, p, chosen, raters)
    ward_slots = np.array([-1 if w is None else sorted(set(filter(None, ward_names))).index(w)
                           for w in ward_names])
    if int(eligible.sum()) < 2:
        return ward_names, np.nan, np.nan
    return (ward_names, adjusted_rand_index(slots[eligible], ward_slots[eligible]),
            matched_share(slots[eligible], ward_slots[eligible]))
