"""The per-file view: adjusted scores, spread, files to read again."""

import numpy as np
import pytest
import statsmodels.formula.api as smf
from panel_simulation import simulate_panel

from scipy.stats import norm

from calibrate.agreement.files import change_probability, file_view
from calibrate.agreement.offsets import severity
from calibrate.errors import DataError
from tests.change_panels import one_panel


def test_adjusted_scores_equal_additive_model_case_effects():
    # statsmodels OLS judgment ~ C(case) + C(rater, Sum): mean of a case's fitted values plus
    # its mean residual equals mu + a_case with rater effects summing to zero
    first, _, _ = simulate_panel(n_raters=6, n_cases=30, readers=3, seed=14)
    view = file_view(first, severity(first, scale="continuous", scale_min=-4, scale_max=4))
    fit = smf.ols("judgment ~ C(case) + C(rater, Sum)", data=first).fit()
    frame = first.assign(fitted=fit.fittedvalues)
    names = [k for k in fit.params.index if k.startswith("C(rater")]
    effects = dict(zip(sorted(first["rater"].unique()),
                       list(fit.params[names]) + [-fit.params[names].sum()]))
    frame["rater_effect"] = frame["rater"].map(effects)
    expected = (frame["fitted"] - frame["rater_effect"]).groupby(frame["case"]).mean()
    ours = view.to_frame().set_index("case")["adjusted"]
    np.testing.assert_allclose(ours.loc[expected.index], expected, atol=1e-10)


def test_adjusted_scores_are_closer_to_truth_than_raw_means():
    # planted: strong rater offsets, 2 readers per file
    first, truth, _ = simulate_panel(n_raters=40, n_cases=1200, readers=2,
                                     rater_sd=0.8, noise_sd=0.4, seed=6)
    view = file_view(first, severity(first, scale="continuous", scale_min=-5, scale_max=5))
    frame = view.to_frame().sort_values("case")   # the table is ranked; the truth is in case order
    raw_err = np.mean((frame["raw_mean"] - truth) ** 2)
    adj_err = np.mean((frame["adjusted"] - truth) ** 2)
    assert adj_err < 0.7 * raw_err


def test_needs_another_read_rules():
    first, truth, _ = simulate_panel(n_raters=12, n_cases=200, readers=3, noise_sd=0.3, seed=2)
    # one file where the readers disagree wildly
    wild = first["case"] == "c00007"
    first.loc[wild, "judgment"] = [-3.0, 0.0, 3.0]
    sev = severity(first, scale="continuous", scale_min=-5, scale_max=5)
    view = file_view(first, sev, cut_off=0.0)
    rows = {f.case: f for f in view.files}
    assert "high_disagreement" in rows["c00007"].reasons
    assert rows["c00007"].spread_range == pytest.approx(6.0)
    for f in view.files:
        inside = abs(f.adjusted) < 1.959963984540054 * sev.residual_sd / np.sqrt(f.n_readers)
        assert f.near_cut_off == inside
        assert ("may_change" in f.reasons) == (f.change_probability >= 0.20)
    assert set(view.needs_another_read()) == {f.case for f in view.files if f.reasons}
    share = np.mean([("high_disagreement" in f.reasons) for f in view.files])
    assert share < 0.05       # the screen at p < 0.01 keeps the list short on a well-behaved panel
    # ranked: the most likely to change side first, in the list and in the table
    listed = [rows[c].change_probability for c in view.needs_another_read()]
    assert listed == sorted(listed, reverse=True)
    frame = view.to_frame()
    assert list(frame["change_rank"]) == list(range(1, len(frame) + 1))
    assert frame["change_probability"].is_monotonic_decreasing
    # the nearer the cut-off, the likelier a change (same number of readers)
    three = frame[frame["n_readers"] == 3]
    order = np.argsort(np.abs(three["adjusted"].to_numpy()))
    assert np.all(np.diff(three["change_probability"].to_numpy()[order]) <= 1e-12)


def test_change_probability_without_shrinkage_is_the_plain_normal_tail():
    """Identity: with a flat spread of true values (w = 1) a fresh reading z ~ N(m, s^2 (1 + 1/n))
    moves the mean across k when z passes (n + 1) k - n m."""
    m, n, k, s = np.array([0.1, -0.4, 0.9, 0.0]), np.array([2, 3, 5, 4]), 0.0, 0.7
    ours = change_probability(m, n, cut_off=k, residual_sd=s, mean=0.0, case_variance=1e12)
    expected = norm.cdf(-(n + 1) * np.abs(m - k) / (s * np.sqrt(1 + 1 / n)))
    np.testing.assert_allclose(ours, expected, rtol=1e-9)


def test_change_probability_is_the_chance_under_its_own_model():
    """Known parameters, the model itself simulated (no estimation): among files whose stated
    chance is near p, a fresh reading changes the decision in about p of them."""
    rng = np.random.default_rng(7)
    n_files, n, mu, tau, sigma, k = 400_000, 3, 0.2, 0.8, 0.6, 0.5
    theta = rng.normal(mu, tau, n_files)
    m = theta + rng.normal(0, sigma / np.sqrt(n), n_files)
    p = change_probability(m, np.full(n_files, n), cut_off=k, residual_sd=sigma, mean=mu,
                           case_variance=tau**2)
    after = (n * m + theta + rng.normal(0, sigma, n_files)) / (n + 1)
    changed = (after >= k) != (m >= k)
    for lo, hi in ((0.05, 0.15), (0.15, 0.25), (0.25, 0.35), (0.35, 0.45)):
        inside = (p >= lo) & (p < hi)
        assert inside.sum() > 2000
        assert abs(changed[inside].mean() - p[inside].mean()) < 0.02, (lo, hi)


def test_estimated_change_probability_is_calibrated_on_simulated_panels():
    """Small seeded version of benchmarks/bench_change_probability.py (which measures 200
    panels per setting): estimated variances and offsets, 1-7 rounding included. Files whose
    chance is stated as 0.25-0.35 changed side about 30% of the time with one fresh reader."""
    rng = np.random.default_rng(20261203)
    for scale in ("continuous", "ordinal"):
        parts = [one_panel(rng, readers=3, scale=scale) for _ in range(12)]
        p = np.concatenate([q for q, _ in parts])
        changed = np.concatenate([c for _, c in parts])
        near = (p >= 0.25) & (p < 0.35)
        assert near.sum() > 100
        assert abs(changed[near].mean() - 0.30) < 0.09, (scale, changed[near].mean())
        assert abs(changed.mean() - p.mean()) < 0.015


def test_severity_from_other_data_is_refused():
    first, _, _ = simulate_panel(n_raters=4, n_cases=20, readers=2, seed=0)
    other = first.assign(rater=first["rater"] + "x")
    with pytest.raises(DataError, match="no offset for rater"):
        file_view(first, severity(other, scale="continuous", scale_min=-5, scale_max=5))


def test_without_a_cut_off_there_is_no_change_probability():
    first, _, _ = simulate_panel(n_raters=6, n_cases=40, readers=3, seed=4)
    view = file_view(first, severity(first, scale="continuous", scale_min=-5, scale_max=5))
    assert all(np.isnan(f.change_probability) and "may_change" not in f.reasons for f in view.files)
