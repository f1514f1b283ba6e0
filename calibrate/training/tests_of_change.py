"""The tests behind every change: one rater between phases, and the panel across raters.

Pure statistics on numbers; nothing here knows about tables or phases.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

_Z_CAP = 1 - 1e-12  # keeps atanh finite for a correlation of exactly +-1


def fisher_z_difference(r1: float, n1: int, r2: float, n2: int,
                        confidence: float = 0.95) -> tuple[float, float, float, float]:
    """Change r2 - r1 between two correlations on different cases.

    Returns (z, p_value, ci_low, ci_high). The test is Fisher's z for independent
    correlations, z = (atanh r2 - atanh r1) / sqrt(1/(n1-3) + 1/(n2-3)); the interval
    of the difference r2 - r1 is Zou's (2007, Psychological Methods 12, 399-413),
    which combines the two Fisher intervals and stays inside [-2, 2].
    """
    if not (np.isfinite(r1) and np.isfinite(r2)) or n1 < 4 or n2 < 4:
        return (math.nan,) * 4
    z1, z2 = np.arctanh(np.clip([r1, r2], -_Z_CAP, _Z_CAP))
    se = math.sqrt(1.0 / (n1 - 3) + 1.0 / (n2 - 3))
    z = float((z2 - z1) / se)
    p = float(2 * stats.norm.sf(abs(z)))
    q = stats.norm.ppf(0.5 + confidence / 2)
    l1, u1 = np.tanh(z1 + np.array([-q, q]) / math.sqrt(n1 - 3))
    l2, u2 = np.tanh(z2 + np.array([-q, q]) / math.sqrt(n2 - 3))
    d = r2 - r1
    low = d - math.sqrt((r2 - l2) ** 2 + (u1 - r1) ** 2)
    high = d + math.sqrt((u2 - r2) ** 2 + (r1 - l1) ** 2)
    return z, p, float(low), float(high)


def normal_difference(est1: float, se1: float, est2: float, se2: float,
                      confidence: float = 0.95) -> tuple[float, float, float]:
    """(p_value, ci_low, ci_high) of est2 - est1 for two independent normal estimates."""
    if not all(np.isfinite([est1, se1, est2, se2])):
        return (math.nan,) * 3
    se = math.hypot(se1, se2)
    d = est2 - est1
    if se == 0:
        return (math.nan, d, d)
    q = stats.norm.ppf(0.5 + confidence / 2)
    return float(2 * stats.norm.sf(abs(d) / se)), d - q * se, d + q * se


def bootstrap_difference(draws1: np.ndarray, draws2: np.ndarray,
                         confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Percentile interval and two-sided p of draws2 - draws1, row by row.

    draws1, draws2 : (G, B) statistics from independent case resamples of each phase.
    The p-value is twice the smaller tail share of the differences at zero (at least
    1/(B+1)), the usual bootstrap test of no change.
    """
    diff = draws2 - draws1
    finite = np.isfinite(diff)
    n = finite.sum(axis=1)
    alpha = 1 - confidence
    low = np.full(diff.shape[0], np.nan)
    high = np.full(diff.shape[0], np.nan)
    p = np.full(diff.shape[0], np.nan)
    ok = n >= 20
    if ok.any():
        d = np.where(finite, diff, np.nan)[ok]
        low[ok], high[ok] = np.nanquantile(d, [alpha / 2, 1 - alpha / 2], axis=1)
        below = np.nansum(d <= 0, axis=1) / n[ok]
        above = np.nansum(d >= 0, axis=1) / n[ok]
        p[ok] = np.clip(2 * np.minimum(below, above), 1.0 / (n[ok] + 1), 1.0)
    return low, high, p


def _mover_bounds(d, est1, est2, z1, s1, z2, s2, q):
    """Zou's (2007) MOVER limits of est2 - est1 from each phase's Fisher-z limits at the
    normal quantile ``q`` (arrays broadcast)."""
    l1, u1 = np.tanh(z1 - q * s1), np.tanh(z1 + q * s1)
    l2, u2 = np.tanh(z2 - q * s2), np.tanh(z2 + q * s2)
    low = d - np.sqrt((est2 - l2) ** 2 + (u1 - est1) ** 2)
    high = d + np.sqrt((u2 - est2) ** 2 + (est1 - l1) ** 2)
    return low, high


def correlation_bootstrap_difference(est1: np.ndarray, draws1: np.ndarray, est2: np.ndarray,
                                     draws2: np.ndarray, confidence: float = 0.95
                                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Interval and two-sided p of est2 - est1 for a correlation-like figure in [0, 1]
    (here Wherry's adjusted R_s) read in two phases with independent case resamples.

    est1, est2 : (G,) estimates; draws1, draws2 : (G, B) their resamples.
    Each phase gets a normal interval on Fisher's z scale, atanh(est) +- q SD(atanh draws),
    moved back with tanh, and the two are combined into an interval of the difference by
    Zou's (2007, Psychological Methods 12, 399-413) method of variance estimates recovery,
    the construction :func:`fisher_z_difference` uses. Why not the percentile interval of
    the difference of draws: with few cases (25-40) the adjusted R_s is biased low and
    skewed, so that interval missed no change 6-7% of the time with 40 against 120 cases
    (DEVELOPERS.md); on the z scale the adjusted R_s is close to unbiased (within 0.004 of
    the population R_s at 25-120 cases in our simulations) and nearly normal.
    The p-value inverts the same interval: the level at which one limit touches zero.
    """
    est1, est2 = np.asarray(est1, float), np.asarray(est2, float)
    G = est1.size
    low = np.full(G, np.nan)
    high = np.full(G, np.nan)
    p = np.full(G, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        z_draws1 = np.arctanh(np.clip(draws1, -_Z_CAP, _Z_CAP))
        z_draws2 = np.arctanh(np.clip(draws2, -_Z_CAP, _Z_CAP))
    n1, n2 = np.isfinite(z_draws1).sum(axis=1), np.isfinite(z_draws2).sum(axis=1)
    ok = (n1 >= 20) & (n2 >= 20) & np.isfinite(est1) & np.isfinite(est2)
    if not ok.any():
        return low, high, p
    e1, e2 = est1[ok], est2[ok]
    z1, z2 = np.arctanh(np.clip([e1, e2], -_Z_CAP, _Z_CAP))
    s1 = np.nanstd(z_draws1[ok], axis=1, ddof=1)
    s2 = np.nanstd(z_draws2[ok], axis=1, ddof=1)
    d = e2 - e1
    q = stats.norm.ppf(0.5 + confidence / 2)
    low[ok], high[ok] = _mover_bounds(d, e1, e2, z1, s1, z2, s2, q)
    # p: the limit on zero's side moves monotonically with q; bisect for the q at which it
    # reaches zero (all raters at once), then p = 2 (1 - Phi(q)).
    lo_q, hi_q = np.zeros(d.size), np.full(d.size, 40.0)
    for _ in range(60):
        mid = (lo_q + hi_q) / 2
        l_mid, h_mid = _mover_bounds(d, e1, e2, z1, s1, z2, s2, mid)
        excludes = np.where(d >= 0, l_mid > 0, h_mid < 0)
        lo_q = np.where(excludes, mid, lo_q)
        hi_q = np.where(excludes, hi_q, mid)
    p_ok = np.where(d == 0, 1.0, 2 * stats.norm.sf((lo_q + hi_q) / 2))
    p[ok] = np.where(np.isfinite(s1) & np.isfinite(s2), p_ok, np.nan)
    return low, high, p


def paired_tests(deltas: np.ndarray, confidence: float = 0.95) -> dict:
    """Across raters: is the mean (or median) change zero?

    Paired t (t on the per-rater changes) with its interval and the standardized mean
    change d_z = mean / SD (Cohen 1988, the effect size of a paired design); Wilcoxon's
    signed-rank test (exact when it can be, as scipy chooses).
    """
    d = np.asarray(deltas, dtype=float)
    d = d[np.isfinite(d)]
    out = {"n": int(d.size), "mean_delta": math.nan, "ci_low": math.nan, "ci_high": math.nan,
           "t": math.nan, "df": math.nan, "p_value": math.nan, "effect_size_dz": math.nan,
           "wilcoxon_statistic": math.nan, "wilcoxon_p": math.nan}
    if d.size < 2:
        if d.size == 1:
            out["mean_delta"] = float(d[0])
        return out
    mean, sd = float(d.mean()), float(d.std(ddof=1))
    out["mean_delta"] = mean
    out["df"] = d.size - 1
    if sd > 0:
        t = stats.ttest_1samp(d, 0.0)
        half = stats.t.ppf(0.5 + confidence / 2, d.size - 1) * sd / math.sqrt(d.size)
        out.update(t=float(t.statistic), p_value=float(t.pvalue), ci_low=mean - half,
                   ci_high=mean + half, effect_size_dz=mean / sd)
    if np.any(d != 0):
        w = stats.wilcoxon(d)
        out.update(wilcoxon_statistic=float(w.statistic), wilcoxon_p=float(w.pvalue))
    return out


def welch_difference(trained: np.ndarray, control: np.ndarray, confidence: float = 0.95) -> dict:
    """Difference in differences: mean change of the trained minus that of the controls.

    Welch's t on the per-rater changes (Welch 1947), which measured 95.5% coverage of the
    true effect where a two-stage bootstrap gave 99.0% and resampling raters only 89.0%.
    """
    a = np.asarray(trained, dtype=float)
    b = np.asarray(control, dtype=float)
    a, b = a[np.isfinite(a)], b[np.isfinite(b)]
    out = {"estimate": math.nan, "ci_low": math.nan, "ci_high": math.nan, "p_value": math.nan,
           "df": math.nan, "n_trained": int(a.size), "n_control": int(b.size)}
    if a.size < 2 or b.size < 2:
        return out
    va, vb = a.var(ddof=1) / a.size, b.var(ddof=1) / b.size
    est = float(a.mean() - b.mean())
    out["estimate"] = est
    if va + vb == 0:
        return out
    se = math.sqrt(va + vb)
    df = (va + vb) ** 2 / (va ** 2 / (a.size - 1) + vb ** 2 / (b.size - 1))
    q = stats.t.ppf(0.5 + confidence / 2, df)
    out.update(ci_low=est - q * se, ci_high=est + q * se, df=float(df),
               p_value=float(2 * stats.t.sf(abs(est) / se, df)))
    return out


def ancova_difference(baseline: np.ndarray, final: np.ndarray, is_trained: np.ndarray,
                      confidence: float = 0.95) -> dict:
    """Arm effect on the final value with the baseline value held constant (ANCOVA).

    Ordinary least squares of final ~ 1 + baseline + trained; the estimate is the
    coefficient of ``trained``, with its t interval and p. It removes the part of a gain
    that regression to the mean predicts from a worse start.
    """
    x0 = np.asarray(baseline, dtype=float)
    y = np.asarray(final, dtype=float)
    g = np.asarray(is_trained, dtype=float)
    ok = np.isfinite(x0) & np.isfinite(y)
    x0, y, g = x0[ok], y[ok], g[ok]
    out = {"estimate": math.nan, "ci_low": math.nan, "ci_high": math.nan, "p_value": math.nan}
    n = y.size
    if n < 4 or g.min(initial=1) == g.max(initial=0):
        return out
    X = np.column_stack([np.ones(n), x0, g])
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ coef
    df = n - 3
    if np.linalg.matrix_rank(X) < 3:
        return out
    sigma2 = resid @ resid / df
    se = math.sqrt(sigma2 * np.linalg.inv(X.T @ X)[2, 2])
    est = float(coef[2])
    out["estimate"] = est
    if se > 0:
        q = stats.t.ppf(0.5 + confidence / 2, df)
        out.update(ci_low=est - q * se, ci_high=est + q * se,
                   p_value=float(2 * stats.t.sf(abs(est) / se, df)))
    return out
