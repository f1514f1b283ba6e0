"""Consistency over every presentation of a case shown more than twice.

Experiments and calibration exercises show each case several times. With
``[judgment] repeats = "all"`` a rater's consistency is measured on a complete block
of cases x presentations (the j-th showing of each case is "occasion" j):

- the mean of the Pearson correlations over every pair of presentations;
- ICC(A,1) and ICC(C,1) of the presentations treated as occasions (McGraw & Wong
  1996, two-way model), with their F-based intervals (Table 7 there; Satterthwaite
  degrees of freedom for the A form).

Under parallel presentations (one variance for every showing) the mean pairwise r and
ICC(C,1) estimate the same correlation of two showings, and the audit gives the mean r
the F interval of ICC(C,1): in benchmarks/bench_presentations.py (14 cases x 10
showings) that interval covered 95.1% of 1,160 raters, while a BCa bootstrap over cases
of the mean r itself (``n_boot`` > 0, Efron 1987; kept for that comparison) covered 92.5%
and the percentile bootstrap less.

A rater whose repeated cases were not all shown equally often gets the block that
uses the most judgments: the first ``k`` presentations of every case shown at least
``k`` times, ``k >= 2`` chosen to maximise ``k x cases`` (ties: more cases).

Raters with the same block shape are computed together as one (raters, cases,
presentations) array, and the bootstrap draws for all of them at once: no loop of a
fitting routine over raters.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import f as f_dist
from scipy.stats import norm

from ..result_base import ResultMixin

MEASURE_FIRST_REPEAT = "first_repeat_r"     # r between the first judgment and its repeat
MEASURE_MEAN_PAIRWISE = "mean_pairwise_r"   # mean r over every pair of presentations
BOOT_CI = "BCa bootstrap over cases (the same presentations kept; Efron 1987)"
R_CI = ("F interval of ICC(C,1) over the showings (McGraw & Wong 1996, Table 7), which estimates the "
        "same correlation of two showings")
F_CI = "F distribution (McGraw & Wong 1996, Table 7; Satterthwaite df for ICC(A,1))"
MIN_BLOCK_CASES = 4   # the F intervals and a correlation need a few cases (r needs 3; F needs n - 1 > 2)


@dataclass(frozen=True)
class PresentationConsistency(ResultMixin):
    """One rater's consistency over a complete block of cases x presentations."""

    rater: str
    n_cases: int               # cases in the block
    n_presentations: int       # presentations per case in the block (k)
    n_presentation_pairs: int  # k (k - 1) / 2
    mean_r: float
    mean_r_ci_low: float       # BCa over cases when n_boot > 0, else NaN
    mean_r_ci_high: float
    icc_a1: float
    icc_a1_ci_low: float
    icc_a1_ci_high: float
    icc_c1: float
    icc_c1_ci_low: float
    icc_c1_ci_high: float
    f_c1: float                # MSR / MSE, the F statistic behind ICC(C,1)


def choose_block(counts: np.ndarray) -> int:
    """The presentations per case ``k`` of the block using the most judgments.

    ``counts`` holds each repeated case's number of presentations; 0 when fewer than
    two cases were shown twice or more.
    """
    counts = np.asarray(counts, dtype=int)
    counts = counts[counts >= 2]
    if len(counts) == 0:
        return 0
    best_k, best_used, best_cases = 0, -1, -1
    for k in range(2, int(counts.max()) + 1):
        cases = int((counts >= k).sum())
        used = k * cases
        if used > best_used or (used == best_used and cases > best_cases):
            best_k, best_used, best_cases = k, used, cases
    return best_k


def presentation_blocks(presentations: pd.DataFrame) -> dict[str, np.ndarray]:
    """Each rater's (cases x k) block of judgments, cases in the order of their ids.

    One sort of the whole table, then a reshape per block shape: the rows of a kept
    (rater, case) are its presentations 0..k-1, so sorted they fill the block in order.
    """
    blocks: dict[str, np.ndarray] = {}
    if presentations.empty:
        return blocks
    data = presentations[["rater", "case", "nth", "judgment"]].astype({"rater": str, "case": str})
    shown = data.groupby(["rater", "case"], sort=True).size()
    k_of: dict[str, int] = {}
    for rater, counts in shown.groupby(level="rater", sort=True):
        k_of[str(rater)] = choose_block(counts.to_numpy())
    k = data["rater"].map(k_of).to_numpy()
    case_shown = pd.Series(shown.to_numpy(), index=shown.index)
    per_row = case_shown.reindex(pd.MultiIndex.from_frame(data[["rater", "case"]])).to_numpy()
    kept = data.loc[(k >= 2) & (per_row >= k) & (data["nth"].to_numpy() < k)]
    kept = kept.sort_values(["rater", "case", "nth"], kind="mergesort")
    n_cases = kept.groupby("rater", sort=True)["case"].nunique()
    values = kept["judgment"].to_numpy(dtype=float)
    start = 0
    for rater, n in n_cases.items():
        size = int(n) * k_of[rater]
        if n >= MIN_BLOCK_CASES:
            blocks[rater] = values[start:start + size].reshape(int(n), k_of[rater])
        start += size
    return blocks


def mean_pairwise_r(x: np.ndarray) -> np.ndarray:
    """Mean Pearson r over every pair of columns, for each ``(..., n, k)`` block.

    A pair with a constant column has no r and is left out of the mean; NaN when no
    pair has one.
    """
    x = np.asarray(x, dtype=float)
    centred = x - x.mean(axis=-2, keepdims=True)
    cross = np.einsum("...ij,...il->...jl", centred, centred)
    sd = np.sqrt(np.einsum("...jj->...j", cross))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cross / (sd[..., :, None] * sd[..., None, :])
    k = x.shape[-1]
    upper = np.triu_indices(k, 1)
    pairs = corr[..., upper[0], upper[1]]
    ok = np.isfinite(pairs)
    count = ok.sum(axis=-1)
    total = np.where(ok, pairs, 0.0).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / count, np.nan)


def two_way_icc(x: np.ndarray, *, confidence: float = 0.95) -> dict[str, np.ndarray]:
    """ICC(A,1) and ICC(C,1) with F-based intervals for each ``(G, n, k)`` block.

    The formulas of :func:`calibrate.agreement.icc.icc_anova` (McGraw & Wong 1996,
    Tables 4 and 7), vectorized over the first axis.
    """
    x = np.asarray(x, dtype=float)
    _, n, k = x.shape
    grand = x.mean(axis=(1, 2))
    row = x.mean(axis=2)
    col = x.mean(axis=1)
    ss_total = ((x - grand[:, None, None]) ** 2).sum(axis=(1, 2))
    ss_rows = k * ((row - grand[:, None]) ** 2).sum(axis=1)
    ss_cols = n * ((col - grand[:, None]) ** 2).sum(axis=1)
    ss_err = ss_total - ss_rows - ss_cols
    msr = ss_rows / (n - 1)
    msc = ss_cols / (k - 1)
    mse = ss_err / ((n - 1) * (k - 1))
    tail = 0.5 + confidence / 2.0
    out: dict[str, np.ndarray] = {}
    with np.errstate(invalid="ignore", divide="ignore"):
        a1 = (msr - mse) / (msr + (k - 1) * mse + k * (msc - mse) / n)
        c1 = (msr - mse) / (msr + (k - 1) * mse)
        f_obs = msr / mse
        f_low = f_obs / f_dist.ppf(tail, n - 1, (n - 1) * (k - 1))
        f_high = f_obs * f_dist.ppf(tail, (n - 1) * (k - 1), n - 1)
        out["c1"] = c1
        out["c1_low"] = (f_low - 1) / (f_low + k - 1)
        out["c1_high"] = (f_high - 1) / (f_high + k - 1)
        a = k * a1 / (n * (1 - a1))
        b = 1 + k * a1 * (n - 1) / (n * (1 - a1))
        v = (a * msc + b * mse) ** 2 / ((a * msc) ** 2 / (k - 1) + (b * mse) ** 2 / ((n - 1) * (k - 1)))
        fs_low = f_dist.ppf(tail, n - 1, v)
        fs_high = f_dist.ppf(tail, v, n - 1)
        out["a1"] = a1
        out["a1_low"] = n * (msr - fs_low * mse) / (fs_low * (k * msc + (k * n - k - n) * mse) + n * msr)
        out["a1_high"] = n * (fs_high * msr - mse) / (k * msc + (k * n - k - n) * mse + n * fs_high * msr)
        out["f_c1"] = f_obs
    return out


def spearman_brown(rho: float, m: float) -> float:
    """The reliability of a mean of ``m`` presentations whose single-presentation
    reliability is ``rho``: ``m rho / (1 + (m - 1) rho)`` (Spearman 1910; Brown 1910)."""
    if not (np.isfinite(rho) and np.isfinite(m)):
        return float("nan")
    denominator = 1.0 + (m - 1.0) * rho
    return float(m * rho / denominator) if denominator > 0 else float("nan")


def harmonic_presentations(shown: np.ndarray) -> float:
    """The harmonic mean of the presentations per case behind a policy fitted to case
    means: the mean's error variance is the average of ``sigma^2 / m_c``, so this is the
    ``m`` of one equivalent mean."""
    shown = np.asarray(shown, dtype=float)
    shown = shown[shown >= 1]
    return float(len(shown) / np.sum(1.0 / shown)) if len(shown) else float("nan")


def low_consistency_p(f_c1: float, n_cases: int, k: int, *, threshold: float = 0.70) -> float:
    """One-sided p-value of ``ICC(C,1) >= threshold`` against a lower value.

    Under the two-way normal model ``MSR/MSE * (1 - rho) / (1 + (k - 1) rho)`` follows
    F(n - 1, (n - 1)(k - 1)) (McGraw & Wong 1996, Table 8, case 3), so a small observed
    F is evidence of a consistency below ``threshold``. With ``k = 2`` the test is on the
    same correlation as Fisher's z of the two occasions.
    """
    if not (np.isfinite(f_c1) and n_cases >= 2 and k >= 2):
        return float("nan")
    scaled = f_c1 * (1 - threshold) / (1 + (k - 1) * threshold)
    return float(f_dist.cdf(scaled, n_cases - 1, (n_cases - 1) * (k - 1)))


def low_consistency_reach(n_cases: int, k: int, *, level: float, threshold: float = 0.70) -> float:
    """The largest ICC(C,1) that :func:`low_consistency_p` puts below ``level`` (-1: none)."""
    if not (n_cases >= 2 and k >= 2 and 0 < level < 1):
        return float("nan")
    f_crit = f_dist.ppf(level, n_cases - 1, (n_cases - 1) * (k - 1)) * (1 + (k - 1) * threshold) / (1 - threshold)
    reach = (f_crit - 1) / (f_crit + k - 1)
    return float(max(reach, -1.0))


RATERS_PER_CHUNK = 32   # bounds the (raters, draws, pairs) moment arrays to tens of MB


def _boot_mean_r(x: np.ndarray, draws: np.ndarray) -> np.ndarray:
    """The mean pairwise r of every bootstrap resample of cases, for every rater at once.

    A resample is a vector of case counts ``w``; its column means and cross-products are
    ``w @ x / n`` and ``w @ (x_j x_l) / n``, so no resampled copy of the data is built.
    Raters go in chunks so that memory stays bounded for large panels.
    """
    G, n, k = x.shape
    n_boot = draws.shape[0]
    weights = np.bincount((np.arange(n_boot)[:, None] * n + draws).ravel(),
                          minlength=n_boot * n).reshape(n_boot, n) / n
    centred = x - x.mean(axis=1, keepdims=True)   # shift-free moments, less cancellation
    j, m = np.triu_indices(k, 1)
    out = np.empty((G, n_boot))
    for start in range(0, G, RATERS_PER_CHUNK):
        xs = centred[start:start + RATERS_PER_CHUNK]
        mean = np.einsum("bn,gnk->gbk", weights, xs)                      # (g, B, k)
        square = np.einsum("bn,gnk->gbk", weights, xs * xs)               # (g, B, k)
        cross = np.einsum("bn,gnp->gbp", weights, xs[:, :, j] * xs[:, :, m])  # (g, B, pairs)
        var = square - mean * mean
        cov = cross - mean[..., j] * mean[..., m]
        # a constant column (variance 0 up to rounding) has no r, as in mean_pairwise_r
        scale = np.maximum(np.abs(xs).max(axis=(1, 2)), 1.0)[:, None, None] ** 2
        ok = (var[..., j] > 1e-12 * scale) & (var[..., m] > 1e-12 * scale)
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = np.where(ok, cov / np.sqrt(var[..., j] * var[..., m]), 0.0)
            count = ok.sum(axis=-1)
            out[start:start + len(xs)] = np.where(count > 0, corr.sum(axis=-1) / count, np.nan)
    return out


def _bca_interval(x: np.ndarray, estimate: np.ndarray, boot: np.ndarray, level: float
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Per rater, the BCa interval (Efron 1987) of the mean pairwise r from its draws over
    cases: bias correction from the share of draws below the estimate, acceleration from
    the jackknife over cases. A resample whose presentations are constant has no r and is
    left out; NaN when fewer than half the draws have one."""
    G, n, _ = x.shape
    jack = np.stack([mean_pairwise_r(np.delete(x, i, axis=1)) for i in range(n)], axis=1)  # (G, n)
    low = np.full(G, np.nan)
    high = np.full(G, np.nan)
    for g in range(G):
        finite = boot[g][np.isfinite(boot[g])]
        if len(finite) < boot.shape[1] / 2 or not np.isfinite(estimate[g]) or not np.isfinite(jack[g]).all():
            continue
        below = np.clip((finite < estimate[g]).mean(), 1.0 / len(finite), 1.0 - 1.0 / len(finite))
        z0 = norm.ppf(below)
        d = jack[g].mean() - jack[g]
        spread = (d**2).sum()
        a = (d**3).sum() / (6.0 * spread**1.5) if spread > 0 else 0.0
        ends = []
        for q in (level, 1.0 - level):
            zq = norm.ppf(q)
            ends.append(norm.cdf(z0 + (z0 + zq) / (1.0 - a * (z0 + zq))))
        low[g], high[g] = np.quantile(finite, ends)
    return low, high


def presentation_consistency(presentations: pd.DataFrame, *, rng: np.random.Generator | int | None = None,
                             n_boot: int = 0, confidence: float = 0.95
                             ) -> dict[str, PresentationConsistency]:
    """Every rater's consistency over all presentations (see the module notes).

    Parameters
    ----------
    presentations : DataFrame with ``rater``, ``case``, ``nth`` (0-based presentation)
        and ``judgment``; cases shown once may be left out.
    rng : seed or generator for the bootstrap over cases.
    n_boot : bootstrap resamples for a BCa interval of the mean pairwise r itself
        (``mean_r_ci_*``; 0, the default: none, NaN). The audit shows the F interval of
        ICC(C,1) beside the mean r instead (see the module notes).
    """
    rng = np.random.default_rng(rng)
    blocks = presentation_blocks(presentations)
    by_shape: dict[tuple[int, int], list[str]] = {}
    for rater, block in blocks.items():
        by_shape.setdefault(block.shape, []).append(rater)
    results: dict[str, PresentationConsistency] = {}
    level = (1.0 - confidence) / 2.0
    for (n, k), raters in sorted(by_shape.items()):
        x = np.stack([blocks[r] for r in raters])              # (G, n, k)
        mean_r = mean_pairwise_r(x)
        icc = two_way_icc(x, confidence=confidence)
        low = high = np.full(len(raters), np.nan)
        if n_boot > 0:
            draws = rng.integers(0, n, size=(n_boot, n))
            boot = _boot_mean_r(x, draws)                      # (G, n_boot)
            low, high = _bca_interval(x, mean_r, boot, level)
        for g, rater in enumerate(raters):
            results[rater] = PresentationConsistency(
                rater=rater, n_cases=n, n_presentations=k, n_presentation_pairs=k * (k - 1) // 2,
                mean_r=float(mean_r[g]), mean_r_ci_low=float(low[g]), mean_r_ci_high=float(high[g]),
                icc_a1=float(icc["a1"][g]), icc_a1_ci_low=float(icc["a1_low"][g]),
                icc_a1_ci_high=float(icc["a1_high"][g]),
                icc_c1=float(icc["c1"][g]), icc_c1_ci_low=float(icc["c1_low"][g]),
                icc_c1_ci_high=float(icc["c1_high"][g]), f_c1=float(icc["f_c1"][g]))
    return results
