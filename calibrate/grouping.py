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
over cases, used as weights in :func:`calibrate.linalg.grouped_sscp`, and all
resamples are grouped in lockstep with numpy.

Overall R^2 here is ``1 - sum(RSS of every group's equation) / sum(each rater's
centred sum of squares of judgments)``: the share of each rater's own spread of
judgments that the group equations explain. Differences in leniency (intercepts)
are not counted as explained, in line with giving each rater an intercept.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import sparse
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.optimize import linear_sum_assignment

from ._results import ResultMixin, jsonable
from .cues import CueDesign
from .errors import DataError
from .importance import cue_importance
from .linalg import GroupedSSCP, grouped_sscp, ols_from_sscp

__all__ = [
    "MergeStep",
    "GroupPolicy",
    "GroupingResult",
    "group_raters",
    "adjusted_rand_index",
]

#: A group whose mean best-match Jaccard similarity over resamples falls below this
#: is reported as not surviving resampling (Hennig 2007, Computational Statistics &
#: Data Analysis 52:258-271, calls clusters at or below 0.5 "dissolved"; from memory).
SURVIVAL_JACCARD = 0.5

#: Work budget: simulations x raters^2 stays under this (the full 200 up to 60 raters).
_RESAMPLE_WORK_BUDGET = 200 * 60**2

#: Largest batch of small regressions solved in one call (bounds memory).
_FIT_CHUNK = 50_000


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class MergeStep(ResultMixin):
    """One merge of the grouping sequence.

    ``r2`` is the overall R^2 after the merge and ``r2_drop`` what the merge cost.
    ``f_statistic`` compares the two groups' weights (the F of equal slopes across
    two sets of raters, Chow 1960, with the residual variance of the model just
    before the merge). It is descriptive only: the groups were formed from the same
    judgments to differ, so the F distribution would give p-values far too small for
    the late merges (measured: half of simulated one-policy panels had some merge at
    p < .01). ``p_value`` is instead a parametric-bootstrap p-value, given for the
    merges the number-of-groups rule tested (None for the others).
    """

    step: int
    merged_a: tuple[str, ...]
    merged_b: tuple[str, ...]
    n_groups: int
    r2: float
    r2_drop: float
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

    def to_dict(self) -> dict:
        eligible = [r for r in self.raters if self.rater_group[r] is not None]
        index = {r: i for i, r in enumerate(self.raters)}
        pairs = [
            {"rater_a": a, "rater_b": b,
             "together": self.co_assignment[index[a], index[b]]}
            for a, b in combinations(eligible, 2)
        ]
        return jsonable({
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
                "pairs": pairs,
            },
            "ward": {"ari": self.ward_ari, "matched": self.ward_matched},
            "warnings": list(self.warnings),
        })

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
        """How often each pair of raters shared a group over the resamples."""
        pairs = self.to_dict()["stability"]["pairs"]
        return pd.DataFrame(pairs, columns=["rater_a", "rater_b", "together"])


# --------------------------------------------------------------------------- helpers


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
    pairs = lambda x: (x * (x - 1.0) / 2.0).sum()  # noqa: E731
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


def _group_label(i: int) -> str:
    """'A'..'Z', then 'AA', 'AB', ... (spreadsheet-style)."""
    label = ""
    i += 1
    while i:
        i, rem = divmod(i - 1, 26)
        label = chr(65 + rem) + label
    return label


def _batched_rss(sscp: np.ndarray, n: np.ndarray, p: int) -> np.ndarray:
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


def _merged_rss(sscp: np.ndarray, n: np.ndarray, p: int) -> np.ndarray:
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
            out[start:start + _FIT_CHUNK] = _batched_rss(part, n[start:start + _FIT_CHUNK], p)
            continue
        out[start:start + _FIT_CHUNK] = np.maximum(
            part[:, p, p] - np.einsum("mp,mp->m", coef, rhs), 0.0)
    return out


@dataclass
class _Agglomeration:
    """Lockstep merge state for a batch of B groupings of R raters."""

    labels: np.ndarray          # (B, R) slot each rater currently belongs to; -1 absent
    history: list               # per step: (b-array, i, j, cost, rss_total, n_groups)
    last_cost: np.ndarray       # (B,) RSS cost of each batch's last merge (NaN: none)
    tss: np.ndarray             # (B,) sum of the active raters' centred SS of judgments


def _agglomerate(sscp: np.ndarray, n: np.ndarray, active: np.ndarray, p: int,
                 stop_at: int, record: bool) -> _Agglomeration:
    """Merge groups bottom-up, the cheapest merge first, in every batch at once.

    sscp : (B, R, k, k) centred SSCP per rater; n : (B, R) judgments per rater;
    active : (B, R) raters taking part. Merging stops in a batch when it has
    ``stop_at`` groups. Ties go to the lowest (i, j) slot pair, so runs repeat.
    """
    B, R = active.shape
    group_sscp = np.where(active[:, :, None, None], sscp, 0.0)
    group_n = np.where(active, n, 0.0)
    group_rss = np.where(active, _batched_rss(group_sscp, group_n, p), 0.0)
    labels = np.where(active, np.arange(R)[None, :], -1)

    cost = np.full((B, R, R), np.inf)
    iu, ju = np.triu_indices(R, k=1)
    all_bb, all_pair = np.nonzero(active[:, iu] & active[:, ju])
    # In chunks: B * R^2 / 2 stacked SSCPs at once would take gigabytes for big panels.
    for start in range(0, all_bb.size, _FIT_CHUNK):
        bb, pair = all_bb[start:start + _FIT_CHUNK], all_pair[start:start + _FIT_CHUNK]
        a, b = iu[pair], ju[pair]
        pair_rss = _merged_rss(group_sscp[bb, a] + group_sscp[bb, b],
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
        new_rss = _merged_rss(group_sscp[tb, ti] + group_sscp[tb, other],
                              group_n[tb, ti] + group_n[tb, other], p)
        cost[tb, ti, other] = new_rss - group_rss[tb, ti] - group_rss[tb, other]
        cost[tb, other, ti] = cost[tb, ti, other]
    tss = np.where(active, sscp[:, :, p, p], 0.0).sum(axis=1)
    return _Agglomeration(labels=labels, history=history, last_cost=last_cost, tss=tss)


def _labels_at(labels_start: np.ndarray, history: list, n_steps: int) -> np.ndarray:
    """Slot labels (single batch) after the first ``n_steps`` merges."""
    labels = labels_start.copy()
    for _, i, j, *_ in history[:n_steps]:
        labels = np.where(labels == j[0], i[0], labels)
    return labels


def _name_groups(slots: np.ndarray, raters: list[str]) -> list[str | None]:
    """Letters by group size (largest 'A'); ties by the group's first rater id."""
    present = sorted({int(s) for s in slots if s >= 0})
    members = {s: [raters[k] for k in np.flatnonzero(slots == s)] for s in present}
    order = sorted(present, key=lambda s: (-len(members[s]), min(members[s])))
    name = {s: _group_label(pos) for pos, s in enumerate(order)}
    return [name[int(s)] if s >= 0 else None for s in slots]


def _standardized(coef: np.ndarray, sscp: np.ndarray, p: int) -> np.ndarray:
    """Standardized weights b_j * sd(x_j) / sd(y) from a centred SSCP (any leading shape)."""
    d = np.sqrt(np.einsum("...ii->...i", sscp))
    with np.errstate(invalid="ignore", divide="ignore"):
        return coef * d[..., :p] / d[..., p:p + 1]


def _resample_budget(n_resamples: int, n_raters: int, *, floor: int = 20) -> int:
    """Simulations to run: as asked, fewer for big panels, never fewer than ``floor``."""
    if n_raters < 2:
        return n_resamples
    return min(n_resamples, max(floor, _RESAMPLE_WORK_BUDGET // (n_raters * n_raters)))


def _as_generator(rng) -> np.random.Generator:
    if isinstance(rng, np.random.Generator):
        return rng
    return np.random.default_rng(rng)


# --------------------------------------------------------------------------- main


def group_raters(
    design: CueDesign,
    first: pd.DataFrame,
    *,
    rng: np.random.Generator | int | None = None,
    n_resamples: int = 200,
    threshold: float = 0.01,
    alpha: float = 0.05,
    n_groups: int | None = None,
    n_null: int = 100,
) -> GroupingResult:
    """Group raters whose judgments follow a common policy.

    Parameters
    ----------
    design : the phase's cue design over cases.
    first : DataFrame with columns ``rater``, ``case``, ``judgment`` (first judgments).
    rng : seed or Generator for the case resamples (same seed, same result).
    n_resamples : case resamples for stability (0 skips it). Large panels use fewer
        (resamples x raters^2 is capped; the number used is reported and warned).
    threshold : drop of overall R^2 that one merge must exceed to count as joining
        different policies.
    alpha : level of the simulated test that must also reject for a merge to count as
        joining different policies.
    n_groups : force this many groups (the chair overrules the rule); None: the rule.
    n_null : simulated panels per tested merge for the number-of-groups test.

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

    Number of groups (our own rule built on common practice; the defaults are
    ours). Reading the merge table from the end, as a chair reads for a marked drop
    in R^2 (Christal 1968), for k = 1, 2, ... the merge from k + 1 groups into k is
    taken to join different policies when it both costs more than ``threshold`` of
    overall R^2 *and* its cost exceeds what the same merge costs when the k-group
    model is true: ``n_null`` panels are simulated from the fitted k-group model
    (parametric bootstrap; McLachlan 1987) and regrouped, and the Monte Carlo
    p-value ``(1 + #{simulated drop >= observed}) / (n_null + 1)`` must be below
    ``alpha``. The first k whose merge fails either test is chosen. The simulation
    keeps noisy panels from splitting; the R^2 threshold keeps large panels from
    splitting over differences too small to matter. The whole merge table is returned
    so a chair can choose another number (``n_groups``).

    Stability. Cases are resampled with replacement (counts as weights); each
    resample is grouped by the same merges and cut at the chosen number of groups
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
    generator = _as_generator(rng)
    warnings: list[str] = []

    raters = sorted(str(r) for r in pd.unique(first["rater"]))
    known = set(design.case_ids)
    unknown = sorted({str(c) for c in first["case"]} - known)
    if unknown:
        raise DataError(f"{len(unknown)} case(s) in the judgments are not in the cue design, "
                        f"e.g. '{unknown[0]}'. Every judged case needs its cues.")
    p = design.n_columns
    cue_columns = [cols for cols in design.cue_groups() if cols]
    cue_names = [c for c, cols in zip(design.cues, design.cue_groups()) if cols]
    if p == 0:
        raise DataError("The cue design has no columns; there is no policy to group by.")

    # Sorted rows make every sum, and so every digit, independent of the input's row order.
    first = first.assign(rater=first["rater"].astype(str), case=first["case"].astype(str))
    first = first.sort_values(["rater", "case"], kind="stable")
    rows = design.row_of(first["case"])
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
    agg = _agglomerate(full.sscp[None], full.n[None], active, p, stop_at=1, record=True)
    tss = float(full.sscp[eligible, p, p].sum())
    n_total = float(full.n[eligible].sum())
    with np.errstate(invalid="ignore", divide="ignore"):
        r2_individual = 1.0 - float(own.rss[eligible].sum()) / tss if n_eligible else np.nan

    start_labels = np.where(eligible, np.arange(R), -1)
    merges: list[MergeStep] = []
    labels = start_labels.copy()
    for step, (_, i, j, cost, rss_before, groups_before) in enumerate(agg.history, start=1):
        i, j, cost = int(i[0]), int(j[0]), float(cost[0])
        rss_before, groups_before = float(rss_before[0]), int(groups_before[0])
        df_den = n_total - n_eligible - groups_before * p
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
            f_statistic=f_stat,
            df_num=float(p),
            df_den=float(df_den),
            p_value=np.nan,
        ))
        labels = np.where(labels == j, i, labels)

    if n_groups is not None:
        if not 1 <= n_groups <= max(n_eligible, 1):
            raise DataError(f"n_groups must be between 1 and {max(n_eligible, 1)} "
                            f"(the raters that can be grouped); got {n_groups!r}.")
        chosen = int(n_groups)
        rule = f"{chosen} group(s), as asked."
    else:
        chosen = 1
        by_groups = {m.n_groups: m for m in merges}
        asked_null, n_null = n_null, _resample_budget(n_null, n_eligible, floor=50)
        if n_null < asked_null:
            warnings.append(f"The number-of-groups test simulated {n_null} panels instead of "
                            f"{asked_null} to keep the run short for {n_eligible} raters.")
        while chosen in by_groups:
            m = by_groups[chosen]
            if not m.r2_drop > threshold:
                break
            level_slots = _labels_at(start_labels, agg.history, n_eligible - chosen)
            null = _null_drops(Z, who, level_slots, eligible, own.rss, own.df_resid, p,
                               chosen, n_null, generator)
            p_mc = (1.0 + np.sum(null >= m.r2_drop)) / (n_null + 1.0)
            merges[m.step - 1] = dataclasses.replace(m, p_value=float(p_mc))
            if not p_mc < alpha:
                break
            chosen += 1
        rule = (f"Keep two groups apart when merging them loses more than {threshold:g} "
                f"of overall R^2 and more than in panels simulated with one shared policy "
                f"for them (p < {alpha:g}, {n_null} simulations).")
    if n_eligible == 0:
        chosen = 0
        warnings.append("No rater's policy could be fitted; no groups formed.")
    slots = _labels_at(start_labels, agg.history, max(n_eligible - chosen, 0))
    names = _name_groups(slots, raters)
    rater_group = dict(zip(raters, names))

    # Stability: all resamples grouped in lockstep.
    used_resamples = _resample_budget(n_resamples, n_eligible) if n_eligible >= 2 else 0
    if used_resamples < n_resamples and n_eligible >= 2:
        warnings.append(f"Stability used {used_resamples} case resamples instead of "
                        f"{n_resamples} to keep the run short for {n_eligible} raters.")
    co = np.full((R, R), np.nan)
    ari = np.array([])
    jaccard = {}
    if used_resamples:
        counts = generator.multinomial(len(design.case_ids),
                                       np.full(len(design.case_ids), 1.0 / len(design.case_ids)),
                                       size=used_resamples).astype(float)
        boot_slots = _resampled_labels(Z, who, case_row, counts, eligible, p, chosen)
        present = boot_slots >= 0
        same = (boot_slots[:, :, None] == boot_slots[:, None, :]) & present[:, :, None] \
            & present[:, None, :]
        both = (present[:, :, None] & present[:, None, :]).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            co = np.where(both > 0, same.sum(axis=0) / both, np.nan)
        ari = np.array([adjusted_rand_index(slots[present[b] & eligible],
                                            boot_slots[b][present[b] & eligible])
                        for b in range(used_resamples)])
        jaccard = _group_jaccard(slots, boot_slots, eligible)
        dropped = int((~present[:, eligible]).any(axis=1).sum())
        if dropped:
            warnings.append(f"In {dropped} of {used_resamples} resamples some rater had too "
                            "few distinct cases for an equation and sat that resample out.")

    groups = _group_policies(full, slots, names, raters, p, design, cue_names, cue_columns,
                             jaccard, warnings)
    for g in groups:
        if g.survives is False:
            warnings.append(f"Group {g.group} does not survive resampling of cases "
                            f"(mean Jaccard similarity {g.stability:.2f}, below "
                            f"{SURVIVAL_JACCARD}); treat it as unstable.")

    ward_names = _ward_view(own.coef, full.sscp, eligible, p, chosen, raters)
    ward_slots = np.array([-1 if w is None else sorted(set(filter(None, ward_names))).index(w)
                           for w in ward_names])
    if n_eligible >= 2:
        ward_ari = adjusted_rand_index(slots[eligible], ward_slots[eligible])
        ward_matched = _matched_share(slots[eligible], ward_slots[eligible])
    else:
        ward_ari = ward_matched = np.nan

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
        co_assignment=co,
        ward_group=dict(zip(raters, ward_names)),
        ward_ari=float(ward_ari),
        ward_matched=float(ward_matched),
        warnings=tuple(warnings),
    )


def _stacked_sscp(Z, who, R, *, weights=None, judgments=None):
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


def _null_drops(Z, who, slots, eligible, own_rss, own_df, p, n_groups, n_sims, generator):
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
    sscp, n = _stacked_sscp(Z, who, R, judgments=signal[None, :] + noise)
    active = np.broadcast_to(eligible, (n_sims, R))
    agg = _agglomerate(sscp, n, active, p, stop_at=n_groups, record=False)
    return agg.last_cost / agg.tss


def _resampled_labels(Z, who, case_row, counts, eligible, p, chosen) -> np.ndarray:
    """Group every resample (rows of ``counts``) and cut at ``chosen`` groups.

    Returns (B, R) slot labels; -1 for a rater left out of that resample.
    """
    R = eligible.size
    sscp, n = _stacked_sscp(Z, who, R, weights=counts[:, case_row])
    own_rss = _batched_rss(sscp, n, p)
    active = eligible[None, :] & np.isfinite(own_rss) & (sscp[:, :, p, p] > 0)
    agg = _agglomerate(sscp, n, active, p, stop_at=max(chosen, 1), record=False)
    return agg.labels


def _group_jaccard(slots: np.ndarray, boot_slots: np.ndarray, eligible: np.ndarray) -> dict:
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
    std = _standardized(fit.coef, both, p)
    d = np.sqrt(np.einsum("gii->gi", both))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = both / (d[:, :, None] * d[:, None, :])
    # Importance on each pooled-within correlation matrix: general dominance (Budescu
    # 1993), or relative weights (Johnson 2000) beyond 12 cues, from calibrate.importance.
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


def _ward_view(coef, sscp, eligible, p, chosen, raters) -> list[str | None]:
    """Ward clustering (scipy) of the raters' standardized weight profiles."""
    names: list[str | None] = [None] * len(raters)
    idx = np.flatnonzero(eligible)
    if idx.size == 0:
        return names
    if idx.size == 1:
        names[idx[0]] = "A"
        return names
    profiles = _standardized(coef[idx], sscp[idx], p)
    tree = linkage(profiles, method="ward")
    cut = fcluster(tree, t=max(chosen, 1), criterion="maxclust")
    slots = np.full(len(raters), -1)
    slots[idx] = cut
    return _name_groups(slots, raters)


def _matched_share(a: np.ndarray, b: np.ndarray) -> float:
    """Share of items labelled alike after the best one-to-one pairing of labels."""
    ua, ia = np.unique(a, return_inverse=True)
    ub, ib = np.unique(b, return_inverse=True)
    table = np.zeros((ua.size, ub.size))
    np.add.at(table, (ia, ib), 1.0)
    rows, cols = linear_sum_assignment(-table)
    return float(table[rows, cols].sum() / a.size)
