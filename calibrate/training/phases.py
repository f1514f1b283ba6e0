"""Before and after a training: each rater's figures per phase and every change.

``compare(table)`` matches raters by id across the phases of a study, computes per
phase R_s, test-retest r, severity, rubric misallocation (with a rubric) and r_a (with a
criterion), and tests each change (every consecutive pair of phases, and first to last):

- R_s and misallocation: independent case bootstraps of each phase (cases resampled
  within the rater, all raters and resamples solved at once), percentile interval of
  the difference and the bootstrap test of no change;
- test-retest r and r_a: correlations on different cases, Fisher's z test with Zou's
  (2007) interval of the difference;
- severity: the difference of two independent normal estimates (the offset is relative
  to the panel of its phase, so the change is relative to the panel's change).

Across raters, each arm's changes get a paired t and Wilcoxon's signed-rank test; with a
control group the training effect is the difference in differences by Welch's t on the
per-rater changes, with an ANCOVA estimate beside it when the arms started apart.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..agreement.offsets import severity
from ..data.ingest import JudgmentTable, PhaseData
from ..data.rules import natural_key
from ..data.rows import JudgmentRows, line_up, standard_deviations
from ..lens.rubric import _cue_shares, _validate_rubric
from ..result_base import ResultMixin, jsonable
from .tests_of_change import (ancova_difference, bootstrap_difference, fisher_z_difference,
                              normal_difference, paired_tests, welch_difference)

COMPARISON_SCHEMA = "calibrate.comparison/1"
BOOTSTRAP_METRICS = ("r", "misallocation")
# The arms differ at baseline when Welch's t on the first-phase values gives p below this
# (our own screening level; the ANCOVA estimate is shown beside the Welch one then).
BASELINE_P = 0.10
# Case counts of a rater further apart than this between the first and the last phase bias
# the change in R_s (measured: 85% coverage with 40 against 120 cases; our own cut).
UNEQUAL_CASES_RATIO = 1.5


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

    def to_dict(self) -> dict:
        return jsonable({"from": self.from_phase, "to": self.to_phase, "delta": self.delta,
                         "ci_low": self.ci_low, "ci_high": self.ci_high, "p_value": self.p_value,
                         "method": self.method})


@dataclass(frozen=True)
class RaterComparison(ResultMixin):
    """One rater across the phases: ``metrics[name] = {"values": {phase: v}, "changes": [...]}``."""

    rater: str
    trained: bool
    metrics: dict
    verdicts: dict = field(default_factory=dict)  # metric -> change_word of first to last


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
        return jsonable({"schema": COMPARISON_SCHEMA, "seed": self.seed, "n_boot": self.n_boot,
                         "phases": list(self.phases), "has_control": self.has_control,
                         "study": {"name": self.study_name}, "summary": list(self.summary),
                         "raters": [r.to_dict() for r in self.raters],
                         "unmatched": list(self.unmatched), "panel": self.panel,
                         "cautions": list(self.cautions)})

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


def _policy_draws(rows: JudgmentRows, order: np.ndarray, design, sd: np.ndarray,
                  rubric_share: np.ndarray | None, n_boot: int,
                  rng: np.random.Generator) -> tuple[dict, np.ndarray]:
    """R_s (and misallocation) of every rater in ``order`` for the estimate and each resample.

    Weighted least squares with the resample counts as weights, batched over raters and
    resamples through SSCP matrices (never an (rater, resample, case, cue) array): one
    small solve per (rater, resample).
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
    if rubric_share is not None:
        shares = _cue_shares((coef * sd).reshape(-1, p), design)
        with np.errstate(invalid="ignore"):
            mis = 0.5 * np.abs(shares - rubric_share).sum(axis=1)
        out["misallocation"] = mis.reshape(G, n_boot + 1)
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


def _phase_figures(table: JudgmentTable, ph: PhaseData, raters: tuple[str, ...], *,
                   rubric_share, n_boot: int, rng: np.random.Generator) -> _PhaseFigures:
    spec, design = table.spec, table.phase_design(ph)  # the phase's own fill values, as in the audit
    scale = spec.judgment
    first = _fit_first(table, ph)
    values: dict = {}
    counts: dict = {}
    draws: dict = {}
    se: dict = {}
    G = len(raters)
    if len(first):
        rows = line_up(design, first)
        index = {name: i for i, name in enumerate(rows.raters)}
        order = np.array([index.get(name, -1) for name in raters], dtype=np.intp)
        sd = standard_deviations(design, rows.design_row)
        boot, sizes = _policy_draws(rows, order, design, sd, rubric_share, n_boot, rng)
        for name, arr in boot.items():
            values[name] = arr[:, 0]
            draws[name] = arr[:, 1:]
            counts[name] = sizes
    else:
        for name in ("r",) + (("misallocation",) if rubric_share is not None else ()):
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
    return _PhaseFigures(values=values, counts=counts, draws=draws, se=se)


# ----------------------------------------------------------------------------- changes


def phase_pairs(phases: tuple[str, ...]) -> list[tuple[int, int]]:
    """Every consecutive pair of phases, then first to last when there are three or more."""
    pairs = [(i, i + 1) for i in range(len(phases) - 1)]
    if len(phases) > 2:
        pairs.append((0, len(phases) - 1))
    return pairs


def _rater_changes(figs: list[_PhaseFigures], phases: tuple[str, ...], name: str,
                   confidence: float) -> list[list[Change]]:
    """Per rater (outer list), the changes of one metric over every phase pair."""
    G = figs[0].values[name].size
    out: list[list[Change]] = [[] for _ in range(G)]
    for a, b in phase_pairs(phases):
        fa, fb = figs[a], figs[b]
        va, vb = fa.values[name], fb.values[name]
        if name in BOOTSTRAP_METRICS:
            low, high, p = bootstrap_difference(fa.draws[name], fb.draws[name], confidence)
            rows = [(low[i], high[i], p[i]) for i in range(G)]
            method = "case bootstrap of each phase, percentile interval"
        elif name == "severity":
            rows = [normal_difference(va[i], fa.se[name][i], vb[i], fb.se[name][i], confidence)
                    for i in range(G)]
            rows = [(lo, hi, pv) for pv, lo, hi in rows]
            method = "difference of independent normal estimates"
        else:
            rows = []
            for i in range(G):
                _, pv, lo, hi = fisher_z_difference(va[i], int(fa.counts[name][i]), vb[i],
                                                    int(fb.counts[name][i]), confidence)
                rows.append((lo, hi, pv))
            method = "Fisher z (different cases), Zou interval"
        for i in range(G):
            lo, hi, pv = rows[i]
            out[i].append(Change(phases[a], phases[b], float(vb[i] - va[i]), float(lo), float(hi),
                                 float(pv), method))
    return out


def _panel(raters: list[RaterComparison], phases: tuple[str, ...], metrics: tuple[str, ...],
           has_control: bool, confidence: float) -> dict:
    arms = {"trained": [r for r in raters if r.trained]}
    if has_control:
        arms["control"] = [r for r in raters if not r.trained]
    panel_metrics: dict = {}
    effects: dict | None = {} if has_control else None
    for name in metrics:
        panel_metrics[name] = {}
        for arm, members in arms.items():
            vals = {ph: float(np.nanmean([m.metrics[name]["values"][ph] for m in members]))
                    if any(np.isfinite(m.metrics[name]["values"][ph]) for m in members) else math.nan
                    for ph in phases}
            changes = []
            for k, (a, b) in enumerate(phase_pairs(phases)):
                deltas = np.array([m.metrics[name]["changes"][k].delta for m in members])
                test = paired_tests(deltas, confidence)
                changes.append({"from": phases[a], "to": phases[b], "delta": test["mean_delta"],
                                "ci_low": test["ci_low"], "ci_high": test["ci_high"],
                                "p_value": test["p_value"], **{key: test[key] for key in
                                ("n", "t", "df", "effect_size_dz", "wilcoxon_statistic", "wilcoxon_p")}})
            panel_metrics[name][arm] = {"values": vals, "changes": changes}
        if effects is not None:
            last = len(phase_pairs(phases)) - 1
            def column(members, getter):
                return np.array([getter(m.metrics[name]) for m in members], dtype=float)
            d_t = column(arms["trained"], lambda b: b["changes"][last].delta)
            d_c = column(arms["control"], lambda b: b["changes"][last].delta)
            welch = welch_difference(d_t, d_c, confidence)
            base_t = column(arms["trained"], lambda b: b["values"][phases[0]])
            base_c = column(arms["control"], lambda b: b["values"][phases[0]])
            baseline = welch_difference(base_t, base_c, confidence)
            apart = bool(np.isfinite(baseline["p_value"]) and baseline["p_value"] < BASELINE_P)
            final = np.concatenate([column(arms["trained"], lambda b: b["values"][phases[-1]]),
                                    column(arms["control"], lambda b: b["values"][phases[-1]])])
            ancova = ancova_difference(np.concatenate([base_t, base_c]), final,
                                       np.r_[np.ones(d_t.size), np.zeros(d_c.size)], confidence)
            effects[name] = {"from": phases[0], "to": phases[-1], **welch,
                             "method": "Welch t on the per-rater changes",
                             "baseline_difference": baseline["estimate"],
                             "baseline_p": baseline["p_value"], "arms_differ_at_baseline": apart,
                             "ancova": ancova}
    return {"metrics": panel_metrics, "training_effect": effects}


# ----------------------------------------------------------------------------- words

# Which way is better for each metric (severity has no better direction: it is relative
# to the panel).
BETTER = {"r": 1, "retest_r": 1, "r_a": 1, "misallocation": -1}
METRIC_WORDS = {"r": "consistency (R_s)", "retest_r": "test-retest agreement",
                "misallocation": "closeness to the rubric's weights",
                "severity": "severity offset", "r_a": "accuracy against the outcome (r_a)"}


def change_word(metric: str, ci_low: float, ci_high: float) -> str:
    """'better', 'worse' or 'no clear change' (the interval holds zero or is missing); for a
    metric without a better direction, 'higher' or 'lower'."""
    if not (np.isfinite(ci_low) and np.isfinite(ci_high)) or ci_low <= 0 <= ci_high:
        return "no clear change"
    up = ci_low > 0
    if metric not in BETTER:
        return "higher" if up else "lower"
    return "better" if up == (BETTER[metric] > 0) else "worse"


def _ancova_interval(effect: dict) -> tuple[float, float]:
    """The ANCOVA interval of a training effect, or the plain one where there is no ANCOVA."""
    ancova = effect.get("ancova") or {}
    low, high = ancova.get("ci_low", effect["ci_low"]), ancova.get("ci_high", effect["ci_high"])
    return (float("nan") if low is None else low), (float("nan") if high is None else high)


def _listing(items: list[str]) -> str:
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def comparison_summary(phases: tuple[str, ...], panel: dict, has_control: bool) -> tuple[str, ...]:
    """Plain sentences: did it work, for whom, and (with three phases or more) did it last."""
    lines = []
    first, last = phases[0], phases[-1]
    metrics = [m for m in panel["metrics"] if m in BETTER]
    if has_control:
        effects = panel["training_effect"]
        welch = {m: change_word(m, effects[m]["ci_low"], effects[m]["ci_high"]) for m in metrics}
        # A gain is credited only when the ANCOVA (each rater's starting value held
        # constant) agrees with the difference in changes; otherwise the evidence is mixed.
        adjusted = {m: change_word(m, *_ancova_interval(effects[m])) for m in metrics}
        words = {m: welch[m] if welch[m] == adjusted[m] else "mixed" for m in metrics}
        better = [METRIC_WORDS[m] for m in metrics if words[m] == "better"]
        worse = [METRIC_WORDS[m] for m in metrics if words[m] == "worse"]
        mixed = [METRIC_WORDS[m] for m in metrics
                 if words[m] == "mixed" and {welch[m], adjusted[m]} & {"better", "worse"}]
        if better:
            lines.append(f"From {first} to {last} the trained raters improved more than the controls "
                         f"on {_listing(better)}.")
        else:
            lines.append(f"From {first} to {last} the trained raters did not improve clearly more than "
                         "the controls on any measure.")
        if worse:
            lines.append(f"They fell behind the controls on {_listing(worse)}.")
        if mixed:
            lines.append(f"On {_listing(mixed)} the evidence is mixed: the difference in changes and the "
                         "estimate that holds each rater's starting value constant disagree, so no gain "
                         "is credited.")
    else:
        arm = panel["metrics"]
        last_change = len(phase_pairs(phases)) - 1
        words = {m: change_word(m, arm[m]["trained"]["changes"][last_change]["ci_low"],
                                arm[m]["trained"]["changes"][last_change]["ci_high"]) for m in metrics}
        better = [METRIC_WORDS[m] for m in metrics if words[m] == "better"]
        lines.append(f"From {first} to {last} the raters improved on {_listing(better)}, but with no "
                     "control group this cannot be credited to the training alone."
                     if better else f"From {first} to {last} the raters did not improve clearly on any "
                     "measure.")
    if len(phases) > 2:
        k = len(phases) - 2  # the last consecutive change: end of training to follow-up
        faded = [METRIC_WORDS[m] for m in metrics
                 if change_word(m, panel["metrics"][m]["trained"]["changes"][k]["ci_low"],
                                panel["metrics"][m]["trained"]["changes"][k]["ci_high"]) == "worse"]
        lines.append(f"From {phases[-2]} to {last} the trained raters slipped back on "
                     f"{_listing(faded)}." if faded else
                     f"From {phases[-2]} to {last} the trained raters did not slip back clearly on "
                     "any measure.")
    return tuple(lines)


def comparison_cautions(*, has_control: bool, same_cases: bool, apart_metrics: list[str],
                        n_trained: int, n_control: int, unequal_cases: int = 0) -> tuple[str, ...]:
    """The plain-words cautions of a comparison (reports print these, never their own)."""
    notes = []
    if unequal_cases:
        notes.append(f"For {unequal_cases} rater(s) the number of cases differs by more than half "
                     "between phases: R_s and misallocation read higher with fewer cases, so their "
                     "change is partly the change in the number of cases (in simulations the interval "
                     "of a change in R_s held the true change about 85% of the time instead of 95% with "
                     "40 against 120 cases).")
    if not has_control:
        notes.append("There is no control group: a change cannot be credited to the training alone; "
                     "practice, different cases and regression to the mean can move the figures too.")
    if not same_cases:
        notes.append("The phases judged different cases: panel figures compare different case sets, "
                     "so the verdict rests on each rater's own figures, which are comparable.")
    if apart_metrics:
        notes.append("The trained raters started apart from the controls on "
                     f"{', '.join(apart_metrics)}: part of their change may be regression to the mean; "
                     "the ANCOVA estimate, which holds the starting value constant, is shown beside it.")
    if has_control and min(n_trained, n_control) < 5:
        notes.append(f"With {n_trained} trained and {n_control} control raters the training effect "
                     "is measured roughly; a wide interval is expected.")
    notes.append("These figures describe judgments on the cases of this study; any use for careers "
                 "or admissions must follow the institution's policies and the law.")
    return tuple(notes)


# ----------------------------------------------------------------------------- entry point


def compare(table: JudgmentTable, *, seed: int | None = None, n_boot: int = 1000,
            confidence: float = 0.95, rng: np.random.Generator | None = None) -> ComparisonResult:
    """Compare each rater, and the panel, across the phases of a study.

    Parameters
    ----------
    table : a study with ``[phases] order`` naming two phases or more.
    seed : seed of the case bootstraps (default: the spec's seed); ``rng`` overrides it.
    n_boot : case resamples per phase.
    confidence : level of every interval.
    """
    from ..errors import SpecError

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
    figs = [_phase_figures(table, table.phase(ph), matched, rubric_share=rubric_share,
                           n_boot=n_boot, rng=streams[k]) for k, ph in enumerate(phases)]
    metrics = tuple(m for m in ("r", "retest_r", "misallocation", "severity", "r_a")
                    if m in figs[0].values)
    per_metric = {m: _rater_changes(figs, phases, m, confidence) for m in metrics}
    raters = []
    for i, name in enumerate(matched):
        blocks = {m: {"values": {ph: float(figs[k].values[m][i]) for k, ph in enumerate(phases)},
                      "changes": per_metric[m][i]} for m in metrics}
        verdicts = {m: change_word(m, blocks[m]["changes"][-1].ci_low, blocks[m]["changes"][-1].ci_high)
                    for m in metrics}
        raters.append(RaterComparison(rater=name, trained=name in trained, metrics=blocks,
                                      verdicts=verdicts))
    panel = _panel(raters, phases, metrics, has_control, confidence)
    case_sets = [set(table.phase(ph).first["case"]) for ph in phases]
    same_cases = all(s == case_sets[0] for s in case_sets[1:])
    effects = panel["training_effect"] or {}
    apart = [m for m, e in effects.items() if e["arms_differ_at_baseline"]]
    n_tr = sum(r.trained for r in raters)
    n_first, n_last = figs[0].counts["r"], figs[-1].counts["r"]
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.maximum(n_first, n_last) / np.minimum(n_first, n_last)
    unequal = int(np.sum(np.isfinite(ratio) & (ratio > UNEQUAL_CASES_RATIO)))
    cautions = comparison_cautions(has_control=has_control, same_cases=same_cases,
                                   apart_metrics=apart, n_trained=n_tr, n_control=len(raters) - n_tr,
                                   unequal_cases=unequal)
    return ComparisonResult(phases=phases, seed=seed, has_control=has_control, raters=tuple(raters),
                            unmatched=unmatched, panel=panel, cautions=cautions, n_boot=n_boot,
                            summary=comparison_summary(phases, panel, has_control),
                            study_name=spec.name)
