"""Test-retest consistency on repeated cases, and R_s set against its ceiling.

A case shown twice to the same rater gives a test-retest pair. Every statistic
here is computed for all raters at once from per-rater sums (``np.bincount``
over the rater index), never by looping a fitting routine over raters.

Drift over the reading order is in :mod:`calibrate.consistency.reading_order`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy.stats import norm

from ..agreement.offsets import check_scale, check_table, tidy_rows
from ..result_base import ResultMixin, jsonable
from .presentations import (
    R_CI,
    MEASURE_FIRST_REPEAT,
    MEASURE_MEAN_PAIRWISE,
    PresentationConsistency,
    low_consistency_p,
    low_consistency_reach,
)

VERDICTS = ("model_misses_rule", "inconsistent", "cannot_tell")
FISHER_CI = "Fisher z (Fisher 1921)"
LOW_TEST_FISHER = "one-sided Fisher z test of rho >= threshold"
LOW_TEST_F = "one-sided F test of ICC(C,1) >= threshold (McGraw & Wong 1996)"
FEW_PAIRS = 10   # below this a warning says the test-retest figures are rough (common practice)


@dataclass(frozen=True)
class RaterRetest(ResultMixin):
    """Test-retest figures for one rater.

    ``r`` is Pearson's r between the first and the second judgment, with a
    Fisher-z interval; ``icc_a1`` treats the two occasions as two raters
    (absolute agreement, McGraw & Wong 1996); the Bland-Altman ``bias`` is the
    mean of second minus first judgment with 95% limits of agreement
    ``bias +- 1.96 SD`` (Bland & Altman 1986). ``exact``, ``within_one`` and
    ``kappa_quadratic`` are for ordinal scales (NaN otherwise; ``exact`` also for binary).
    """

    rater: str
    n_pairs: int
    r: float
    r_ci_low: float
    r_ci_high: float
    icc_a1: float
    mean_abs_diff: float
    exact: float
    within_one: float
    kappa_quadratic: float
    bias: float
    limit_low: float
    limit_high: float
    low_p: float = float("nan")
    flag_detectable_below: float = float("nan")
    flags: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()
    # Which figure ``r`` is: the first judgment against its repeat (``first_repeat_r``,
    # ``n_pairs`` pairs), or with [judgment] repeats = "all" the mean r over every pair of
    # ``presentations`` showings of ``n_pairs`` cases (``mean_pairwise_r``; see
    # :mod:`calibrate.consistency.presentations`). The ICCs treat the showings as occasions.
    measure: str = MEASURE_FIRST_REPEAT
    presentations: int = 2
    presentation_pairs: int = 1
    r_ci_method: str = FISHER_CI
    icc_a1_ci_low: float = float("nan")
    icc_a1_ci_high: float = float("nan")
    icc_c1: float = float("nan")
    icc_c1_ci_low: float = float("nan")
    icc_c1_ci_high: float = float("nan")
    low_test: str = LOW_TEST_FISHER

    def reach(self, level: float, *, threshold: float = 0.70) -> float:
        """The largest consistency the ``low_retest`` test can flag at ``level``."""
        if self.measure == MEASURE_MEAN_PAIRWISE:
            return low_consistency_reach(self.n_pairs, self.presentations, level=level, threshold=threshold)
        return low_retest_reach(self.n_pairs, level=level, threshold=threshold)

    def to_dict(self) -> dict:
        return jsonable({
            "n_pairs": self.n_pairs,
            "measure": self.measure,
            "presentations": self.presentations,
            "presentation_pairs": self.presentation_pairs,
            "r": self.r,
            "r_ci": [self.r_ci_low, self.r_ci_high],
            "r_ci_method": self.r_ci_method,
            "icc_a1": self.icc_a1,
            "icc_a1_ci": [self.icc_a1_ci_low, self.icc_a1_ci_high],
            "icc_c1": self.icc_c1,
            "icc_c1_ci": [self.icc_c1_ci_low, self.icc_c1_ci_high],
            "low_test": self.low_test,
            "mean_abs_diff": self.mean_abs_diff,
            "exact": self.exact,
            "within_one": self.within_one,
            "kappa_quadratic": self.kappa_quadratic,
            "bland_altman": {"bias": self.bias, "low": self.limit_low, "high": self.limit_high},
            "low_p": self.low_p,
            "flag_detectable_below": self.flag_detectable_below,
            "flags": list(self.flags),
            "warnings": list(self.warnings),
        })


@dataclass(frozen=True)
class RetestSet(ResultMixin):
    """Test-retest results for every rater with at least one repeated case."""

    raters: tuple[RaterRetest, ...]
    scale: str
    confidence: float

    def for_rater(self, rater: str) -> RaterRetest | None:
        for r in self.raters:
            if r.rater == rater:
                return r
        return None

    def to_dict(self) -> dict:
        return {r.rater: r.to_dict() for r in self.raters}

    def to_frame(self) -> pd.DataFrame:
        return tidy_rows(self.raters, drop=("warnings",))


def presentation_pairs(presentations: pd.DataFrame) -> pd.DataFrame:
    """Every pair of presentations (earlier, later) of each case and rater, as the
    ``first``/``second`` table :func:`retest` takes."""
    if presentations.empty:
        return pd.DataFrame({"rater": [], "case": [], "first": [], "second": []})
    both = presentations.merge(presentations, on=["rater", "case"], suffixes=("_a", "_b"))
    both = both.loc[both["nth_a"] < both["nth_b"]].sort_values(["rater", "case", "nth_a", "nth_b"])
    return pd.DataFrame({"rater": both["rater"].to_numpy(), "case": both["case"].to_numpy(),
                         "first": both["judgment_a"].to_numpy(float), "second": both["judgment_b"].to_numpy(float)})


def over_presentations(first_two: RetestSet, every_pair: RetestSet,
                       consistency: dict[str, PresentationConsistency], *,
                       low_retest: float = 0.70) -> RetestSet:
    """Test-retest with [judgment] repeats = "all": for each rater with a block of cases x
    presentations (:func:`calibrate.consistency.presentations.presentation_consistency`),
    ``r`` becomes the mean r over presentation pairs (with the F interval of ICC(C,1)), the ICCs those over
    presentations, ``low_retest`` the F test of ICC(C,1), and the differences, agreement
    shares, kappa and Bland-Altman limits are over every pair of presentations
    (``every_pair``). Other raters keep their first judgment against its repeat."""
    level = (1.0 - first_two.confidence) / 2.0
    out = []
    for rt in first_two.raters:
        c = consistency.get(rt.rater)
        pairs = every_pair.for_rater(rt.rater)
        if c is None or pairs is None:
            out.append(rt)
            continue
        warn = [w for w in rt.warnings if not w.startswith("Only ")]
        if c.n_cases < FEW_PAIRS:
            warn.append(f"Only {c.n_cases} cases shown {c.n_presentations} times: the consistency figures "
                        "are rough.")
        flags = ("low_retest",) if c.icc_c1_ci_high < low_retest else ()
        out.append(replace(
            pairs, n_pairs=c.n_cases, measure=MEASURE_MEAN_PAIRWISE, presentations=c.n_presentations,
            presentation_pairs=c.n_presentation_pairs, r=c.mean_r, r_ci_low=c.icc_c1_ci_low,
            r_ci_high=c.icc_c1_ci_high, r_ci_method=R_CI, icc_a1=c.icc_a1,
            icc_a1_ci_low=c.icc_a1_ci_low, icc_a1_ci_high=c.icc_a1_ci_high, icc_c1=c.icc_c1,
            icc_c1_ci_low=c.icc_c1_ci_low, icc_c1_ci_high=c.icc_c1_ci_high, low_test=LOW_TEST_F,
            low_p=low_consistency_p(c.f_c1, c.n_cases, c.n_presentations, threshold=low_retest),
            flag_detectable_below=low_consistency_reach(c.n_cases, c.n_presentations, level=level,
                                                        threshold=low_retest),
            flags=flags, warnings=tuple(warn)))
    return replace(first_two, raters=tuple(out))


def retest(
    repeats: pd.DataFrame,
    *,
    scale: str,
    scale_min: float | None = None,
    scale_max: float | None = None,
    confidence: float = 0.95,
    low_retest: float = 0.70,
) -> RetestSet:
    """Test-retest consistency of every rater from their repeated cases.

    Parameters
    ----------
    repeats : DataFrame with ``rater``, ``case``, ``first``, ``second``.
    scale : "continuous", "ordinal" or "binary".
    scale_min, scale_max : accepted for a uniform call (kappa's weights use the
        judgment values themselves, so it needs no range).
    confidence : level of the interval for r.
    low_retest : the ``low_retest`` flag is set when r's whole interval lies
        below this value (0.70: common practice, no published source). That is the
        one-sided Fisher-z test of ``rho >= low_retest`` at ``(1 - confidence) / 2``;
        its p-value is ``low_p`` (:func:`low_retest_p`), and ``flag_detectable_below``
        the largest r that can be flagged with the rater's number of repeats
        (:func:`low_retest_reach`). An audit re-decides the flag across the panel.

    Notes
    -----
    Per rater, with pairs :math:`(x_i, y_i)`, :math:`i = 1..n`:

    - :math:`r` with interval :math:`\\tanh(\\operatorname{atanh} r \\pm z / \\sqrt{n - 3})`
      (Fisher 1921);
    - ICC(A,1) of the two occasions,
      :math:`(MSR - MSE) / (MSR + MSE + 2 (MSC - MSE) / n)` (McGraw & Wong 1996);
    - quadratic-weighted kappa on the judgment values,
      :math:`1 - \\overline{(x - y)^2} / (s_x^2 + s_y^2 + (\\bar x - \\bar y)^2)` with
      variances over ``n``: the expected squared difference under independent
      margins is exactly that denominator (Cohen 1968 with weights :math:`(i-j)^2`);
    - Bland-Altman bias :math:`\\bar d`, :math:`d = y - x`, limits :math:`\\bar d \\pm 1.96 s_d`.
    """
    check_scale(scale, scale_min, scale_max)
    data = check_table(repeats, ("rater", "case", "first", "second"), "repeated-judgment")
    if data.empty:
        return RetestSet(raters=(), scale=scale, confidence=confidence)
    index, names = pd.factorize(data["rater"], sort=True)
    G = len(names)
    x = data["first"].to_numpy(float)
    y = data["second"].to_numpy(float)

    def total(values):
        return np.bincount(index, weights=values, minlength=G)

    n = np.bincount(index, minlength=G).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx, my = total(x) / n, total(y) / n
        dx, dy = x - mx[index], y - my[index]
        sxx, syy, sxy = total(dx * dx), total(dy * dy), total(dx * dy)
        r = sxy / np.sqrt(sxx * syy)
        r = np.where((sxx > 0) & (syy > 0), np.clip(r, -1.0, 1.0), np.nan)
        z = norm.ppf(0.5 + confidence / 2.0)
        half = z / np.sqrt(n - 3.0)
        zr = np.arctanh(np.clip(r, -1 + 1e-15, 1 - 1e-15))
        ok = n > 3
        r_low = np.where(ok, np.tanh(zr - half), np.nan)
        r_high = np.where(ok, np.tanh(zr + half), np.nan)

        diff = y - x
        bias = total(diff) / n
        sd_diff = np.sqrt(total((diff - bias[index]) ** 2) / (n - 1.0))
        sd_diff = np.where(n > 1, sd_diff, np.nan)
        mad = total(np.abs(diff)) / n

        # two-occasion ANOVA: cases (rows) x occasions (columns)
        grand = (mx + my) / 2.0
        pair_mean = (x + y) / 2.0
        ss_rows = 2.0 * total((pair_mean - grand[index]) ** 2)
        ss_cols = n * (mx - my) ** 2 / 2.0
        ss_total = sxx + syy + n * ((mx - grand) ** 2 + (my - grand) ** 2)
        ss_err = ss_total - ss_rows - ss_cols
        msr, msc, mse = ss_rows / (n - 1.0), ss_cols, ss_err / (n - 1.0)
        icc = (msr - mse) / (msr + mse + 2.0 * (msc - mse) / n)
        icc = np.where(n > 1, icc, np.nan)

        same = np.abs(diff) < 1e-9
        exact = total(same.astype(float)) / n
        within = total((np.abs(diff) <= 1.0 + 1e-9).astype(float)) / n
        expected_sq = sxx / n + syy / n + (mx - my) ** 2
        kappa = 1.0 - (total(diff**2) / n) / expected_sq
        kappa = np.where(expected_sq > 0, kappa, np.nan)
    if scale != "ordinal":
        within = np.full(G, np.nan)
        kappa = np.full(G, np.nan)
        if scale == "continuous":
            exact = np.full(G, np.nan)

    raters = []
    for g in range(G):
        warn = []
        if n[g] < FEW_PAIRS:
            warn.append(f"Only {int(n[g])} repeated case(s): the test-retest figures are rough.")
        if not np.isfinite(r[g]):
            warn.append("The judgments on the repeated cases do not vary, so r is undefined.")
        flags = ("low_retest",) if r_high[g] < low_retest else ()
        level = (1.0 - confidence) / 2.0
        raters.append(RaterRetest(
            rater=str(names[g]), n_pairs=int(n[g]),
            r=float(r[g]), r_ci_low=float(r_low[g]), r_ci_high=float(r_high[g]),
            icc_a1=float(icc[g]), mean_abs_diff=float(mad[g]),
            exact=float(exact[g]), within_one=float(within[g]), kappa_quadratic=float(kappa[g]),
            bias=float(bias[g]),
            limit_low=float(bias[g] - 1.96 * sd_diff[g]), limit_high=float(bias[g] + 1.96 * sd_diff[g]),
            low_p=low_retest_p(r[g], n[g], threshold=low_retest),
            flag_detectable_below=low_retest_reach(n[g], level=level, threshold=low_retest),
            flags=flags, warnings=tuple(warn),
        ))
    return RetestSet(raters=tuple(raters), scale=scale, confidence=confidence)


def low_retest_p(r: float, n_pairs: float, *, threshold: float = 0.70) -> float:
    """One-sided p-value of ``rho >= threshold`` against ``rho < threshold`` (Fisher 1921 z).

    ``Phi((atanh r - atanh threshold) sqrt(n - 3))``; NaN with 3 pairs or fewer or an
    undefined r. Below ``(1 - confidence) / 2`` exactly when the Fisher interval of r
    lies wholly below ``threshold``.
    """
    if not (np.isfinite(r) and n_pairs > 3):
        return float("nan")
    z = np.arctanh(np.clip(r, -1 + 1e-15, 1 - 1e-15))
    return float(norm.cdf((z - np.arctanh(threshold)) * np.sqrt(n_pairs - 3.0)))


def low_retest_reach(n_pairs: float, *, level: float, threshold: float = 0.70) -> float:
    """The largest test-retest r that :func:`low_retest_p` puts below ``level``.

    ``tanh(atanh threshold - z_(1-level) / sqrt(n - 3))``: with 12 pairs and the
    per-rater level 0.025 this is 0.21, so a rater with a retest of .50 cannot be
    flagged from 12 repeats. -1 when no r can reach the level; NaN with 3 pairs or fewer.
    """
    if not n_pairs > 3 or not 0 < level < 1:
        return float("nan")
    reach = np.tanh(np.arctanh(threshold) - norm.ppf(1.0 - level) / np.sqrt(n_pairs - 3.0))
    return float(max(reach, -1.0))


@dataclass(frozen=True)
class ConsistencyVerdict(ResultMixin):
    """R_s set against the ceiling sqrt(r_tt) that test-retest puts on it.

    ``verdict`` is one of:

    - ``model_misses_rule``: R_s lies clearly below sqrt(r_tt): the rater is
      consistent, but follows a rule the linear policy misses (nonlinear, or
      information outside the cues);
    - ``inconsistent``: test-retest and R_s are both clearly low;
    - ``cannot_tell``: the intervals are too wide, or neither holds.
    """

    r_s: float
    r_s_ci_low: float
    r_s_ci_high: float
    ceiling: float
    ceiling_ci_low: float
    ceiling_ci_high: float
    verdict: str
    # with [judgment] repeats = "all" R_s is fitted to case means and the ceiling is the
    # square root of the reliability of such a mean (Spearman-Brown at this many showings)
    policy_on_means: bool = False
    presentations_per_case: float = 1.0


def consistency_verdict(
    r_s: float,
    r_tt: float,
    *,
    r_tt_ci: tuple[float, float],
    r_s_ci: tuple[float, float] | None = None,
    low_retest: float = 0.70,
    low_r_s: float = 0.70,
) -> ConsistencyVerdict:
    """Compare a rater's policy consistency R_s with sqrt(r_tt), interval against interval.

    In the population :math:`R_s \\le \\sqrt{r_{tt}}` when the rater's
    inconsistency is the same on both readings (the reliability index bounds
    the predictability of a judgment from any rule of the cues; Hammond,
    Hursch & Todd 1964, from memory). A sample R_s can exceed the sample bound,
    so only intervals decide:

    - ``inconsistent`` when the whole interval of r_tt lies below ``low_retest``
      and R_s (its interval's upper end when given) lies below ``low_r_s``;
    - ``model_misses_rule`` when R_s (upper end) lies below
      :math:`\\sqrt{\\text{lower end of } r_{tt}}`;
    - ``cannot_tell`` otherwise, and whenever a figure is missing.

    The 0.70 thresholds are common practice, not a published rule.
    """
    lo_tt, hi_tt = r_tt_ci
    s_lo, s_hi = (r_s, r_s) if r_s_ci is None else r_s_ci
    with np.errstate(invalid="ignore"):
        ceiling = np.sqrt(r_tt) if r_tt >= 0 else 0.0
        c_lo = np.sqrt(max(lo_tt, 0.0)) if np.isfinite(lo_tt) else np.nan
        c_hi = np.sqrt(max(hi_tt, 0.0)) if np.isfinite(hi_tt) else np.nan
    verdict = "cannot_tell"
    if np.isfinite(s_hi) and np.isfinite(hi_tt):
        if hi_tt < low_retest and s_hi < low_r_s:
            verdict = "inconsistent"
        elif np.isfinite(c_lo) and s_hi < c_lo:
            verdict = "model_misses_rule"
    return ConsistencyVerdict(
        r_s=float(r_s), r_s_ci_low=float(s_lo), r_s_ci_high=float(s_hi),
        ceiling=float(ceiling) if np.isfinite(r_tt) else np.nan,
        ceiling_ci_low=float(c_lo), ceiling_ci_high=float(c_hi),
        verdict=verdict,
    )
