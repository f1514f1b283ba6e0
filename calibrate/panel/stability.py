"""How far to trust a policy grouping: the number of groups, resampling, a cross-check.

Three checks on the grouping made by :func:`calibrate.panel.grouping.group_raters`, all
run on the merge engine of :mod:`calibrate.panel.merges` so that every simulated
panel and every case resample is grouped in lockstep with numpy:

* the simulated test behind the number of groups (a parametric bootstrap of the
  drop in overall R^2 at a merge; McLachlan 1987);
* stability under resampling of cases (pair co-assignment, adjusted Rand index,
  each group's best-match Jaccard similarity; Hennig 2007);
* Ward clustering of the raters' standardized weights, compared with the grouping.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.optimize import linear_sum_assignment

from ..policy.linalg import GroupedSSCP, grouped_sscp, ols_from_sscp
from .merges import agglomerate, batched_rss, labels_at, name_groups, stacked_sscp, standardized_weights

__all__ = [
    "SURVIVAL_JACCARD",
    "ResamplingStability",
    "adjusted_rand_index",
    "group_jaccard",
    "matched_share",
    "number_of_groups",
    "resample_budget",
    "resampled_labels",
    "resampling_stability",
    "simulated_drops",
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


def simulated_drops(Z, who, slots, eligible, own_rss, own_df, p, n_groups, n_sims, generator):
    """Overall-R^2 drop of the merge into ``n_groups`` groups when ``n_groups`` is true.

    Parametric bootstrap: judgments are simulated from the ``n_groups``-group model
    (each group's common weights; each rater's own residual spread, normal errors),
    regrouped from scratch, and the drop of the merge that reaches ``n_groups``
    groups is recorded (McLachlan 1987, Applied Statistics 36:318-324, bootstraps the
    test for the number of mixture components this way; from memory).
    """
    R = eligible.size
    present = np.unique(slots[slots >= 0])
    member = (slots[None, :] == present[:, None]).astype(float)
    base = grouped_sscp(Z, who, R)
    pooled = np.einsum("gr,rij->gij", member, base.sscp)
    fit = ols_from_sscp(GroupedSSCP(n=member @ base.n, mean=np.zeros((present.size, p + 1)),
                                    sscp=pooled), np.arange(p), p)
    coef_of_rater = np.zeros((R, p))
    rows_of_slot = np.searchsorted(present, slots[eligible])
    coef_of_rater[eligible] = fit.coef[rows_of_slot]
    with np.errstate(invalid="ignore", divide="ignore"):
        sigma = np.where(eligible, np.sqrt(own_rss / own_df), 0.0)
    # The intercepts are left out: centring within rater removes them anyway.
    signal = np.einsum("mp,mp->m", Z[:, :p], coef_of_rater[who])
    noise = generator.standard_normal((n_sims, Z.shape[0])) * sigma[who]
    sscp, n = stacked_sscp(Z, who, R, judgments=signal[None, :] + noise)
    active = np.broadcast_to(eligible, (n_sims, R))
    agg = agglomerate(sscp, n, active, p, stop_at=n_groups, record=False)
    return agg.last_cost / agg.tss


def resampled_labels(Z, who, case_row, counts, eligible, p, chosen) -> np.ndarray:
    """Group every resample (rows of ``counts``) and cut at ``chosen`` groups.

    Returns (B, R) slot labels; -1 for a rater left out of that resample.
    """
    R = eligible.size
    sscp, n = stacked_sscp(Z, who, R, weights=counts[:, case_row])
    own_rss = batched_rss(sscp, n, p)
    active = eligible[None, :] & np.isfinite(own_rss) & (sscp[:, :, p, p] > 0)
    agg = agglomerate(sscp, n, active, p, stop_at=max(chosen, 1), record=False)
    return agg.labels


def group_jaccard(slots: np.ndarray, boot_slots: np.ndarray, eligible: np.ndarray) -> dict:
    """Per full-data group slot: mean over resamples of the best Jaccard match."""
    out = {}
    for s in sorted({int(x) for x in slots[eligible]}):
        member = slots == s
        scores = []
        for labels in boot_slots:
            here = labels >= 0
            target = member & here
            if not target.any():
                continue
            found = labels[:, None] == np.unique(labels[here])[None, :]
            inter = (found & target[:, None]).sum(axis=0)
            union = (found | target[:, None]).sum(axis=0)
            scores.append((inter / union).max())
        out[s] = float(np.mean(scores)) if scores else np.nan
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



def number_of_groups(drop_into: dict[int, float], Z, who, start_labels, history, eligible,
                     own_rss, own_df, p, *, threshold: float, alpha: float, n_sims: int,
                     generator: np.random.Generator) -> tuple[int, dict[int, float]]:
    """The number of groups by the rule of :func:`calibrate.panel.grouping.group_raters`.

    ``drop_into[k]`` is the drop of overall R^2 of the merge into ``k`` groups. For
    k = 1, 2, ... that merge counts as joining different policies when its drop
    exceeds ``threshold`` and its Monte Carlo p-value
    ``(1 + #{simulated drop >= observed}) / (n_sims + 1)`` from
    :func:`simulated_drops` is below ``alpha``; the first k whose merge fails either
    is chosen. Returns the chosen k and the p-value of every merge tested, by k.
    """
    n_eligible = int(eligible.sum())
    chosen = 1
    p_values: dict[int, float] = {}
    while chosen in drop_into:
        observed = drop_into[chosen]
        if not observed > threshold:
            break
        level_slots = labels_at(start_labels, history, n_eligible - chosen)
        drops = simulated_drops(Z, who, level_slots, eligible, own_rss, own_df, p,
                                chosen, n_sims, generator)
        p_values[chosen] = float((1.0 + np.sum(drops >= observed)) / (n_sims + 1.0))
        if not p_values[chosen] < alpha:
            break
        chosen += 1
    return chosen, p_values


@dataclass(frozen=True)
class ResamplingStability:
    """What resampling cases did to a grouping (internal to the grouping)."""

    co_assignment: np.ndarray   # (R, R) share of resamples in which two raters share a group
    ari: np.ndarray             # (B,) adjusted Rand index of each resample against the full data
    jaccard: dict               # full-data group slot -> mean best-match Jaccard similarity
    n_sat_out: int              # resamples in which some grouped rater had to sit out


def resampling_stability(Z, who, case_row, n_cases, slots, eligible, p, chosen,
                         n_resamples, generator) -> ResamplingStability:
    """Group ``n_resamples`` case resamples in lockstep and compare with ``slots``.

    Cases are drawn with replacement (multinomial counts used as weights), every
    resample is grouped by the same merges and cut at ``chosen`` groups (as in
    Hennig 2007).
    """
    R = eligible.size
    if not n_resamples:
        return ResamplingStability(co_assignment=np.full((R, R), np.nan), ari=np.array([]),
                                   jaccard={}, n_sat_out=0)
    counts = generator.multinomial(n_cases, np.full(n_cases, 1.0 / n_cases),
                                   size=n_resamples).astype(float)
    boot_slots = resampled_labels(Z, who, case_row, counts, eligible, p, chosen)
    present = boot_slots >= 0
    same = (boot_slots[:, :, None] == boot_slots[:, None, :]) & present[:, :, None] \
        & present[:, None, :]
    both = (present[:, :, None] & present[:, None, :]).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        co = np.where(both > 0, same.sum(axis=0) / both, np.nan)
    ari = np.array([adjusted_rand_index(slots[present[b] & eligible],
                                        boot_slots[b][present[b] & eligible])
                    for b in range(n_resamples)])
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
