"""Drift over the reading order: leniency, consistency, R_s by half, Holm flags."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.multitest import multipletests

from calibrate.consistency.reading_order import DRIFT_FLAG, drift
from calibrate.errors import DataError
from tests.disagreement_panels import case_pool

WEIGHTS = np.array([0.08, 0.5, 0.6, -0.4])


def ordered_panel(rng, design, *, n_raters=8, length=150, drift_of=(), amount=0.5,
                  noise=0.5, noise_growth_of=(), repeats=10, scale_points=False):
    """Every rater reads ``length`` files in random order, the last ``repeats`` shown twice.

    ``amount`` scale points are added linearly from the first to the last position for
    the raters in ``drift_of``; for raters in ``noise_growth_of`` the noise SD grows
    from 0.2 to 1.2 over the session.
    """
    X = design.matrix
    ids = np.asarray(design.case_ids)
    frames = []
    for r in range(n_raters):
        rows = rng.choice(X.shape[0], length - repeats, replace=False)
        rows = np.concatenate([rows, rng.choice(rows, repeats, replace=False)])
        rng.shuffle(rows)
        position = np.arange(length)
        sd = np.linspace(0.2, 1.2, length) if r in noise_growth_of else noise
        y = 4 + X[rows] @ WEIGHTS - 0.08 * 70 + sd * rng.standard_normal(length)
        if r in drift_of:
            y = y + amount * position / (length - 1)
        if scale_points:
            y = np.clip(np.round(y), 1, 7)
        frames.append(pd.DataFrame({"rater": f"reader{r:02d}", "case": ids[rows],
                                    "judgment": y, "position": position}))
    return pd.concat(frames, ignore_index=True)


def _setup(seed, **kwargs):
    rng = np.random.default_rng(seed)
    design = case_pool(rng, 300)
    return design, ordered_panel(rng, design, **kwargs)


def _with_cues(design, ordered):
    X = pd.DataFrame(design.matrix, index=list(design.case_ids),
                     columns=[f"x{j}" for j in range(design.n_columns)])
    return ordered.join(X, on="case")


def test_slopes_and_p_values_match_statsmodels_per_rater():
    # Reference: statsmodels OLS per rater of judgment ~ cues + position (leniency) and
    # of |residual| ~ position (consistency, Glejser 1969); 95% t intervals from conf_int.
    design, ordered = _setup(1, drift_of=(2,), noise_growth_of=(5,))
    result = drift(design, ordered, n_resamples=0)
    data = _with_cues(design, ordered)
    cues = [f"x{j}" for j in range(design.n_columns)]
    worst = 0.0
    for rater, part in data.groupby("rater"):
        ours = result.for_rater(rater)
        fit = sm.OLS(part.judgment, sm.add_constant(part[cues + ["position"]])).fit()
        span = part.position.max() - part.position.min()
        spread = sm.OLS(np.abs(fit.resid), sm.add_constant(part.position)).fit()
        low, high = fit.conf_int().loc["position"] * span
        checks = [(ours.slope, fit.params["position"]), (ours.se, fit.bse["position"]),
                  (ours.slope_per_session, fit.params["position"] * span),
                  (ours.ci_low, low), (ours.ci_high, high),
                  (ours.consistency_slope, spread.params["position"])]
        worst = max(worst, max(abs(a - b) for a, b in checks))
        assert ours.p_value == pytest.approx(fit.pvalues["position"], rel=1e-6, abs=1e-300)
        assert ours.consistency_p_value == pytest.approx(spread.pvalues["position"], rel=1e-6,
                                                         abs=1e-300)
    assert worst < 1e-10


def test_holm_across_raters_and_both_tests_matches_statsmodels():
    # Reference: statsmodels multipletests(method="holm") on the 2K raw p-values.
    design, ordered = _setup(2, drift_of=(0, 3), noise_growth_of=(6,))
    result = drift(design, ordered, n_resamples=0)
    raw = np.array([r.p_value for r in result.raters] + [r.consistency_p_value for r in result.raters])
    adjusted = multipletests(raw, method="holm")[1]
    ours = np.array([r.p_adjusted for r in result.raters]
                    + [r.consistency_p_adjusted for r in result.raters])
    assert np.max(np.abs(ours - adjusted)) < 1e-12
    for r in result.raters:
        assert r.flagged == (min(r.p_adjusted, r.consistency_p_adjusted) < 0.05)


def test_r_s_by_half_matches_statsmodels():
    # Reference: statsmodels OLS of judgment ~ cues on each half of the reading order.
    design, ordered = _setup(3, length=101)
    result = drift(design, ordered, n_resamples=0)
    data = _with_cues(design, ordered)
    cues = [f"x{j}" for j in range(design.n_columns)]
    for rater, part in data.groupby("rater"):
        part = part.sort_values("position")
        halves = (part.iloc[:51], part.iloc[51:])   # odd count: the middle file goes first
        r_s = [np.sqrt(sm.OLS(h.judgment, sm.add_constant(h[cues])).fit().rsquared) for h in halves]
        ours = result.for_rater(rater)
        assert (ours.n_first_half, ours.n_second_half) == (51, 50)
        assert ours.r_s_first_half == pytest.approx(r_s[0], abs=1e-10)
        assert ours.r_s_second_half == pytest.approx(r_s[1], abs=1e-10)


def test_drift_free_panels_rarely_flag_anyone():
    # Planted truth: no drift in 200 panels of 8 raters. Holm (1979) keeps the chance of
    # any flag in a panel at most alpha = 5%; allow two Monte Carlo standard errors.
    rng = np.random.default_rng(20261201)
    design = case_pool(rng, 300)
    any_flag, p_values = [], []
    for _ in range(200):
        result = drift(design, ordered_panel(rng, design), n_resamples=0)
        any_flag.append(bool(result.flagged_raters))
        p_values.extend(r.p_value for r in result.raters)
    rate = float(np.mean(any_flag))            # measured 0.045; KS p 0.08
    assert rate <= 0.05 + 2 * np.sqrt(0.05 * 0.95 / 200)
    assert stats.kstest(p_values, "uniform").pvalue > 0.01


def test_half_a_point_over_the_session_is_found_most_of_the_time():
    # Planted truth: one rater of eight drifts +0.5 scale points from first to last file
    # (noise SD 0.5, 150 judgments). Measured: found in 0.75 of 200 panels, another
    # rater flagged in 0.035, mean per-session slope 0.500.
    rng = np.random.default_rng(7)
    design = case_pool(rng, 300)
    found, others, estimates = [], [], []
    for _ in range(200):
        result = drift(design, ordered_panel(rng, design, drift_of=(0,)), n_resamples=0)
        found.append("reader00" in result.flagged_raters)
        others.append(any(r != "reader00" for r in result.flagged_raters))
        estimates.append(result.for_rater("reader00").slope_per_session)
    assert np.mean(found) > 0.5
    assert np.mean(others) <= 0.05 + 2 * np.sqrt(0.05 * 0.95 / 200)
    assert np.mean(estimates) == pytest.approx(0.5, abs=0.03)  # unbiased per-session slope


def test_strong_files_read_late_are_not_mistaken_for_drift():
    # Planted truth: no drift, but files are read from weakest to strongest. The judgment
    # alone trends upward; with the cues held constant the slope is near zero.
    rng = np.random.default_rng(5)
    design = case_pool(rng, 300, categorical=False)
    rows = np.argsort(design.matrix @ WEIGHTS[:2])[::2]
    y = design.matrix[rows] @ WEIGHTS[:2] + 0.5 * rng.standard_normal(rows.size)
    ordered = pd.DataFrame({"rater": "solo", "case": np.asarray(design.case_ids)[rows],
                            "judgment": y, "position": np.arange(rows.size)})
    naive = sm.OLS(y, sm.add_constant(np.arange(rows.size))).fit()
    assert naive.pvalues[1] < 1e-6
    ours = drift(design, ordered, n_resamples=0).for_rater("solo")
    assert not ours.flagged and ours.p_value > 0.01


def test_growing_noise_is_consistency_drift_with_falling_r_s():
    design, ordered = _setup(9, noise_growth_of=(4,), length=200)
    result = drift(design, ordered, rng=3, n_resamples=300)
    noisy = result.for_rater("reader04")
    assert noisy.flagged and noisy.reasons == ("consistency",)
    assert noisy.consistency_slope_per_session > 0
    assert noisy.r_s_change < 0 and noisy.r_s_change_ci_high < 0
    assert result.flagged_raters == ("reader04",)


def test_r_s_change_interval_covers_zero_without_drift():
    # Planted truth: R_s is the same in both halves. The 95% percentile interval should
    # cover 0 about 95% of the time; 160 intervals here (measured 0.93), 480 in a longer
    # run (0.94); the bound allows four Monte Carlo standard errors.
    rng = np.random.default_rng(17)
    design = case_pool(rng, 300)
    covered = []
    for k in range(20):
        result = drift(design, ordered_panel(rng, design, length=200), rng=k, n_resamples=200)
        covered.extend(r.r_s_change_ci_low < 0 < r.r_s_change_ci_high for r in result.raters)
    assert np.mean(covered) >= 0.95 - 4 * np.sqrt(0.05 * 0.95 / len(covered))


def test_ordinal_scale_drift_is_found_in_scale_points():
    design, ordered = _setup(12, drift_of=(1,), amount=1.0, length=200, scale_points=True)
    result = drift(design, ordered, n_resamples=0)
    assert result.flagged_raters == ("reader01",)
    assert result.for_rater("reader01").slope_per_session == pytest.approx(1.0, abs=0.35)


def test_rater_with_too_few_judgments_gets_nan_and_a_warning():
    design, ordered = _setup(4, n_raters=3)
    ordered = ordered[(ordered.rater != "reader02") | (ordered.position < 5)]
    result = drift(design, ordered, rng=1, n_resamples=50)
    short = result.for_rater("reader02")
    assert np.isnan(short.slope) and np.isnan(short.p_adjusted) and not short.flagged
    assert any("reader02" in w for w in result.warnings)
    assert np.isfinite(result.for_rater("reader00").p_adjusted)
    assert json.loads(json.dumps(result.to_dict()))["raters"]["reader02"]["slope"] is None


def test_to_dict_carries_the_results_json_keys():
    design, ordered = _setup(6, n_raters=3, drift_of=(0,), amount=2.0)
    result = drift(design, ordered, rng=8, n_resamples=100)
    entry = result.to_dict()["raters"]["reader00"]
    assert {"slope", "p_value", "p_adjusted", "flagged"} <= set(entry)
    assert entry["flagged"] is True and DRIFT_FLAG == "drift"
    assert len(result.to_frame()) == 3
    again = drift(design, ordered.sample(frac=1.0, random_state=2), rng=8, n_resamples=100)
    assert json.dumps(again.to_dict()) == json.dumps(result.to_dict())


@pytest.mark.parametrize("change, message", [
    (lambda f: f.drop(columns="position"), "lacks column"),
    (lambda f: f.assign(position=f.position.where(f.index != 3)), "reading position"),
    (lambda f: f.assign(case=f.case.where(f.index != 0, "nowhere")), "absent from the cue"),
])
def test_bad_input_raises_a_data_error(change, message):
    design, ordered = _setup(1, n_raters=2)
    with pytest.raises(DataError, match=message):
        drift(design, change(ordered))


def test_alpha_out_of_range_is_refused():
    design, ordered = _setup(1, n_raters=2)
    with pytest.raises(DataError, match="alpha"):
        drift(design, ordered, alpha=5)


def test_batched_bootstrap_resamples_match_statsmodels_refits(monkeypatch):
    # Reference: the same bootstrap draws replayed by hand, each resampled half refitted
    # with statsmodels OLS; R_s = sqrt(R^2).
    import calibrate.consistency.reading_order as module

    rng = np.random.default_rng(0)
    sizes = np.array([20, 19, 25, 24, 18, 18])
    cell = np.repeat(np.arange(6), sizes)
    position = np.concatenate([np.arange(s) for s in sizes]).astype(float)
    X = rng.normal(size=(cell.size, 2)) * [8, 1] + [70, 3]
    y = X @ [0.1, 0.5] + rng.normal(size=cell.size)
    seen = []
    original = module._r_s_stack_last
    monkeypatch.setattr(module, "_r_s_stack_last", lambda S, n, p: seen.append(original(S, n, p)) or seen[-1])
    module._bootstrap_r_s_change(np.column_stack([X, y]), cell, position, 6, 2, 4,
                                 np.random.default_rng(5), chunk=4)
    batched = seen[0].reshape(6, 4).T   # the bootstrap lays the groups out cell by cell
    u = np.random.default_rng(5).random((4, 6, sizes.max()))
    worst = 0.0
    for b in range(4):
        for c in range(6):
            pick = np.minimum((u[b, c, :sizes[c]] * sizes[c]).astype(int), sizes[c] - 1)
            rows = np.nonzero(cell == c)[0][pick]
            fit = sm.OLS(y[rows], sm.add_constant(X[rows])).fit()
            worst = max(worst, abs(np.sqrt(fit.rsquared) - batched[b, c]))
    assert worst < 1e-10
