"""Before and after a training: each rater's figures per phase and every change.

``compare(table)`` matches raters by id across the phases of a study, computes per
phase R_s, test-retest r, severity, the cue shares, rubric misallocation and G with the
rubric composite (with a rubric), r_a and G (with a criterion), and tests each change
(every consecutive pair of phases, and first to last):

- R_s, misallocation, G with the rubric and the cue shares: independent case bootstraps
  of each phase (cases resampled within the rater, all raters and resamples solved at
  once), percentile interval of the difference and the bootstrap test of no change; the
  change in R_s is read on Wherry's adjusted R_s, which removes R_s's upward bias with few
  cases, so that phases of unequal size compare, each phase's interval taken on Fisher's
  z scale and the two combined by Zou's (2007) method;
- test-retest r and r_a: correlations on different cases, Fisher's z test with Zou's
  (2007) interval of the difference; r_a on the same cases and outcome in both phases,
  Williams' T2 for dependent correlations (Steiger 1980) with Zou's interval;
- severity: the difference of two independent normal estimates (the offset is relative
  to the panel of its phase, so the change is relative to the panel's change); G with
  the outcome likewise, with SEs from each phase's BCa interval.

Every change carries the smallest change the design could detect (80% power, 5%
two-sided) and whether it is comparable when the phases judged different cases.
Across raters, each arm's changes get a paired t and Wilcoxon's signed-rank test; with a
control group the training effect is the difference in differences by Welch's t on the
per-rater changes, with an ANCOVA estimate beside it (for R_s both, and the comparison of the
arms' starting values, on the adjusted R_s), and with three phases or more the
follow-up effect is the same from the second-to-last to the last phase. The panel's
agreement, convergence, groups and cue shift between phases are in :mod:`.panel_change`
and :func:`_panel_extras`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ..agreement.offsets import severity
from ..data.ingest import JudgmentTable, PhaseData
from ..data.rules import natural_key
from ..data.rows import JudgmentRows, line_up, standard_deviations
from ..lens.rubric import _cue_shares, _validate_rubric
from ..result_base import ResultMixin, jsonable
from ..threads import available_cores
from .panel_change import detectable_change, detectable_correlation_change
from .tests_of_change import (ancova_difference, bootstrap_difference, correlation_bootstrap_difference,
                              fisher_z_difference, normal_difference, paired_tests, welch_difference)
from .verdicts import BETTER, METRIC_WORDS, annotate, change_word, comparison_summary, listing

COMPARISON_SCHEMA = "calibrate.comparison/1"
BOOTSTRAP_METRICS = ("r", "misallocation", "g_rubric")
# The arms differ at baseline when Welch's t on the first-phase values gives p below this
# (our own screening level; the ANCOVA estimate is shown beside the Welch one then).
BASELINE_P = 0.10
# Case counts of a rater further apart than this between the first and the last phase bias
# the change in R_s (measured: 85% coverage with 40 against 120 cases; our own cut).
UNEQUAL_CASES_RATIO = 1.5
# The training effect is comparable across phases with different cases when, in each
# phase, the two arms judged largely the same cases (this share in common, Jaccard; our own
# cut): what the cases do to the figures then falls on both arms alike and the difference
# in differences takes it out.
ARMS_SHARED_CASES = 0.8
# Simulated panels behind the panel figures' intervals (agreement) and the grouping's
# number-of-groups test: the audit's own default for agreement.
PANEL_BOOT = 500


@dataclass(frozen=True)
class Change(ResultMixin):
    """One rater's (or one arm's) change of one metric from one phase to another."""

    from_phase: str
    to_phase: str
    delta: float
    ci_low: float
    ci_high: float
    p_value: float
    method: str
    detectable: float = math.nan  # smallest change this design detects (80% power, 5% two-sided)
    comparable: bool = True  # False: different cases in each phase, figure not corrected
    note: str | None = None  # the plain-words reason when not comparable

    def to_dict(self) -> dict:
        return jsonable({"from": self.from_phase, "to": self.to_phase, "delta": self.delta,
                         "ci_low": self.ci_low, "ci_high": self.ci_high, "p_value": self.p_value,
                         "method": self.method, "detectable": self.detectable,
                         "comparable": self.comparable, "note": self.note})


@dataclass(frozen=True)
class RaterComparison(ResultMixin):
    """One rater across the phases: ``metrics[name] = {"values": {phase: v}, "changes": [...]}``."""

    rater: str
    trained: bool
    metrics: dict
    verdicts: dict = field(default_factory=dict)  # metric -> change_word of first to last
    shares: dict = field(default_factory=dict)  # cue -> {"values": {phase: share}, "changes": [...]}


@dataclass(frozen=True)
class ComparisonResult(ResultMixin):
    """Everything ``compare`` found. ``to_dict()`` is comparison.json."""

    phases: tuple[str, ...]
    seed: int
    has_control: bool
    raters: tuple[RaterComparison, ...]
    unmatched: tuple[dict, ...]
    panel: dict
    cautions: tuple[str, ...] = ()
    n_boot: int = 1000
    summary: tuple[str, ...] = ()
    study_name: str = ""

    def to_dict(self) -> dict:
        # annotate: the verdict words of every change and the first page's answers (verdicts.py)
        return annotate(jsonable({"schema": COMPARISON_SCHEMA, "seed": self.seed, "n_boot": self.n_boot,
                         "phases": list(self.phases), "has_control": self.has_control,
                         "study": {"name": self.study_name}, "summary": list(self.summary),
                         "raters": [r.to_dict() for r in self.raters],
                         "unmatched": list(self.unmatched), "panel": self.panel,
                         "cautions": list(self.cautions)}))

    def to_frame(self) -> pd.DataFrame:
        """Tidy: one row per rater x metric x change."""
        records = []
        for r in self.raters:
            for name, block in r.metrics.items():
                for ch in block["changes"]:
                    records.append({"rater": r.rater, "trained": r.trained, "metric": name,
                                    "value_from": block["values"].get(ch.from_phase),
                                    "value_to": block["values"].get(ch.to_phase),
                                    **{k: v for k, v in ch.to_dict().items()}})
        return pd.DataFrame(records)

    def values_frame(self) -> pd.DataFrame:
        """Tidy: one row per rater x metric x phase."""
        return pd.DataFrame([{"rater": r.rater, "trained": r.trained, "metric": name, "phase": ph,
                              "value": v}
                             for r in self.raters for name, block in r.metrics.items()
                             for ph, v in block["values"].items()])

    def panel_frame(self) -> pd.DataFrame:
        """Tidy: one row per metric x arm x change (the paired tests across raters)."""
        return pd.DataFrame([{"metric": name, "arm": arm, **ch}
                             for name, arms in self.panel["metrics"].items()
                             for arm, block in arms.items() for ch in block["changes"]])

    def shares_frame(self) -> pd.DataFrame:
        """Tidy: one row per rater x cue x change of the cue shares."""
        return pd.DataFrame([{"rater": r.rater, "trained": r.trained, "cue": cue,
                              "value_from": block["values"].get(ch.from_phase),
                              "value_to": block["values"].get(ch.to_phase), **ch.to_dict()}
                             for r in self.raters for cue, block in r.shares.items()
                             for ch in block["changes"]])

    def panel_figures_frame(self) -> pd.DataFrame:
        """Tidy: one row per panel figure (ICC, alpha, spread of weight profiles, distance
        to the rubric) x arm x change."""
        records = []
        agreement = self.panel.get("agreement") or {}
        for name in ("icc", "alpha"):
            block = agreement.get(name)
            for ch in (block or {}).get("changes", []):
                records.append({"figure": name, "arm": "all",
                                "value_from": block["values"].get(ch["from"]),
                                "value_to": block["values"].get(ch["to"]), **ch})
        for name, arms in (self.panel.get("convergence") or {}).items():
            for arm, block in (arms or {}).items():
                for ch in block["changes"]:
                    records.append({"figure": name, "arm": arm,
                                    "value_from": block["values"].get(ch["from"]),
                                    "value_to": block["values"].get(ch["to"]), **ch})
        return pd.DataFrame(records)

    def effects_frame(self) -> pd.DataFrame:
        """Tidy: one row per metric of the training effect (and the follow-up effect),
        with the detectable change beside it."""
        records = []
        for which in ("training_effect", "follow_up_effect"):
            for name, e in (self.panel.get(which) or {}).items():
                flat = {k: v for k, v in e.items() if k != "ancova"}
                records.append({"effect": which, "metric": name, **flat,
                                **{f"ancova_{k}": v for k, v in (e.get("ancova") or {}).items()}})
        for name, d in (self.panel.get("detectable") or {}).items():
            records.append({"effect": "detectable", "metric": name,
                            "detectable_per_rater": d["per_rater"], "detectable": d["panel"]})
        return pd.DataFrame(records)

    def for_rater(self, rater: str) -> RaterComparison:
        for item in self.raters:
            if item.rater == rater:
                return item
        raise KeyError(rater)


# ----------------------------------------------------------------------------- one phase


@dataclass(frozen=True)
class _PhaseFigures:
    """Per rater of the matched list (same order), the figures of one phase."""

    values: dict  # metric -> (G,) array
    counts: dict  # metric -> (G,) sample sizes behind the figure
    draws: dict = field(default_factory=dict)  # metric -> (G, B) bootstrap draws
    se: dict = field(default_factory=dict)  # metric -> (G,) standard errors
    shares: np.ndarray | None = None  # (G, n_cues) cue shares
    share_draws: np.ndarray | None = None  # (G, B, n_cues)
    agreement: dict = field(default_factory=dict)  # "icc"/"alpha" -> (estimate, draws)
    groups: dict | None = None  # rater -> group label (None: no grouping)
    criterion_rows: dict | None = None  # rater index -> frame (judgment, criterion) by case
    cases: frozenset = frozenset()  # the cases judged first in this phase


def _fit_first(table: JudgmentTable, ph: PhaseData) -> pd.DataFrame:
    """First judgments of the raters with a policy fit, on cases with a complete design row;
    with [judgment] repeats = "all" each case's mean judgment, as the audit's policies use."""
    complete = set(np.asarray(table.design.case_ids)[table.design.complete_rows()])
    first = ph.first.loc[ph.first["rater"].isin(ph.fit_raters) & ph.first["case"].isin(complete),
                         ["rater", "case", "case_mean"]]
    return first.rename(columns={"case_mean": "judgment"}).reset_index(drop=True)


def _resample_counts(sizes: np.ndarray, n_max: int, n_boot: int,
                     rng: np.random.Generator) -> np.ndarray:
    """(G, n_boot + 1, n_max) case counts: row 0 all ones (the estimate), then resamples
    of each rater's own cases (padding positions count zero)."""
    G = sizes.size
    pick = np.floor(rng.random((G, n_boot, n_max)) * sizes[:, None, None]).astype(np.intp)
    live = np.broadcast_to(np.arange(n_max)[None, None, :] < sizes[:, None, None], pick.shape)
    counts = np.zeros((G, n_boot, n_max))
    g_idx, b_idx, _ = np.nonzero(live)
    np.add.at(counts, (g_idx, b_idx, pick[live]), 1.0)
    first = live[:, :1, :].astype(float)
    return np.concatenate([first, counts], axis=1)


def wherry_adjusted_r(r: np.ndarray, n: np.ndarray, p: int) -> np.ndarray:
    """Wherry's (1931) adjusted multiple correlation, sqrt(1 - (1 - R^2)(n - 1)/(n - p - 1)),
    clipped at zero: R_s read on n cases with p predictors is biased upward, more so with
    few cases, so a change between phases of unequal size is read on this scale."""
    r = np.asarray(r, dtype=float)
    n = np.asarray(n, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        factor = np.where(n > p + 1, (n - 1) / (n - p - 1), np.nan)
        return np.sqrt(np.clip(1.0 - (1.0 - r ** 2) * factor, 0.0, 1.0))


def _policy_draws(rows: JudgmentRows, order: np.ndarray, design, sd: np.ndarray,
                  rubric_share: np.ndarray | None, n_boot: int,
                  rng: np.random.Generator, *,
                  column_weight: np.ndarray | None = None) -> tuple[dict, np.ndarray]:
    """R_s (raw and Wherry-adjusted), cue shares, misallocation and G with the rubric
    composite of every rater in ``order`` for the estimate (index 0) and each resample.

    Weighted least squares with the resample counts as weights, batched over raters and
    resamples through SSCP matrices (never an (rater, resample, case, cue) array): one
    small solve per (rater, resample). ``design`` None skips the shares; ``column_weight``
    (the rubric composite per design column on the raw scale) gives ``g_rubric``.
    """
    per = rows.rows_of_each_rater()
    sizes = np.array([per[g].size if g >= 0 else 0 for g in order])
    G, p = order.size, rows.X.shape[1]
    n_max = max(int(sizes.max(initial=0)), 1)
    X = np.zeros((G, n_max, p))
    y = np.zeros((G, n_max))
    for i, g in enumerate(order):
        if g >= 0:
            X[i, :sizes[i]] = rows.X[per[g]]
            y[i, :sizes[i]] = rows.y[per[g]]
    W = _resample_counts(sizes, n_max, n_boot, rng)
    sw = W.sum(axis=2)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = np.einsum("gbn,gnp->gbp", W, X) / sw[..., None]
        my = np.einsum("gbn,gn->gb", W, y) / sw
    # Centre on each rater's own means first (exact shift), so that the raw moments below
    # stay well conditioned; then correct for each resample's means.
    live = np.arange(n_max)[None, :] < sizes[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        X = np.where(live[..., None], X - mx[:, :1, :], 0.0)
        y = np.where(live, y - my[:, :1], 0.0)
    mx, my = mx - mx[:, :1, :], my - my[:, :1]
    Sxx = (np.einsum("gbn,gnp,gnq->gbpq", W, X, X)
           - sw[..., None, None] * mx[..., :, None] * mx[..., None, :])
    Sxy = np.einsum("gbn,gnp,gn->gbp", W, X, y) - sw[..., None] * mx * my[..., None]
    Syy = np.einsum("gbn,gn,gn->gb", W, y, y) - sw * my * my
    coef = np.full((G, n_boot + 1, p), np.nan)
    # A resample whose cases leave a cue constant cannot be fitted: drop it (NaN).
    rank_ok = np.linalg.matrix_rank(Sxx.reshape(-1, p, p), tol=1e-8).reshape(G, n_boot + 1) == p
    rank_ok &= (sizes > p + 1)[:, None]
    if rank_ok.any():
        coef[rank_ok] = np.linalg.solve(Sxx[rank_ok], Sxy[rank_ok][..., None])[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        r2 = np.einsum("gbp,gbp->gb", coef, Sxy) / Syy
    out = {"r": np.sqrt(np.clip(r2, 0.0, 1.0))}
    out["r_adjusted"] = wherry_adjusted_r(out["r"], sizes[:, None], p)
    if design is not None:
        shares = _cue_shares((coef * sd).reshape(-1, p), design)
        out["shares"] = shares.reshape(G, n_boot + 1, -1)
        if rubric_share is not None:
            with np.errstate(invalid="ignore"):
                mis = 0.5 * np.abs(shares - rubric_share).sum(axis=1)
            out["misallocation"] = mis.reshape(G, n_boot + 1)
    if column_weight is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            cross = np.einsum("gbi,gbij,j->gb", coef, Sxx, column_weight)
            out["g_rubric"] = cross / np.sqrt(np.einsum("gbi,gbij,gbj->gb", coef, Sxx, coef)
                                              * np.einsum("i,gbij,j->gb", column_weight, Sxx,
                                                          column_weight))
    return out, sizes


def _correlation_by_rater(frame: pd.DataFrame, raters: tuple[str, ...], a: str,
                          b: str) -> tuple[np.ndarray, np.ndarray]:
    """Pearson r of columns a and b within each rater, and the pair counts."""
    r = np.full(len(raters), np.nan)
    n = np.zeros(len(raters), dtype=int)
    if len(frame) == 0:
        return r, n
    f = frame[["rater", a, b]].copy()
    f[a] = pd.to_numeric(f[a], errors="coerce")
    f[b] = pd.to_numeric(f[b], errors="coerce")
    f = f.dropna()
    f = f.assign(aa=f[a] * f[a], bb=f[b] * f[b], ab=f[a] * f[b])
    s = f.groupby("rater")[[a, b, "aa", "bb", "ab"]].sum()
    c = f.groupby("rater").size()
    for i, name in enumerate(raters):
        if name not in c.index or c[name] < 3:
            n[i] = int(c.get(name, 0))
            continue
        k = c[name]
        sa, sb, saa, sbb, sab = s.loc[name]
        cov = sab - sa * sb / k
        va, vb = saa - sa * sa / k, sbb - sb * sb / k
        n[i] = int(k)
        if va > 0 and vb > 0:
            r[i] = cov / math.sqrt(va * vb)
    return r, n


def _rubric_columns(design, rubric_share: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """The rubric composite per design column on the raw scale, as the audit's g_rubric
    (categorical cues have no direction and leave the composite)."""
    column_weight = np.zeros(design.n_columns)
    for cue, share, cols in zip(design.cues, rubric_share, design.cue_groups()):
        if share == 0 or not cols or design.kinds.get(cue) == "categorical":
            continue
        with np.errstate(invalid="ignore", divide="ignore"):
            column_weight[cols[0]] = share / sd[cols[0]]
    return column_weight


def _phase_figures(table: JudgmentTable, ph: PhaseData, raters: tuple[str, ...], *,
                   rubric_share, n_boot: int, rng: np.random.Generator,
                   panel_boot: int = 0) -> _PhaseFigures:
    from ..lens.model import lens_model
    from ..panel import group_raters
    from .panel_change import agreement_draws

    spec, design = table.spec, table.phase_design(ph)  # the phase's own fill values, as in the audit
    scale = spec.judgment
    streams = rng.spawn(4)  # cases, lens, agreement, grouping: each its own stream
    first = _fit_first(table, ph)
    values: dict = {}
    counts: dict = {}
    draws: dict = {}
    se: dict = {}
    G = len(raters)
    shares = share_draws = None
    names = ("r", "r_adjusted") + (("misallocation", "g_rubric") if rubric_share is not None else ())
    if len(first):
        rows = line_up(design, first)
        index = {name: i for i, name in enumerate(rows.raters)}
        order = np.array([index.get(name, -1) for name in raters], dtype=np.intp)
        sd = standard_deviations(design, rows.design_row)
        basis_sd = sd if spec.rubric_basis == "standardized" else np.ones_like(sd)
        column_weight = (_rubric_columns(design, rubric_share, sd) if rubric_share is not None
                         else None)
        boot, sizes = _policy_draws(rows, order, design, basis_sd, rubric_share, n_boot, streams[0],
                                    column_weight=column_weight)
        all_shares = boot.pop("shares")
        shares, share_draws = all_shares[:, 0], all_shares[:, 1:]
        for name, arr in boot.items():
            values[name] = arr[:, 0]
            draws[name] = arr[:, 1:]
            counts[name] = sizes
    else:
        for name in names:
            values[name] = np.full(G, np.nan)
            draws[name] = np.full((G, n_boot), np.nan)
            counts[name] = np.zeros(G, dtype=int)
    values["retest_r"], counts["retest_r"] = _correlation_by_rater(ph.repeats, raters, "first", "second")
    all_first = ph.first[["rater", "case", "judgment"]]
    values["severity"] = np.full(G, np.nan)
    se["severity"] = np.full(G, np.nan)
    counts["severity"] = np.zeros(G, dtype=int)
    if all_first["rater"].nunique() >= 2:
        sev = severity(all_first, scale=scale.kind, scale_min=scale.min, scale_max=scale.max)
        by_name = {item.rater: item for item in sev.raters}
        for i, name in enumerate(raters):
            if name in by_name:
                values["severity"][i] = by_name[name].estimate
                se["severity"][i] = by_name[name].se
                counts["severity"][i] = by_name[name].n
    if table.criterion is not None:
        crit = table.criterion
        with_crit = first.assign(criterion=first["case"].map(crit))
        values["r_a"], counts["r_a"] = _correlation_by_rater(with_crit, raters, "judgment", "criterion")
        known = with_crit.dropna(subset=["criterion"])
        position = {name: i for i, name in enumerate(raters)}
        criterion_rows = {position[name]: part.set_index("case")[["judgment", "criterion"]]
                          for name, part in known.groupby("rater") if name in position}
        values["g"] = np.full(G, np.nan)
        se["g"] = np.full(G, np.nan)
        counts["g"] = np.zeros(G, dtype=int)
        if len(first) and with_crit["criterion"].notna().any():
            lens = lens_model(design, first, crit, criterion_selected=spec.criterion_only_for_selected,
                              rubric=spec.rubric, n_boot=max(panel_boot, 0), rng=streams[1])
            by_name = {item.rater: item for item in lens.raters}
            # The SE of G from the width of its BCa case-bootstrap interval (width / 3.92).
            q2 = 2 * float(stats.norm.ppf(0.975))
            for i, name in enumerate(raters):
                if name in by_name:
                    item = by_name[name]
                    values["g"][i] = item.g
                    se["g"][i] = (item.g_ci_high - item.g_ci_low) / q2
                    counts["g"][i] = item.n
    matched_first = all_first.loc[all_first["rater"].isin(raters)]
    agreement = {}
    if panel_boot > 0 and matched_first["rater"].nunique() >= 2:
        agreement = agreement_draws(matched_first, scale=scale.kind, scale_min=scale.min,
                                    scale_max=scale.max, n_boot=panel_boot, rng=streams[2])
    groups = None
    if table.criterion is None:
        criterion_rows = None
    fit_matched = first.loc[first["rater"].isin(raters)]
    if panel_boot > 0 and fit_matched["rater"].nunique() >= 3:
        grouping = group_raters(design, fit_matched, rng=streams[3], n_resamples=0,
                                n_null=min(panel_boot, 100))
        groups = {name: grouping.rater_group.get(name) for name in raters}
    return _PhaseFigures(values=values, counts=counts, draws=draws, se=se, shares=shares,
                         share_draws=share_draws, agreement=agreement, groups=groups,
                         criterion_rows=criterion_rows,
                         cases=frozenset(ph.first["case"]))


# ----------------------------------------------------------------------------- changes


def phase_pairs(phases: tuple[str, ...]) -> list[tuple[int, int]]:
    """Every consecutive pair of phases, then first to last when there are three or more."""
    pairs = [(i, i + 1) for i in range(len(phases) - 1)]
    if len(phases) > 2:
        pairs.append((0, len(phases) - 1))
    return pairs


# Figures whose change is comparable when the phases judged different cases: R_s is read
# on Wherry's adjusted scale (its upward bias with few cases removed) and severity is an
# offset from the panel of its own phase, on that phase's cases.
CORRECTED_FOR_CASES = ("r", "severity")
DIFFERENT_CASES_NOTE = {
    "weights": "different cases in each phase: noise in the weights, larger with fewer cases, "
               "moves this figure; not corrected",
    "correlation": "different cases in each phase: a correlation depends on how spread out the "
                   "cases are; not corrected",
    # the convergence figures take the noise in the weights off (panel_change.py), not the
    # different case sets the standardized weights rest on
    "noise corrected": "different cases in each phase: the noise in the weights is taken off, but "
                       "the weights rest on different cases",
}
NOISE_CORRECTED = ("pairwise_distance", "distance_to_rubric")
WEIGHT_FIGURES = ("misallocation", "g_rubric", "shares", "pairwise_distance", "distance_to_rubric",
                  "icc", "alpha")


def comparability(metric: str, same_cases: bool) -> tuple[bool, str | None]:
    """(comparable, note) of a change of ``metric`` between two phases."""
    if same_cases or metric in CORRECTED_FOR_CASES:
        return True, None
    if metric in ("icc", "alpha"):
        return False, "different cases in each phase: panel agreement on different case sets"
    kind = ("noise corrected" if metric in NOISE_CORRECTED else
            "weights" if metric in WEIGHT_FIGURES else "correlation")
    return False, DIFFERENT_CASES_NOTE[kind]


def _same_criterion_cases(fa: _PhaseFigures, fb: _PhaseFigures, i: int):
    """(y_a, y_b, criterion) of rater i on the cases both phases judged with a known
    outcome, when the rater judged the same such cases in both; else None."""
    if fa.criterion_rows is None or fb.criterion_rows is None:
        return None
    a, b = fa.criterion_rows.get(i), fb.criterion_rows.get(i)
    if a is None or b is None or len(a) < 4 or set(a.index) != set(b.index):
        return None
    b = b.reindex(a.index)
    return a["judgment"].to_numpy(float), b["judgment"].to_numpy(float), a["criterion"].to_numpy(float)


def _rater_changes(figs: list[_PhaseFigures], phases: tuple[str, ...], name: str,
                   confidence: float) -> list[list[Change]]:
    """Per rater (outer list), the changes of one metric over every phase pair."""
    from ..lens.model import dependent_correlation_test

    G = figs[0].values[name].size
    out: list[list[Change]] = [[] for _ in range(G)]
    for a, b in phase_pairs(phases):
        fa, fb = figs[a], figs[b]
        va, vb = fa.values[name], fb.values[name]
        delta = vb - va
        methods = None
        comparable, note = comparability(name, fa.cases == fb.cases)
        if name in BOOTSTRAP_METRICS:
            # R_s: the change is read on Wherry's adjusted scale (estimates and draws), whose
            # interval covered the true change where the raw one did not with unequal case
            # counts, and on Fisher's z scale within each phase, where the adjusted R_s of
            # 25-40 cases is neither biased nor skewed as on its own scale (DEVELOPERS.md).
            key = "r_adjusted" if name == "r" else name
            if name == "r":
                low, high, p = correlation_bootstrap_difference(
                    fa.values[key], fa.draws[key], fb.values[key], fb.draws[key], confidence)
            else:
                low, high, p = bootstrap_difference(fa.draws[key], fb.draws[key], confidence)
            diff = fb.draws[key] - fa.draws[key]
            enough = np.isfinite(diff).sum(axis=1) > 2
            spread = np.full(G, np.nan)
            spread[enough] = np.nanstd(diff[enough], axis=1, ddof=1)
            rows = [(low[i], high[i], p[i], detectable_change(spread[i])) for i in range(G)]
            if name == "r":
                delta = fb.values["r_adjusted"] - fa.values["r_adjusted"]
                method = ("change in Wherry-adjusted R_s (corrects R_s's upward bias with few cases), "
                          "case bootstrap of each phase, Fisher-z interval of each phase combined "
                          "(Zou 2007)")
            else:
                method = "case bootstrap of each phase, percentile interval"
        elif name in ("severity", "g"):
            rows = []
            for i in range(G):
                pv, lo, hi = normal_difference(va[i], fa.se[name][i], vb[i], fb.se[name][i], confidence)
                rows.append((lo, hi, pv, detectable_change(math.hypot(fa.se[name][i], fb.se[name][i]))))
            method = ("difference of independent normal estimates" if name == "severity" else
                      "difference of independent estimates, SEs from each phase's BCa case "
                      "bootstrap of G (interval width / 3.92)")
        else:
            rows = []
            methods = []
            for i in range(G):
                n1, n2 = int(fa.counts[name][i]), int(fb.counts[name][i])
                same = _same_criterion_cases(fa, fb, i) if name == "r_a" else None
                if same is not None:
                    y_a, y_b, crit = same
                    r_kh = float(np.corrcoef(y_a, y_b)[0, 1]) if np.ptp(y_a) > 0 and np.ptp(y_b) > 0 \
                        else math.nan
                    _, _, pv, lo, hi = dependent_correlation_test(vb[i], va[i], r_kh, y_a.size,
                                                                  level=confidence)
                    se_z = math.sqrt(max(2.0 * (1.0 - r_kh), 0.0) / (y_a.size - 3)) \
                        if math.isfinite(r_kh) else math.nan
                    methods.append("Williams' T2 for dependent correlations (Steiger 1980), Zou interval")
                else:
                    _, pv, lo, hi = fisher_z_difference(va[i], n1, vb[i], n2, confidence)
                    se_z = math.sqrt(1.0 / (n1 - 3) + 1.0 / (n2 - 3)) if min(n1, n2) > 3 else math.nan
                    methods.append("Fisher z (different cases), Zou interval")
                rows.append((lo, hi, pv, detectable_correlation_change(va[i], se_z)))
            method = None
        for i in range(G):
            lo, hi, pv, det = rows[i]
            out[i].append(Change(phases[a], phases[b], float(delta[i]), float(lo), float(hi),
                                 float(pv), methods[i] if methods is not None else method,
                                 detectable=float(det), comparable=comparable, note=note))
    return out


def _arm_effect(arms: dict, name: str, phases: tuple[str, ...], k: int, a: int, b: int,
                confidence: float, comparable: bool, note: str | None,
                basis: dict | None = None) -> dict:
    """Trained minus controls on the changes of pair k (phases a -> b): Welch's t on the
    per-rater changes, and the ANCOVA of the value at b on the value at a and the arm.

    ``basis`` (rater -> {phase: value}) gives the values the changes are read on where they
    are not the printed ``values`` (R_s: Wherry's adjusted R_s), so that the baseline
    screen, the ANCOVA and Welch's t all measure one quantity."""
    def column(members, getter):
        return np.array([getter(m.metrics[name]) for m in members], dtype=float)

    def value_at(members, phase):
        if basis is None:
            return column(members, lambda blk: blk["values"][phase])
        return np.array([basis[m.rater][phase] for m in members], dtype=float)
    d_t = column(arms["trained"], lambda blk: blk["changes"][k].delta)
    d_c = column(arms["control"], lambda blk: blk["changes"][k].delta)
    welch = welch_difference(d_t, d_c, confidence)
    base_t = value_at(arms["trained"], phases[a])
    base_c = value_at(arms["control"], phases[a])
    baseline = welch_difference(base_t, base_c, confidence)
    apart = bool(np.isfinite(baseline["p_value"]) and baseline["p_value"] < BASELINE_P)
    direction = BETTER.get(name)
    started_worse = bool(apart and direction is not None
                         and np.sign(baseline["estimate"]) == -direction)
    final = np.concatenate([value_at(arms["trained"], phases[b]), value_at(arms["control"], phases[b])])
    ancova = ancova_difference(np.concatenate([base_t, base_c]), final,
                               np.r_[np.ones(d_t.size), np.zeros(d_c.size)], confidence)
    se = ((welch["ci_high"] - welch["ci_low"]) / (2 * stats.t.ppf(0.5 + confidence / 2, welch["df"]))
          if np.isfinite(welch["df"]) else math.nan)
    method = "Welch t on the per-rater changes"
    if name == "r":
        method += ("; these changes, the starting values compared between the arms and the ANCOVA "
                   "are all of Wherry-adjusted R_s")
    return {"from": phases[a], "to": phases[b], **welch,
            "method": method,
            "baseline_difference": baseline["estimate"], "baseline_p": baseline["p_value"],
            "arms_differ_at_baseline": apart, "trained_started_worse": started_worse,
            "ancova": ancova, "detectable": detectable_change(se, welch["df"]),
            "comparable": comparable, "note": note}


def _panel(raters: list[RaterComparison], phases: tuple[str, ...], metrics: tuple[str, ...],
           has_control: bool, confidence: float, case_sets: list | None = None,
           arms_alike: list[bool] | None = None, bases: dict | None = None) -> dict:
    """The paired tests per arm and the training (and follow-up) effects. ``bases``: metric ->
    rater -> {phase: value} for a metric whose changes are read on other values than the
    printed ones (R_s: the adjusted R_s), passed to :func:`_arm_effect`."""
    bases = bases or {}
    arms = {"trained": [r for r in raters if r.trained]}
    if has_control:
        arms["control"] = [r for r in raters if not r.trained]
    pairs = phase_pairs(phases)
    same = [case_sets is None or case_sets[a] == case_sets[b] for a, b in pairs]
    arms_alike = arms_alike or [False] * len(phases)
    panel_metrics: dict = {}
    effects: dict | None = {} if has_control else None
    follow: dict | None = {} if has_control and len(phases) > 2 else None
    for name in metrics:
        panel_metrics[name] = {}
        for arm, members in arms.items():
            vals = {ph: float(np.nanmean([m.metrics[name]["values"][ph] for m in members]))
                    if any(np.isfinite(m.metrics[name]["values"][ph]) for m in members) else math.nan
                    for ph in phases}
            changes = []
            for k, (a, b) in enumerate(pairs):
                deltas = np.array([m.metrics[name]["changes"][k].delta for m in members])
                test = paired_tests(deltas, confidence)
                comparable, note = comparability(name, same[k])
                se = (test["ci_high"] - test["ci_low"]) / (2 * stats.t.ppf(0.5 + confidence / 2, test["df"])) \
                    if np.isfinite(test["df"]) and np.isfinite(test["ci_low"]) else math.nan
                changes.append({"from": phases[a], "to": phases[b], "delta": test["mean_delta"],
                                "ci_low": test["ci_low"], "ci_high": test["ci_high"],
                                "p_value": test["p_value"],
                                "method": "paired t on the per-rater changes; Wilcoxon signed-rank beside",
                                "detectable": detectable_change(se, test["df"]),
                                "comparable": comparable, "note": note,
                                **{key: test[key] for key in
                                   ("n", "t", "df", "effect_size_dz", "wilcoxon_statistic", "wilcoxon_p")}})
            panel_metrics[name][arm] = {"values": vals, "changes": changes}
        # The difference in differences takes out what a phase's cases do to both arms alike,
        # so it is comparable when, in each phase, the two arms judged the same cases.
        if effects is not None:
            last = len(pairs) - 1
            effects[name] = _arm_effect(arms, name, phases, last, 0, len(phases) - 1, confidence,
                                        *comparability(name, same[last] or arms_alike[0] and arms_alike[-1]),
                                        basis=bases.get(name))
        if follow is not None:
            k = len(phases) - 2  # the last consecutive pair: end of training to follow-up
            follow[name] = _arm_effect(arms, name, phases, k, k, k + 1, confidence,
                                       *comparability(name, same[k] or arms_alike[k] and arms_alike[k + 1]),
                                       basis=bases.get(name))
    out = {"metrics": panel_metrics, "training_effect": effects}
    if len(phases) > 2:
        out["follow_up_effect"] = follow
    return out


def _figure_block(points: list[float], draws: list[np.ndarray], phases: tuple[str, ...], metric: str,
                  same_cases: list[bool], confidence: float, method: str, change=None,
                  shown=None) -> dict:
    """{values{PHASE}, changes[...]} of a panel figure with independent draws per phase;
    ``change`` the interval of the change (default: percentile of the draws' difference),
    ``shown`` the value printed for each phase's point (default: the point itself)."""
    from .panel_change import draw_change

    change = change or draw_change
    changes = []
    for k, (a, b) in enumerate(phase_pairs(phases)):
        comparable, note = comparability(metric, same_cases[k])
        changes.append({"from": phases[a], "to": phases[b],
                        **change(points[a], draws[a], points[b], draws[b], confidence),
                        "method": method, "comparable": comparable, "note": note})
    shown = shown or (lambda v: v)
    return {"values": {ph: shown(points[i]) for i, ph in enumerate(phases)}, "changes": changes}


def _panel_extras(figs: list[_PhaseFigures], phases: tuple[str, ...], trained: np.ndarray,
                  has_control: bool, rubric_share, cues: tuple[str, ...], raters: list,
                  confidence: float) -> dict:
    """panel.agreement, convergence, groups, cue_shift and detectable."""
    from ..panel import adjusted_rand_index
    from .panel_change import (noise_corrected_distance_to_rubric, noise_corrected_spread,
                               root_distance, root_distance_change)

    pairs = phase_pairs(phases)
    same = [figs[a].cases == figs[b].cases for a, b in pairs]
    out: dict = {}
    # Agreement across the matched raters, each phase on its own cases.
    if all(f.agreement for f in figs):
        out["agreement"] = {
            key: _figure_block([f.agreement[key][0] for f in figs], [f.agreement[key][1] for f in figs],
                               phases, key, same, confidence,
                               ("ICC(A,1)" if key == "icc" else "Krippendorff's alpha")
                               + ": parametric bootstrap of the crossed random-effects model in each "
                               "phase, percentile interval of the difference")
            for key in ("icc", "alpha")}
        out["agreement"]["same_cases"] = bool(all(same))
    else:
        out["agreement"] = None
    # Convergence of the weight profiles, per arm.
    arms = {"trained": trained, "control": ~trained} if has_control else {"all": np.ones_like(trained)}
    have_shares = all(f.shares is not None for f in figs)
    convergence: dict = {"pairwise_distance": None, "distance_to_rubric": None}
    if have_shares:
        # Noise-corrected distances: they held the true change in 93-97% of simulated pairs
        # of phases, where the uncorrected distances held it in 89-91%
        # (benchmarks/bench_training_panel.py, DEVELOPERS.md).
        method = ("the noise in each rater's fitted shares taken off (the trace of the rater's share "
                  "covariance over their case resamples), then the root; cases resampled within each "
                  "rater, each phase's normal interval on the squared scale, rooted and combined "
                  "(Zou 2007)")
        spread = {arm: [noise_corrected_spread(f.shares[mask], f.share_draws[mask]) for f in figs]
                  for arm, mask in arms.items()}
        convergence["pairwise_distance"] = {
            arm: _figure_block([e for e, _ in figures], [d for _, d in figures], phases, "pairwise_distance",
                               same, confidence, "root of the mean over pairs of raters of the squared "
                               "distance between their cue-share profiles; " + method,
                               change=root_distance_change, shown=root_distance)
            for arm, figures in spread.items()}
        if rubric_share is not None:
            to_rubric = {arm: [noise_corrected_distance_to_rubric(f.shares[mask], f.share_draws[mask], rubric_share)
                               for f in figs] for arm, mask in arms.items()}
            convergence["distance_to_rubric"] = {
                arm: _figure_block([e for e, _ in figures], [d for _, d in figures], phases,
                                   "distance_to_rubric", same, confidence,
                                   "root of the mean over the arm's raters of the squared distance "
                                   "between their cue shares and the rubric's; " + method,
                                   change=root_distance_change, shown=root_distance)
                for arm, figures in to_rubric.items()}
    out["convergence"] = convergence
    # Groups of shared policy in each phase (the audit's grouping), and whether they merged.
    if all(f.groups is not None for f in figs):
        names = [r.rater for r in raters]
        counts = {ph: len({g for g in f.groups.values() if g is not None}) for ph, f in zip(phases, figs)}
        merged = []
        for a, b in pairs:
            both = [n for n in names if figs[a].groups.get(n) is not None and figs[b].groups.get(n) is not None]
            ari = (adjusted_rand_index([figs[a].groups[n] for n in both], [figs[b].groups[n] for n in both])
                   if len(both) >= 2 else math.nan)
            merged.append({"from": phases[a], "to": phases[b],
                           "merged": bool(counts[phases[b]] < counts[phases[a]]),
                           "adjusted_rand": ari})
        out["groups"] = {"values": counts, "merged": merged}
    else:
        out["groups"] = None
    # Mean share per cue, arm and phase; toward the rubric only when the trained arm's
    # paired interval of the change in |share - rubric share| (first to last) excludes zero.
    cue_shift: dict = {}
    if have_shares:
        for c, cue in enumerate(cues):
            entry: dict = {"rubric_share": float(rubric_share[c]) if rubric_share is not None else None}
            for arm, mask in (("trained", trained), ("control", ~trained)):
                if arm == "control" and not has_control:
                    entry[arm] = None
                    continue
                entry[arm] = {"values": {ph: float(np.nanmean(f.shares[mask, c])) if mask.any() else math.nan
                                         for ph, f in zip(phases, figs)}}
            toward, tested = None, False
            if rubric_share is not None:
                gap = [np.abs(f.shares[trained, c] - rubric_share[c]) for f in (figs[0], figs[-1])]
                test = paired_tests(gap[1] - gap[0], confidence)
                tested = bool(np.isfinite(test["ci_low"]) and np.isfinite(test["ci_high"]))
                if np.isfinite(test["ci_high"]) and test["ci_high"] < 0:
                    toward = True
                elif np.isfinite(test["ci_low"]) and test["ci_low"] > 0:
                    toward = False
            entry["toward_rubric"] = toward
            entry["toward_tested"] = tested
            cue_shift[cue] = entry
    out["cue_shift"] = cue_shift
    return out


def _panel_detectable(raters: list, panel: dict, metrics: tuple[str, ...], has_control: bool) -> dict:
    """Per metric: the median detectable first-to-last change over raters, and the
    detectable training effect (or, without controls, the detectable mean change)."""
    out = {}
    for name in metrics:
        per = np.array([r.metrics[name]["changes"][-1].detectable for r in raters], dtype=float)
        per_rater = float(np.nanmedian(per)) if np.isfinite(per).any() else math.nan
        if has_control:
            whole = panel["training_effect"][name]["detectable"]
        else:
            whole = panel["metrics"][name]["trained"]["changes"][-1]["detectable"]
        out[name] = {"per_rater": per_rater, "panel": whole}
    return out


def _share_blocks(figs: list[_PhaseFigures], phases: tuple[str, ...], cues: tuple[str, ...],
                  i: int, confidence: float) -> dict:
    """One rater's {CUE: {values{PHASE}, changes[...]}} of cue shares."""
    if any(f.shares is None for f in figs):
        return {}
    blocks = {}
    for c, cue in enumerate(cues):
        changes = []
        for a, b in phase_pairs(phases):
            da, db = figs[a].share_draws[i:i + 1, :, c], figs[b].share_draws[i:i + 1, :, c]
            low, high, p = bootstrap_difference(da, db, confidence)
            diff = (db - da)[0]
            se = float(np.nanstd(diff, ddof=1)) if np.isfinite(diff).sum() > 2 else math.nan
            comparable, note = comparability("shares", figs[a].cases == figs[b].cases)
            changes.append(Change(phases[a], phases[b],
                                  float(figs[b].shares[i, c] - figs[a].shares[i, c]),
                                  float(low[0]), float(high[0]), float(p[0]),
                                  "case bootstrap of each phase, percentile interval",
                                  detectable=detectable_change(se), comparable=comparable, note=note))
        blocks[cue] = {"values": {ph: float(f.shares[i, c]) for ph, f in zip(phases, figs)},
                       "changes": changes}
    return blocks


# ----------------------------------------------------------------------------- words

def comparison_cautions(*, has_control: bool, same_cases: bool, apart_metrics: list[str],
                        n_trained: int, n_control: int, unequal_cases: int = 0,
                        started_worse: list[str] | None = None,
                        outcome_selected: bool = False) -> tuple[str, ...]:
    """The plain-words cautions of a comparison (reports print these, never their own)."""
    notes = []
    if outcome_selected:
        notes.append("The outcome is known only for the cases that were selected (admitted), so r_a "
                     "and G with the outcome are biased and may rest on few cases per rater: read their "
                     "changes, and any gain credited on them, as a rough guide only.")
    if unequal_cases:
        notes.append(f"For {unequal_cases} rater(s) the number of cases differs by more than half "
                     "between phases: R_s reads higher with fewer cases, so its change is read on "
                     "the adjusted R_s, which removes that bias; misallocation, the cue shares and "
                     "G with the rubric are not corrected, and part of their change may be the change in the number "
                     "of cases.")
    if not has_control:
        notes.append("There is no control group: a change cannot be credited to the training alone; "
                     "practice, different cases and regression to the mean can move the figures too.")
    if not same_cases:
        notes.append("The phases judged different cases: panel figures (agreement, the spread of "
                     "weight profiles) compare different case sets, so the verdict rests on each "
                     "rater's own changes; a figure not corrected for the different cases is marked "
                     "so beside it.")
    if started_worse:
        notes.append("The trained raters started worse than the controls on "
                     f"{listing(started_worse)}: part of their gain there may be regression to the "
                     "mean (a rater who started low tends to read higher the next time by chance).")
    # The measures where the arms started apart in the other direction (those where the
    # trained started worse are said above), in words rather than metric keys.
    apart_only = [w for w in (METRIC_WORDS.get(m, m) for m in apart_metrics) if w not in (started_worse or ())]
    if apart_only:
        notes.append("The trained raters started apart from the controls on "
                     f"{listing(apart_only)}: part of their change may be regression to the mean; "
                     "the estimate that holds the starting value constant (ANCOVA) is shown beside it.")
    if has_control and min(n_trained, n_control) < 5:
        notes.append(f"With {n_trained} trained and {n_control} control raters the training effect "
                     "is measured roughly; a wide interval is expected.")
    notes.append("These figures describe judgments on the cases of this study; any use for careers "
                 "or admissions must follow the institution's policies and the law.")
    return tuple(notes)


# ----------------------------------------------------------------------------- entry point


def _jaccard(a: frozenset, b: frozenset) -> float:
    return len(a & b) / len(a | b) if a | b else 0.0


def _cases_of(table: JudgmentTable, phase: str, raters: list[str]) -> frozenset:
    """The cases that these raters judged first in a phase."""
    first = table.phase(phase).first
    return frozenset(first.loc[first["rater"].isin(raters), "case"])


def compare(table: JudgmentTable, *, seed: int | None = None, n_boot: int = 1000,
            confidence: float = 0.95, rng: np.random.Generator | None = None,
            jobs: int | None = None) -> ComparisonResult:
    """Compare each rater, and the panel, across the phases of a study.

    Parameters
    ----------
    table : a study with ``[phases] order`` naming two phases or more.
    seed : seed of the case bootstraps (default: the spec's seed); ``rng`` overrides it.
    n_boot : case resamples per phase.
    confidence : level of every interval.
    jobs : phases computed at once (threads; default: the cores available). The result
        does not depend on it.
    """
    from ..errors import SpecError, check_seed

    check_seed(seed)
    spec = table.spec
    phases = tuple(p.name for p in table.phases if p.name is not None)
    if len(phases) < 2:
        raise SpecError("calibrate compare needs two phases or more: give [phases] order in the spec "
                        "and a phase per table or a phase column.")
    seed = spec.seed if seed is None else int(seed)
    generator = rng if rng is not None else np.random.default_rng(np.random.SeedSequence(seed))
    present = [set(table.phase(ph).raters) for ph in phases]
    everyone = sorted(set().union(*present), key=natural_key)
    matched = tuple(r for r in everyone if all(r in s for s in present))
    unmatched = tuple({"rater": r, "phases": [ph for ph, s in zip(phases, present) if r in s]}
                      for r in everyone if r not in matched)
    has_control = spec.trained is not None
    trained = set(spec.trained) if has_control else set(matched)
    has_control = has_control and any(r not in trained for r in matched)
    rubric_share = (_validate_rubric(table.design, spec.rubric, spec.rubric_basis)
                    if spec.rubric else None)
    streams = generator.spawn(len(phases))
    panel_boot = min(n_boot, PANEL_BOOT)

    def figures(k: int) -> _PhaseFigures:
        return _phase_figures(table, table.phase(phases[k]), matched, rubric_share=rubric_share,
                              n_boot=n_boot, rng=streams[k], panel_boot=panel_boot)

    workers = max(1, min(int(jobs) if jobs else available_cores(), len(phases)))
    if workers > 1:
        # Each phase has its own random stream, so the result does not depend on the order
        # in which the phases finish; numpy's solves release the GIL.
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=workers) as pool:
            figs = list(pool.map(figures, range(len(phases))))
    else:
        figs = [figures(k) for k in range(len(phases))]
    metrics = tuple(m for m in ("r", "retest_r", "misallocation", "g_rubric", "severity", "r_a", "g")
                    if m in figs[0].values)
    per_metric = {m: _rater_changes(figs, phases, m, confidence) for m in metrics}
    cues = tuple(table.design.cues)
    raters = []
    for i, name in enumerate(matched):
        blocks = {m: {"values": {ph: float(figs[k].values[m][i]) for k, ph in enumerate(phases)},
                      "changes": per_metric[m][i]} for m in metrics}
        verdicts = {m: change_word(m, blocks[m]["changes"][-1].ci_low, blocks[m]["changes"][-1].ci_high)
                    for m in metrics}
        raters.append(RaterComparison(rater=name, trained=name in trained, metrics=blocks,
                                      verdicts=verdicts,
                                      shares=_share_blocks(figs, phases, cues, i, confidence)))
    case_sets = [f.cases for f in figs]
    trained_names = [r.rater for r in raters if r.trained]
    control_names = [r.rater for r in raters if not r.trained]
    arms_alike = [bool(has_control) and _jaccard(_cases_of(table, ph, trained_names),
                                                 _cases_of(table, ph, control_names)) >= ARMS_SHARED_CASES
                  for ph in phases]
    # R_s's changes are of the adjusted R_s; the training effect's baseline and ANCOVA read the same.
    adjusted_rs = {name: {ph: float(figs[k].values["r_adjusted"][i]) for k, ph in enumerate(phases)}
                   for i, name in enumerate(matched)}
    panel = _panel(raters, phases, metrics, has_control, confidence, case_sets, arms_alike,
                   bases={"r": adjusted_rs})
    trained_mask = np.array([r.trained for r in raters], dtype=bool)
    panel.update(_panel_extras(figs, phases, trained_mask, has_control, rubric_share, cues, raters,
                               confidence))
    panel["detectable"] = _panel_detectable(raters, panel, metrics, has_control)
    same_cases = all(s == case_sets[0] for s in case_sets[1:])
    effects = panel["training_effect"] or {}
    apart = [m for m, e in effects.items() if e["arms_differ_at_baseline"]]
    started_worse = [METRIC_WORDS[m] for m, e in effects.items() if e.get("trained_started_worse")]
    n_tr = sum(r.trained for r in raters)
    n_first, n_last = figs[0].counts["r"], figs[-1].counts["r"]
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.maximum(n_first, n_last) / np.minimum(n_first, n_last)
    unequal = int(np.sum(np.isfinite(ratio) & (ratio > UNEQUAL_CASES_RATIO)))
    cautions = comparison_cautions(has_control=has_control, same_cases=same_cases,
                                   apart_metrics=apart, n_trained=n_tr, n_control=len(raters) - n_tr,
                                   unequal_cases=unequal, started_worse=started_worse,
                                   outcome_selected=bool(spec.criterion_only_for_selected
                                                         and spec.columns.get("criterion")))
    return ComparisonResult(phases=phases, seed=seed, has_control=has_control, raters=tuple(raters),
                            unmatched=unmatched, panel=panel, cautions=cautions, n_boot=n_boot,
                            summary=comparison_summary(phases, panel, has_control),
                            study_name=spec.name)
