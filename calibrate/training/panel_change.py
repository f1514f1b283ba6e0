"""The panel between phases: agreement, convergence of weight profiles, groups, cue shift.

Pure statistics on one phase's judgments or on the per-rater draws that
:mod:`calibrate.training.phases` already made; nothing here writes or words a report.

- Agreement: ICC(A,1) and Krippendorff's alpha of each phase with the parametric
  bootstrap of the crossed random-effects model that the audit uses for its intervals
  (new cases, raters and residuals on the same design); the change gets the percentile
  interval of the difference of independent draws of the two phases.
- Convergence: the spread of the raters' weight profiles, the root of the mean over pairs
  of raters of the squared distance between their cue-share profiles (the sum over cues
  of the squared share differences; 0 = same profile), and the root of the raters' mean
  squared distance to the rubric's shares: a typical distance in share units. Noise in
  each rater's fitted shares adds to every squared distance, on average the trace of the
  rater's share sampling covariance V_i (E||s_i - s_j||^2 = ||d_ij||^2 + tr V_i + tr V_j
  for independent errors); that part, with V_i from the rater's own case resamples, is
  taken off before the root, so the figures estimate the spread of the raters' true
  profiles. The change gets each phase's normal interval on the squared scale, rooted and
  combined by Zou's (2007) method (raters held fixed, each rater's cases resampled on
  their own). The uncorrected half-summed absolute differences it replaces held the true
  change in only 89-91% of simulated pairs of phases, since a noisier phase looked more
  spread.
- Groups: the audit's grouping (:func:`calibrate.panel.group_raters`) per phase, and the
  adjusted Rand index between the groupings of two phases.
"""

from __future__ import annotations

import math
import warnings

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
    return _mean_over_pairs(shares, lambda diff: 0.5 * np.abs(diff).sum(axis=-1))


def _mean_over_pairs(shares: np.ndarray, distance) -> np.ndarray:
    """Mean over pairs of raters of ``distance(s_j - s_i)``, pairs with a missing profile
    left out; shares (G, ..., C) -> (...,)."""
    G = shares.shape[0]
    total = 0.0
    count = 0.0
    for i in range(G):  # G is a panel (tens of raters); each step is vectorized over draws
        d = distance(shares[i + 1:] - shares[i])
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


def _share_noise(share_draws: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """tr V_i (G,) and tr(V_i V_j) (G, G), V_i the covariance of rater i's cue shares over
    their resamples (resamples with a missing share left out)."""
    ok = np.isfinite(share_draws).all(axis=-1)  # (G, B)
    count = ok.sum(axis=1)
    x = np.where(ok[..., None], share_draws, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = x.sum(axis=1) / count[:, None]
        dev = np.where(ok[..., None], share_draws - mean[:, None, :], 0.0)
        V = np.einsum("gbc,gbd->gcd", dev, dev) / (count - 1)[:, None, None]
    return np.trace(V, axis1=1, axis2=2), np.einsum("icd,jdc->ij", V, V)


def _live(shares: np.ndarray) -> np.ndarray:
    """(G,) raters whose estimated profile is complete."""
    return np.isfinite(shares).all(axis=-1)


def pairwise_squared_distance(shares: np.ndarray) -> np.ndarray:
    """Mean over pairs of raters of the squared distance between their cue-share profiles.

    shares : (G, ..., C) -> (...,); raters with a missing profile are left out.
    """
    return _mean_over_pairs(shares, lambda diff: (diff ** 2).sum(axis=-1))


def squared_distance_to_rubric(shares: np.ndarray, rubric_share: np.ndarray) -> np.ndarray:
    """Mean over raters of the squared distance of their cue shares to the rubric's."""
    with np.errstate(invalid="ignore"):
        d = ((shares - rubric_share) ** 2).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(np.where(np.isfinite(d), d, np.nan), axis=0)


def _corrected(estimate: float, raw_draws: np.ndarray, noise: float, noise_of_noise: float):
    """(estimate less the noise, draws): the draws centred on it, with the variance of the
    raw draws less 2 tr(AVAV) (see :func:`noise_corrected_spread`)."""
    raw_draws = np.asarray(raw_draws, dtype=float)
    ok = np.isfinite(raw_draws)
    if ok.sum() < 3:
        return estimate - noise, np.full(raw_draws.shape, np.nan)
    mean, var = float(raw_draws[ok].mean()), float(raw_draws[ok].var(ddof=1))
    shrink = math.sqrt(max(1.0 - 2.0 * noise_of_noise / var, 0.0)) if var > 0 else 0.0
    return estimate - noise, estimate - noise + (raw_draws - mean) * shrink


def noise_corrected_spread(shares: np.ndarray, share_draws: np.ndarray) -> tuple[float, np.ndarray]:
    """The spread of the raters' true profiles on the squared scale, with draws for its SE.

    shares (G, C), share_draws (G, B, C) -> (estimate, draws). The estimate is
    :func:`pairwise_squared_distance` less the mean over pairs of tr V_i + tr V_j (twice
    the raters' mean tr V_i), which noise in the fitted shares adds on average. The
    figure is a quadratic form s'As of the stacked shares (A = L / P, L the complete
    graph's Laplacian, P the pairs), whose resamples, drawn around a noisy estimate,
    vary by 4 tr(AVAV) more than the estimate does (second-order terms, V block-diagonal);
    the draws keep the raw draws' spread less half that, 2 tr(AVAV): the choice measured
    nearest 95% (taking off all of it covered 86-92% of true changes, none of it 96-98%;
    benchmarks/bench_training_panel.py, DEVELOPERS.md).
    """
    live = _live(shares)
    k = int(live.sum())
    if k < 2:
        return math.nan, np.full(share_draws.shape[1], np.nan)
    tr_v, tr_vv = _share_noise(share_draws[live])
    pairs = k * (k - 1) / 2.0
    noise_of_noise = ((k - 1) ** 2 * np.trace(tr_vv) + (tr_vv.sum() - np.trace(tr_vv))) / pairs ** 2
    return _corrected(float(pairwise_squared_distance(shares[live])), pairwise_squared_distance(share_draws[live]),
                      2.0 * float(np.mean(tr_v)), float(noise_of_noise))


def noise_corrected_distance_to_rubric(shares: np.ndarray, share_draws: np.ndarray,
                                       rubric_share: np.ndarray) -> tuple[float, np.ndarray]:
    """The raters' mean squared distance of their true profiles to the rubric:
    :func:`squared_distance_to_rubric` less the raters' mean tr V_i, draws as in
    :func:`noise_corrected_spread` (here A = I / G, so tr(AVAV) = sum tr V_i^2 / G^2)."""
    live = _live(shares)
    k = int(live.sum())
    if k < 1:
        return math.nan, np.full(share_draws.shape[1], np.nan)
    tr_v, tr_vv = _share_noise(share_draws[live])
    return _corrected(float(squared_distance_to_rubric(shares[live], rubric_share)),
                      squared_distance_to_rubric(share_draws[live], rubric_share),
                      float(np.mean(tr_v)), float(np.trace(tr_vv)) / k ** 2)


def root_distance(squared: float) -> float:
    """The figure shown: the root of a noise-corrected mean squared distance (a typical
    distance in share units), 0 where the correction leaves nothing."""
    return math.sqrt(squared) if squared > 0 else (0.0 if math.isfinite(squared) else math.nan)


def _root_limits(estimate, se, q):
    """A phase's interval of the root figure: the normal interval on the squared scale,
    cut at zero, then rooted."""
    return (np.sqrt(np.maximum(estimate - q * se, 0.0)), np.sqrt(np.maximum(estimate + q * se, 0.0)))


def root_distance_change(point_a: float, draws_a: np.ndarray, point_b: float, draws_b: np.ndarray,
                         confidence: float) -> dict:
    """Change in the root figure from phase a to b, with its interval and p-value.

    point_* are noise-corrected squared figures and draws_* their draws (SE = their SD).
    Each phase gets a normal interval on the squared scale, cut at zero and rooted; the two
    are combined by Zou's (2007) method of variance estimates recovery, as for the change
    in R_s; the p-value inverts the same interval (the level at which a limit reaches 0).
    """
    se = [float(np.nanstd(d, ddof=1)) if np.isfinite(d).sum() > 20 else math.nan for d in (draws_a, draws_b)]
    ra, rb = root_distance(point_a), root_distance(point_b)
    nan = {"delta": rb - ra, "ci_low": math.nan, "ci_high": math.nan, "p_value": math.nan,
           "detectable": math.nan}
    if not all(math.isfinite(v) for v in (point_a, point_b, *se)):
        return nan
    d = rb - ra

    def limits(q):
        la, ua = _root_limits(point_a, se[0], q)
        lb, ub = _root_limits(point_b, se[1], q)
        return (d - np.sqrt((rb - lb) ** 2 + (ua - ra) ** 2), d + np.sqrt((ub - rb) ** 2 + (ra - la) ** 2))

    q = stats.norm.ppf(0.5 + confidence / 2)
    low, high = (float(v) for v in limits(q))
    if d == 0:
        p = 1.0
    else:
        lo_q, hi_q = 0.0, 40.0
        for _ in range(60):
            mid = (lo_q + hi_q) / 2
            l_mid, h_mid = limits(mid)
            if (l_mid > 0) if d > 0 else (h_mid < 0):
                lo_q = mid
            else:
                hi_q = mid
        p = float(2 * stats.norm.sf((lo_q + hi_q) / 2))
    # SE of the change read from the interval (width / 2q), for the detectable change
    return {"delta": d, "ci_low": low, "ci_high": high, "p_value": p,
            "detectable": detectable_change((high - low) / (2 * q))}


def draw_change(point_a: float, draws_a: np.ndarray, point_b: float, draws_b: np.ndarray,
                confidence: float) -> dict:
    """Change b - a of a panel figure with the percentile interval of independent draws."""
    low, high, p = bootstrap_difference(np.asarray(draws_a, float)[None, :],
                                        np.asarray(draws_b, float)[None, :], confidence)
    diff = np.asarray(draws_b, float) - np.asarray(draws_a, float)
    se = float(np.nanstd(diff, ddof=1)) if np.isfinite(diff).sum() > 2 else math.nan
    return {"delta": point_b - point_a, "ci_low": float(low[0]), "ci_high": float(high[0]),
            "p_value": float(p[0]), "detectable": detectable_change(se)}
