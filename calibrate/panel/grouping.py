"""Groups of raters who share a policy.

The panel's raters are grouped bottom-up by how much predictive power a shared
equation costs (Ward 1963; Christal 1968). Every rater starts with an equation of
their own. At each step the two groups whose *common* equation loses the least
overall R^2 are merged. A group's common equation has shared cue weights while each
rater keeps an intercept of their own, so a lenient and a severe rater who weigh
the cues alike still land together.

Everything is computed from each rater's centred sums of squares and
cross-products (SSCP) of ``[cues..., judgment]``: the common equation of a group is
the regression on the *sum* of its raters' centred SSCPs (the pooled-within SSCP),
so no merge ever refits raw rows. Bootstrap resamples of cases are count vectors
over cases, used as weights in :func:`calibrate.policy.linalg.grouped_sscp`, and all
resamples are grouped in lockstep with numpy.

Overall R^2 here is ``1 - sum(RSS of every group's equation) / sum(each rater's
centred sum of squares of judgments)``: the share of each rater's own spread of
judgments that the group equations explain. Differences in leniency (intercepts)
are not counted as explained, in line with giving each rater an intercept.

This module holds the results and the public entry point :func:`group_raters`; the
merge engine is in :mod:`calibrate.panel.merges` and the checks on a grouping
(number of groups, resampling stability, Ward cross-check) in
:mod:`calibrate.panel.stability`.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..data.cues import CueDesign
from ..errors import DataError
from ..policy.importance import cue_importance
from ..policy.linalg import GroupedSSCP, grouped_sscp, ols_from_sscp
from ..result_base import ResultMixin, jsonable
from .merges import agglomerate, labels_at, name_groups, release_work_memory, standardized_weights
from .stability import (
    SURVIVAL_JACCARD,
    adjusted_rand_index,
    groups_by_rule,
    merge_side_loss,
    null_panel_budget,
    resample_budget,
    resampling_stability,
    rule_and_resampled_groups,
    stability_of,
    tree_side_losses,
    ward_cross_check,
)

__all__ = [
    "GroupPolicy",
    "GroupingResult",
    "MergeStep",
    "adjusted_rand_index",
    "group_raters",
]

# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class MergeStep(ResultMixin):
    """One merge of the grouping sequence.

    ``r2`` is the overall R^2 after the merge and ``r2_drop`` what the merge cost the
    whole panel's R^2 (descriptive: it shrinks as the panel grows). ``side_r2_loss``
    is what the merge costs the side that suffers most, as a share of that side's
    own spread of judgments (the R^2 it gives up by adopting the merged weights;
    :func:`calibrate.panel.stability.merge_side_loss`); the number-of-groups rule
    reads this one, which does not depend on panel size.
    ``f_statistic`` compares the two groups' weights (the F of equal slopes across
    two sets of raters, Chow 1960, with the residual variance of the model just
    before the merge). It is descriptive only: the groups were formed from the same
    judgments to differ, so the F distribution would give p-values far too small for
    the late merges (measured: half of simulated one-policy panels had some merge at
    p < .01). ``p_value`` is instead the parametric-bootstrap p-value of the merge's
    side loss, adjusted over the whole tree (None when the chair chose the number).
    """

    step: int
    merged_a: tuple[str, ...]
    merged_b: tuple[str, ...]
    n_groups: int
    r2: float
    r2_drop: float
    side_r2_loss: float
    f_statistic: float
    df_num: float
    df_den: float
    p_value: float


@dataclass(frozen=True)
class GroupPolicy(ResultMixin):
    """The shared policy of one group (pooled-within regression of its raters)."""

    group: str
    raters: tuple[str, ...]
    n: int                          # judgments pooled
    r2: float                       # R^2 of the common equation, within raters
    weights: dict[str, float]       # raw weights per design column
    std_weights: dict[str, float]   # standardized weights per design column
    importance: dict[str, float]    # shares per cue, sum 1
    importance_r2: dict[str, float]  # per cue, sum R^2
    sets_apart: str                 # one plain sentence
    stability: float                # mean best-match Jaccard over resamples (NaN: none)
    survives: bool | None           # stability >= SURVIVAL_JACCARD; None without resamples


@dataclass(frozen=True)
class GroupingResult(ResultMixin):
    """Grouping of one phase's raters by shared policy.

    Attributes
    ----------
    raters : raters in sorted order (all raters in ``first``).
    rater_group : rater -> group label ('A' is the largest group); None for a rater
        whose own equation could not be fitted (listed in ``warnings``).
    merges : the whole merge sequence, from one group per rater down to one group.
    r2_individual : overall R^2 with one equation per rater (before any merge).
    n_groups : number of groups chosen (by the rule, or as asked).
    rule : the rule that chose ``n_groups``, in plain words.
    groups : each group's pooled policy, largest first.
    n_resamples : case resamples used for stability (0: none).
    ari_estimate, ari_ci_low, ari_ci_high : adjusted Rand index between each
        resample's grouping and the full-data grouping (mean, 2.5% and 97.5%).
    co_assignment : (R, R) share of resamples in which two raters share a group.
    ward_group : rater -> label of Ward clustering on standardized weight profiles.
    ward_ari : adjusted Rand index between the Ward view and the main grouping.
    ward_matched : share of raters whose Ward group matches their main group after
        the best one-to-one pairing of labels.
    warnings : plain-English warnings.
    """

    raters: tuple[str, ...]
    rater_group: dict[str, str | None]
    merges: tuple[MergeStep, ...]
    r2_individual: float
    n_groups: int
    rule: str
    threshold: float
    alpha: float
    groups: tuple[GroupPolicy, ...]
    n_resamples: int
    ari_estimate: float
    ari_ci_low: float
    ari_ci_high: float
    co_assignment: np.ndarray = field(repr=False)
    ward_group: dict[str, str | None]
    ward_ari: float
    ward_matched: float
    warnings: tuple[str, ...]
    reduced_forms: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        out = jsonable({
            "n_groups": self.n_groups,
            "rule": self.rule,
            "threshold": self.threshold,
            "alpha": self.alpha,
            "r2_individual": self.r2_individual,
            "raters": [{"rater": r, "group": self.rater_group[r],
                        "ward_group": self.ward_group[r]} for r in self.raters],
            "groups": [g.to_dict() for g in self.groups],
            "merges": [m.to_dict() for m in self.merges],
            "stability": {
                "n_resamples": self.n_resamples,
                "ari": {"estimate": self.ari_estimate, "ci_low": self.ari_ci_low,
                        "ci_high": self.ari_ci_high},
                # Pair-level shares grow with raters squared: they are a table of their
                # own (group_pairs), not part of results.json.
                "n_pairs": self.n_pairs,
            },
            "ward": {"ari": self.ward_ari, "matched": self.ward_matched},
            "warnings": list(self.warnings),
            "reduced_forms": list(self.reduced_forms),
        })
        return out

    @property
    def n_pairs(self) -> int:
        """Pairs of grouped raters (the rows of :meth:`pairs_frame`)."""
        k = sum(self.rater_group[r] is not None for r in self.raters)
        return k * (k - 1) // 2

    def to_frame(self) -> pd.DataFrame:
        """One row per rater: group, Ward group."""
        return pd.DataFrame({
            "rater": list(self.raters),
            "group": [self.rater_group[r] for r in self.raters],
            "ward_group": [self.ward_group[r] for r in self.raters],
        })

    def merge_frame(self) -> pd.DataFrame:
        """The merge table, one row per step (raters of each side joined by ', ')."""
        rows = [m.to_dict() for m in self.merges]
        for row in rows:
            row["merged_a"] = ", ".join(row["merged_a"])
            row["merged_b"] = ", ".join(row["merged_b"])
        columns = [f.name for f in MergeStep.__dataclass_fields__.values()]
        return pd.DataFrame(rows, columns=columns)

    def groups_frame(self) -> pd.DataFrame:
        """Tidy: one row per group and design column / cue."""
        rows = []
        for g in self.groups:
            for col, w in g.std_weights.items():
                rows.append({"group": g.group, "term": col, "measure": "std_weight",
                             "estimate": w})
            for cue, s in g.importance.items():
                rows.append({"group": g.group, "term": cue, "measure": "importance",
                             "estimate": s})
        return pd.DataFrame(rows, columns=["group", "term", "measure", "estimate"])

    def pairs_frame(self) -> pd.DataFrame:
        """How often each pair of grouped raters shared a group over the resamples.

        One row per pair (about 500,000 for 1,000 raters), built column-wise from the
        co-assignment matrix; NaN where the two never sat in the same resample.
        """
        grouped = np.flatnonzero([self.rater_group[r] is not None for r in self.raters])
        first, second = np.triu_indices(grouped.size, k=1)
        names = np.array(self.raters, dtype=object)[grouped]
        return pd.DataFrame({"rater_a": names[first], "rater_b": names[second],
                             "together": self.co_assignment[grouped[first], grouped[second]]})


# --------------------------------------------------------------------------- main


def group_raters(
    design: CueDesign,
    first: pd.DataFrame,
    *,
    rng: np.random.Generator | int | None = None,
    n_resamples: int = 200,
    threshold: float = 0.02,
    alpha: float = 0.05,
    n_groups: int | None = None,
    n_null: int = 100,
    scale_down: bool = True,
) -> GroupingResult:
    """Group raters whose judgments follow a common policy.

    Parameters
    ----------
    design : the phase's cue design over cases.
    first : DataFrame with columns ``rater``, ``case``, ``judgment`` (first judgments).
    rng : seed or Generator for the case resamples (same seed, same result).
    n_resamples : case resamples for stability (0 skips it). Large panels use fewer
        (resamples x raters^2 is capped; the number used is stated in ``reduced_forms``,
        which the audit warns).
    threshold : R^2 that the side of a merge that suffers most must lose (as a share
        of its own spread of judgments) for the merge to count as joining different
        policies. Default 0.02.
    alpha : level of the simulated test (adjusted over the whole merge tree) that must
        also reject for a merge to count as joining different policies.
    n_groups : force this many groups (the chair overrules the rule); None: the rule.
    n_null : simulated one-policy panels for the number-of-groups test.
    scale_down : on large panels, fewer resamples and simulated panels than asked
        (resamples x raters^2 is capped, never below 20 resamples and 50 simulated
        panels; above 1,000 raters the number-of-groups test runs the fewest simulated
        panels that let its p-value fall below ``alpha``, 20 at 0.05; each reduction is
        stated in ``reduced_forms``, which the audit warns). False runs the full
        numbers on any panel size.

    Returns
    -------
    GroupingResult

    Notes
    -----
    Merge cost. With ``S_g`` the sum of the centred SSCPs of group ``g``'s raters,
    ``RSS_g = S_yy - S_yx S_xx^{-1} S_xy`` is the residual sum of squares of its
    common equation (shared weights, an intercept per rater). Merging ``a`` and ``b``
    costs ``RSS_{a+b} - RSS_a - RSS_b`` (Ward 1963, Journal of the American
    Statistical Association 58:236-244, error sum of squares criterion; applied to
    rater policies by Christal 1968). Overall R^2 is ``1 - sum_g RSS_g / sum_r S_yy,r``.

    Number of groups (our own rule; the defaults are ours). Each merge of the tree
    is scored by its side loss (``side_r2_loss``): the R^2 that the side which
    suffers most gives up, as a share of its own spread of judgments, by adopting
    the merged weights (:func:`calibrate.panel.stability.merge_side_loss`). It is
    measured within the two merged groups only, so it does not shrink as the panel
    grows. A merge keeps its sides apart when its side loss exceeds ``threshold``
    *and* is larger than one-policy panels produce: ``n_null`` panels are simulated
    from the fitted one-group model (parametric bootstrap; McLachlan 1987) and
    grouped; each merge's loss is divided by the typical largest loss of merges with
    a smaller side of that size class (1, 2-3, 4-7, ... raters: a lone rater's loss
    is noisier than a group's), and its p-value is taken against the largest scaled
    loss of each simulated panel's whole tree (single-step max-T, Westfall & Young
    1993), which must be below ``alpha``. The groups are then the pieces of the tree
    between the merges kept apart, with pieces the rule would not keep apart joined
    again, cheapest first (see :func:`calibrate.panel.stability.groups_by_rule`).
    An earlier rule required a merge to cost more than 0.01 of the *whole panel's*
    R^2 and read only the top of the tree: a lone rater with a different policy
    moves the whole panel's R^2 by about 1/R of their own loss and in a large panel
    joins one half of a split lower down, so panels of 60 or 100 absorbed them
    (figures in DEVELOPERS.md). Each merge's p-value is in ``p_value``; the whole
    merge table is returned so a chair can choose another number (``n_groups``).

    Stability. Cases are resampled with replacement (counts as weights); each
    resample is grouped by the same merges and the same rule (with the full data's
    simulated yardsticks), or cut at ``n_groups`` when the chair chose the number
    (as in Hennig 2007). Reported: how often each pair shares a group, the adjusted
    Rand index against the full-data grouping, and per group the mean best-match
    Jaccard similarity; below 0.5 the group does not survive resampling.

    Cross-check. Ward clustering (scipy) of each rater's standardized weights, cut at
    the same number of groups, compared with the main grouping.

    Raises
    ------
    DataError
        ``first`` lacks a needed column, names a case missing from the design, or
        has no usable judgments.
    """
    try:
        return _group_raters(design, first, rng=rng, n_resamples=n_resamples,
                             threshold=threshold, alpha=alpha, n_groups=n_groups, n_null=n_null,
                             scale_down=scale_down)
    finally:
        release_work_memory()  # the pair-cost matrices kept between the groupings


def _group_raters(design, first, *, rng, n_resamples, threshold, alpha, n_groups,
                  n_null, scale_down=True) -> GroupingResult:
    if threshold < 0 or not np.isfinite(threshold):
        raise DataError(f"threshold must be a non-negative number of R^2; got {threshold!r}.")
    if not 0 < alpha <= 1:
        raise DataError(f"alpha must be in (0, 1]; got {alpha!r}.")
    if n_resamples < 0:
        raise DataError(f"n_resamples must be 0 or more; got {n_resamples!r}.")
    if n_null < 1:
        raise DataError(f"n_null must be 1 or more; got {n_null!r}.")
    missing = [c for c in ("rater", "case", "judgment") if c not in first.columns]
    if missing:
        raise DataError(f"The judgments table lacks column(s) {', '.join(missing)}; "
                        "it needs rater, case and judgment.")
    generator = np.random.default_rng(rng)  # a Generator passes through unchanged
    warnings: list[str] = []
    reduced: list[str] = []   # the plain statements of what ran in a reduced form

    raters = sorted(str(r) for r in pd.unique(first["rater"]))
    first = first.assign(rater=first["rater"].astype(str), case=first["case"].astype(str))
    rows_unsorted = _design_rows(design, first["case"])
    p = design.n_columns
    cue_columns = [cols for cols in design.cue_groups() if cols]
    cue_names = [c for c, cols in zip(design.cues, design.cue_groups()) if cols]
    if p == 0:
        raise DataError("The cue design has no columns; there is no policy to group by.")

    # Sorted rows make every sum, and so every digit, independent of the input's row order.
    first = first.assign(design_row=rows_unsorted).sort_values(["rater", "case"], kind="stable")
    rows = first["design_row"].to_numpy()
    y = pd.to_numeric(first["judgment"], errors="coerce").to_numpy(dtype=float)
    X = design.matrix[rows]
    usable = np.isfinite(y) & np.isfinite(X).all(axis=1)
    rater_index = {r: k for k, r in enumerate(raters)}
    who = first["rater"].map(rater_index).to_numpy()[usable]
    case_row = rows[usable]
    Z = np.column_stack([X[usable], y[usable]])
    if Z.shape[0] == 0:
        raise DataError("No judgment has both a value and complete cues; nothing to group.")
    R = len(raters)
    full = grouped_sscp(Z, who, R)
    own = ols_from_sscp(full, np.arange(p), p)
    eligible = own.rank_ok & (full.sscp[:, p, p] > 0)
    for k in np.flatnonzero(~eligible):
        if full.n[k] <= p + 1:
            why = f"judged only {int(full.n[k])} usable case(s), too few for {p} cue term(s)"
        elif full.sscp[k, p, p] <= 0:
            why = "gave the same judgment to every case"
        else:
            why = "saw cases on which the cues are collinear"
        warnings.append(f"Rater '{raters[k]}' {why}; left out of the grouping.")

    n_eligible = int(eligible.sum())
    active = eligible[None, :]
    agg = agglomerate(full.sscp[None], full.n[None], active, p, stop_at=1, record=True)
    tss = float(full.sscp[eligible, p, p].sum())
    n_total = float(full.n[eligible].sum())
    with np.errstate(invalid="ignore", divide="ignore"):
        r2_individual = 1.0 - float(own.rss[eligible].sum()) / tss if n_eligible else np.nan

    start_labels = np.where(eligible, np.arange(R), -1)
    merges = _merge_steps(agg.history, start_labels, raters, full.sscp, tss=tss,
                          n_residual=n_total - n_eligible, p=p)

    used_resamples = 0
    if n_eligible >= 2:
        used_resamples = resample_budget(n_resamples, n_eligible) if scale_down else n_resamples
    keep_apart = boot_slots = None
    if n_groups is not None:
        if not 1 <= n_groups <= max(n_eligible, 1):
            raise DataError(f"n_groups must be between 1 and {max(n_eligible, 1)} "
                            f"(the raters that can be grouped); got {n_groups!r}.")
        chosen = int(n_groups)
        rule = f"{chosen} group(s), as asked."
    else:
        asked_null = n_null
        if scale_down:
            n_null = null_panel_budget(n_null, n_eligible, alpha)
        if n_null < asked_null:
            reduced.append(f"The number-of-groups test from {n_null} simulated panels instead "
                           f"of {asked_null} on this panel size ({n_eligible} raters).")
        chosen = min(n_eligible, 1)  # the rule below decides when two or more can be fitted
        if n_eligible >= 2:
            # The simulated panels and the resamples merge in one lockstep (same draws).
            keep_apart, boot_slots = rule_and_resampled_groups(
                Z, who, case_row, len(design.case_ids), eligible, own.rss, own.df_resid, p,
                n_null, used_resamples, generator, threshold=threshold, alpha=alpha, base=full)
            losses, smaller = tree_side_losses(full.sscp[None], eligible[None], agg.history, p)
            p_values = keep_apart.p_value(losses[0], smaller[0])
            merges = [dataclasses.replace(m, p_value=float(pv)) for m, pv in zip(merges, p_values)]
        rule = (f"Keep two groups apart when sharing one equation would cost either of "
                f"them more than {threshold:g} of its own R^2, and more than merges of "
                f"groups that size cost in panels simulated with one shared policy "
                f"(p < {alpha:g} over the whole merge tree, {n_null} simulations).")
    if n_eligible == 0:
        chosen = 0
        warnings.append("No rater's policy could be fitted; no groups formed.")
    if keep_apart is not None and n_eligible >= 2:
        slots = groups_by_rule(full.sscp[None], full.n[None], eligible[None], agg.history,
                               losses, smaller, keep_apart, p)[0]
        chosen = int(np.unique(slots[slots >= 0]).size)
    else:
        slots = labels_at(start_labels, agg.history, max(n_eligible - chosen, 0))
    names = name_groups(slots, raters)
    rater_group = dict(zip(raters, names))

    if used_resamples < n_resamples and n_eligible >= 2:
        reduced.append(f"Grouping stability from {used_resamples} case resamples instead of "
                       f"{n_resamples} on this panel size ({n_eligible} raters).")
    if boot_slots is not None:
        stability = stability_of(slots, boot_slots, eligible)
    else:
        stability = resampling_stability(Z, who, case_row, len(design.case_ids), slots,
                                         eligible, p, chosen, used_resamples, generator,
                                         keep_apart, base=full)
    if stability.n_sat_out:
        warnings.append(f"In {stability.n_sat_out} of {used_resamples} resamples some rater "
                        "had too few distinct cases for an equation and sat that resample out.")
    ari = stability.ari

    groups = _group_policies(full, slots, names, raters, p, design, cue_names, cue_columns,
                             stability.jaccard, warnings)
    for g in groups:
        if g.survives is False:
            warnings.append(f"Group '{g.group}' does not survive resampling of cases "
                            f"(mean Jaccard similarity {g.stability:.2f}, below "
                            f"{SURVIVAL_JACCARD}); treat it as unstable.")

    ward_names, ward_ari, ward_matched = ward_cross_check(own.coef, full.sscp, eligible, p,
                                                          chosen, raters, slots)

    return GroupingResult(
        raters=tuple(raters),
        rater_group=rater_group,
        merges=tuple(merges),
        r2_individual=r2_individual,
        n_groups=chosen,
        rule=rule,
        threshold=float(threshold),
        alpha=float(alpha),
        groups=tuple(groups),
        n_resamples=used_resamples,
        ari_estimate=float(ari.mean()) if ari.size else np.nan,
        ari_ci_low=float(np.quantile(ari, 0.025)) if ari.size else np.nan,
        ari_ci_high=float(np.quantile(ari, 0.975)) if ari.size else np.nan,
        co_assignment=stability.co_assignment,
        ward_group=dict(zip(raters, ward_names)),
        ward_ari=float(ward_ari),
        ward_matched=float(ward_matched),
        warnings=tuple(warnings),
        reduced_forms=tuple(reduced),
    )


def _design_rows(design: CueDesign, cases: pd.Series) -> np.ndarray:
    """Row of ``design.matrix`` for each case id (text); DataError naming unknown ids.

    One hash lookup over the column: a Python set of 400,000 ids took 1.4 s, and
    :meth:`CueDesign.row_of`'s dictionary as long again. The same rows as ``row_of``
    (a repeated id maps to its last row).
    """
    index = pd.Index(design.case_ids)
    position = np.arange(len(index))
    if not index.is_unique:
        last = ~index.duplicated(keep="last")
        index, position = index[last], position[last]
    found = index.get_indexer(cases)
    unknown = sorted(set(cases[found < 0]))
    if unknown:
        raise DataError(f"{len(unknown)} case(s) in the judgments are not in the cue design, "
                        f"e.g. '{unknown[0]}'. Every judged case needs its cues.")
    return position[found]

def _merge_steps(history, start_labels, raters, sscp, *, tss, n_residual, p) -> list[MergeStep]:
    """The merge table of one grouping, from the recorded history of :func:`agglomerate`.

    ``sscp`` is each rater's centred SSCP (for the side losses). ``n_residual`` is
    the judgments pooled less one intercept per rater; the F of equal slopes (Chow
    1960) has ``p`` and ``n_residual - p * groups_before`` degrees of freedom.
    """
    group_sscp = np.where((start_labels >= 0)[:, None, None], sscp, 0.0)
    sides = []
    for _, i, j, *_ in history:  # one step per merge; the batched work is below
        i, j = int(i[0]), int(j[0])
        sides.append((group_sscp[i].copy(), group_sscp[j].copy()))
        group_sscp[i] += group_sscp[j]
    side_loss = (merge_side_loss(np.array([a for a, _ in sides]), np.array([b for _, b in sides]), p)
                 if sides else np.array([]))
    merges: list[MergeStep] = []
    labels = start_labels.copy()
    for step, (_, i, j, cost, rss_before, groups_before) in enumerate(history, start=1):
        i, j, cost = int(i[0]), int(j[0]), float(cost[0])
        rss_before, groups_before = float(rss_before[0]), int(groups_before[0])
        df_den = n_residual - groups_before * p
        with np.errstate(invalid="ignore", divide="ignore"):
            f_stat = (cost / p) / (rss_before / df_den) if df_den > 0 else np.nan
        rss_after = rss_before + cost
        merges.append(MergeStep(
            step=step,
            merged_a=tuple(raters[k] for k in np.flatnonzero(labels == i)),
            merged_b=tuple(raters[k] for k in np.flatnonzero(labels == j)),
            n_groups=groups_before - 1,
            r2=1.0 - rss_after / tss,
            r2_drop=cost / tss,
            side_r2_loss=float(side_loss[step - 1]),
            f_statistic=f_stat,
            df_num=float(p),
            df_den=float(df_den),
            p_value=np.nan,
        ))
        labels = np.where(labels == j, i, labels)
    return merges


def _group_policies(full, slots, names, raters, p, design, cue_names, cue_columns,
                    jaccard, warnings) -> list[GroupPolicy]:
    present = sorted({int(s) for s in slots if s >= 0},
                     key=lambda s: names[int(np.flatnonzero(slots == s)[0])])
    if not present:
        return []
    member_of = np.array([[slots[r] == s for r in range(len(raters))] for s in present])
    pooled = np.einsum("gr,rij->gij", member_of.astype(float), full.sscp)
    pooled_n = member_of.astype(float) @ full.n
    # The rest of the panel for each group: everybody else who was grouped.
    grouped = slots >= 0
    rest = np.einsum("gr,rij->gij", (grouped[None, :] & ~member_of).astype(float), full.sscp)
    rest_n = (grouped[None, :] & ~member_of).astype(float) @ full.n
    both = np.concatenate([pooled, rest])
    both_n = np.concatenate([pooled_n, rest_n])
    fit = ols_from_sscp(GroupedSSCP(n=both_n, mean=np.zeros((len(both_n), p + 1)), sscp=both),
                        np.arange(p), p)
    std = standardized_weights(fit.coef, both, p)
    d = np.sqrt(np.einsum("gii->gi", both))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = both / (d[:, :, None] * d[:, None, :])
    # Importance on each pooled-within correlation matrix: general dominance (Budescu
    # 1993), or relative weights (Johnson 2000) beyond 12 cues, from calibrate.policy.importance.
    importance_r2 = np.full((len(both), len(cue_columns)), np.nan)
    ok = fit.rank_ok & np.isfinite(corr).all(axis=(1, 2))
    if ok.any():
        values, method = cue_importance(corr[ok, :p, :p], corr[ok, :p, p:], cue_columns)
        importance_r2[ok] = values[:, 0, :]
        if method != "dominance":
            warnings.append(f"With {len(cue_columns)} cues, group importance uses relative "
                            "weights (Johnson 2000) instead of dominance analysis.")
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = importance_r2 / importance_r2.sum(axis=1, keepdims=True)

    G = len(present)
    out = []
    for g, s in enumerate(present):
        label = names[int(np.flatnonzero(slots == s)[0])]
        members = tuple(raters[r] for r in np.flatnonzero(slots == s))
        sentence = _sets_apart_sentence(label, std[g], std[G + g], shares[g], shares[G + g],
                                        cue_names, cue_columns, design.columns, G)
        stab = jaccard.get(s, np.nan)
        out.append(GroupPolicy(
            group=label,
            raters=members,
            n=int(round(pooled_n[g])),
            r2=float(fit.r2[g]),
            weights={c: float(w) for c, w in zip(design.columns, fit.coef[g])},
            std_weights={c: float(w) for c, w in zip(design.columns, std[g])},
            importance={c: float(v) for c, v in zip(cue_names, shares[g])},
            importance_r2={c: float(v) for c, v in zip(cue_names, importance_r2[g])},
            sets_apart=sentence,
            stability=float(stab),
            survives=None if not np.isfinite(stab) else bool(stab >= SURVIVAL_JACCARD),
        ))
    return out


def _sets_apart_sentence(label, std_group, std_rest, share_group, share_rest,
                         cue_names, cue_columns, columns, n_groups) -> str:
    """The cue whose standardized weights differ most between a group and the rest."""
    if n_groups < 2:
        return "All grouped raters share one policy, so no cue sets a group apart."
    gaps = np.array([np.sqrt(np.sum((std_group[c] - std_rest[c]) ** 2)) for c in cue_columns])
    if not np.isfinite(gaps).any():
        return f"Group {label}: the weights could not be compared with the other raters'."
    j = int(np.nanargmax(gaps))
    cue, cols = cue_names[j], cue_columns[j]
    if len(cols) == 1:
        mine, theirs = std_group[cols[0]], std_rest[cols[0]]
        if np.sign(mine) != np.sign(theirs) and abs(mine) > 0.05 and abs(theirs) > 0.05:
            how = "in the opposite direction to"
        elif abs(mine) > abs(theirs):
            how = "more heavily than"
        else:
            how = "less heavily than"
        return (f"Group {label} weighs {cue} {how} the other raters "
                f"(standardized weight {mine:.2f} against {theirs:.2f}).")
    return (f"Group {label} sets itself apart most on {cue} "
            f"(importance share {share_group[j]:.0%} against {share_rest[j]:.0%} "
            "for the other raters).")

