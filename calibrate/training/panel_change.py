"""The panel between phases: agreement, convergence of weight profiles, groups, cue shift.

Pure statistics on one phase's judgments or on the per-rater draws that
:mod:`calibrate.training.phases` already made; nothing here writes or words a report.

- Agreement: ICC(A,1) and Krippendorff's alpha of each phase with the parametric
  bootstrap of the crossed random-effects model that the audit uses for its intervals
  (new cases, raters and residuals on the same design); the change gets the percentile
  interval of the difference of independent draws of the two phases.
- Convergence: the spread of the raters' weight profiles, the mean over pairs of raters
  of half the summed absolute difference of their cue shares (the same distance as
  misallocation, 0 = same profile, 1 = no cue in common), and the mean distance of the
  raters' profiles to the rubric (their mean misallocation). Each rater's cases are
  resampled on their own (the per-rater draws), so the interval carries each rater's
  sampling error with the raters held fixed.
- Groups: the audit's grouping (:func:`calibrate.panel.group_raters`) per phase, and the
  adjusted Rand index between the groupings of two phases.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from ..agreement.icc import (ICC_FORMS, LEVEL_OF_SCALE, alpha_parametric_draws, icc_from_components,
                             icc_parametric_draws, krippendorff_alpha)
from ..agreement.offsets import check_first, crossed_layout, fit_additive
from ..agreement.readers import henderson_components
from .tests_of_change import bootstrap_difference

# The ICC form followed across phases: one rater's absolute agreement (ICC(A,1)): a
# training that aligns severity as well as ordering should move it.
ICC_FORM = "a1"
# z_{0.975} + z_{0.80}: a true change this many SEs away from zero is detected 80% of the
# time by a two-sided 5% normal test (the usual power identity).
DETECTABLE_Z = float(stats.norm.ppf(0.975) + stats.norm.ppf(0.80))


def detectable_change(se, df: float | None = None) -> float:
    """Smallest change detected with 80% power by a two-sided 5% test whose SE is ``se``:
    (z_{.975} + z_{.80}) SE = 2.80 SE for a normal test, (t_{.975,df} + t_{.80,df}) SE for a t test."""
    se = float(se)
    if not math.isfinite(se) or se <= 0:
        return math.nan
    if df is None or not math.isfinite(df):
        return DETECTABLE_Z * se
    return float(stats.t.ppf(0.975, df) + stats.t.ppf(0.80, df)) * se


def detectable_correlation_change(r0: float, se_z: float) -> float:
    """Smallest rise of a correlation from ``r0`` that a two-sided 5% test on Fisher's z
    scale with SE ``se_z`` detects with 80% power: tanh(atanh r0 + 2.80 se_z) - r0 (the
    power identity on the z scale, moved back to the r scale; a rise because every
    correlation here is better higher)."""
    if not (math.isfinite(r0) and math.isfinite(se_z)) or se_z <= 0:
        return math.nan
    z0 = math.atanh(min(max(r0, -0.999999), 0.999999))
    return math.tanh(z0 + DETECTABLE_Z * se_z) - r0


def agreement_draws(first: pd.DataFrame, *, scale: str, scale_min, scale_max, n_boot: int,
                    rng: np.random.Generator) -> dict:
    """ICC(A,1) and alpha of one phase with their parametric-bootstrap draws.

    Returns ``{"icc": (estimate, draws), "alpha": (estimate, draws)}``; NaN (and NaN
    draws) when no case was read by two raters.
    """
    nan = (math.nan, np.full(n_boot, np.nan))
    data = check_first(first)
    layout = crossed_layout(data)
    readers = layout.readers_per_case()
    if layout.n_raters < 2 or not (readers >= 2).any():
        return {"icc": nan, "alpha": nan}
    k = float(readers.size / np.sum(1.0 / readers))
    comps = henderson_components(fit_additive(layout))
    form = [f for f, _ in ICC_FORMS].index(ICC_FORM)
    icc_point = float(icc_from_components(comps, k)[ICC_FORM])
    icc_draws = icc_parametric_draws(layout, comps, k, n_boot, rng)[:, form]
    level = LEVEL_OF_SCALE[scale]
    alpha_point = krippendorff_alpha(layout.case_index, layout.y, level=level).estimate
    categories = None
    if scale != "continuous":
        # as the audit: simulated judgments moved to the nearest scale value, with the
        # rounding variance (step^2 / 12) taken out of the residual first
        categories = np.unique(layout.y)
        if (scale_min is not None and scale_max is not None
                and np.all(categories == np.round(categories))):
            categories = np.arange(np.ceil(scale_min), np.floor(scale_max) + 1.0)
    alpha_comps = comps
    if categories is not None and categories.size > 1:
        from dataclasses import replace

        step = float(np.min(np.diff(categories)))
        alpha_comps = replace(comps, residual=max(float(comps.residual) - step ** 2 / 12.0, 0.0))
    a_draws = alpha_parametric_draws(layout, alpha_comps, level, categories, n_boot, rng)
    return {"icc": (icc_point, icc_draws), "alpha": (float(alpha_point), a_draws)}


def pairwise_distance(shares: np.ndarray) -> np.ndarray:
    """Mean over pairs of raters of half the summed absolute difference of cue shares.

    shares : (G, ..., C) -> (...,); raters with a missing profile are left out.
    """
    G = shares.shape[0]
    total = 0.0
    count = 0.0
    for i in range(G):  # G is a panel (tens of raters); each step is vectorized over draws
        d = 0.5 * np.abs(shares[i + 1:] - shares[i]).sum(axis=-1)
        ok = np.isfinite(d)
        total = total + np.where(ok, d, 0.0).sum(axis=0)
        count = count + ok.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.asarray(count) > 0, total / np.maximum(count, 1), np.nan)


def distance_to_rubric(shares: np.ndarray, rubric_share: np.ndarray) -> np.ndarray:
    """Mean over raters of half the summed absolute difference to the rubric's shares."""
    with np.errstate(invalid="ignore"):
        d = 0.5 * np.abs(shares - rubric_share).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.nanmean(np.where(np.isfinite(d), d, np.nan), axis=0)


def draw_change(point_a: float, draws_a: np.ndarray, point_b: float, draws_b: np.ndarray,
                confidence: float) -> dict:
    """Change b - a of a panel figure with the percentile interval of independent draws."""
    low, high, p = bootstrap_difference(np.asarray(draws_a, float)[None, :],
                                        np.asarray(draws_b, float)[None, :], confidence)
    diff = np.asarray(draws_b, float) - np.asarray(draws_a, float)
    se = float(np.nanstd(diff, ddof=1)) if np.isfinite(diff).sum() > 2 else math.nan
    return {"delta": point_b - point_a, "ci_low": float(low[0]), "ci_high": float(high[0]),
            "p_value": float(p[0]), "detectable": detectable_change(se)}
