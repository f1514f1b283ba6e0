"""Invariances of the rater-pairs view, policy homogeneity and drift (hypothesis)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from calibrate.consistency.reading_order import drift
from calibrate.panel.pairs import compare_rater_pairs, policy_homogeneity
from tests.disagreement_panels import case_pool, first_judgments

WEIGHTS = np.array([[0.10, 0.5, 0.8, -0.6], [0.02, 1.0, 0.1, -0.1],
                    [0.08, 0.2, 1.2, -1.0], [0.12, 0.6, 0.0, 0.0]])

seeds = st.integers(0, 2**31 - 1)
scales = st.floats(0.1, 20.0)
shifts = st.floats(-50.0, 50.0)


def _panel(seed):
    rng = np.random.default_rng(seed)
    design = case_pool(rng, 80)
    return design, first_judgments(rng, design, per_rater=50, weights=WEIGHTS,
                                   noise=np.array([0.3, 0.7, 1.0, 1.5]))


def _affine_per_rater(first, scale, shift):
    """A positive affine change of each rater's judgments, different per rater."""
    factor = first.rater.str[-1].astype(int) + 1
    return first.assign(judgment=first.judgment * scale * factor + shift * factor)


@settings(max_examples=15, deadline=None)
@given(seed=seeds, scale=scales, shift=shifts)
def test_rater_pairs_ignores_positive_affine_changes_of_each_rater(seed, scale, shift):
    # Correlations, R_s, G and C are invariant to a positive affine change of a variable.
    design, first = _panel(seed)
    before = compare_rater_pairs(design, first).to_frame()
    after = compare_rater_pairs(design, _affine_per_rater(first, scale, shift)).to_frame()
    for column in ("r", "g", "c", "r_s_a", "r_s_b"):
        np.testing.assert_allclose(after[column], before[column], rtol=0, atol=1e-8)


@settings(max_examples=15, deadline=None)
@given(seed=seeds)
def test_rater_pairs_follows_rater_renaming(seed):
    design, first = _panel(seed)
    mapping = {f"reader{r:03d}": f"z{9 - r}" for r in range(4)}
    renamed = compare_rater_pairs(design, first.assign(rater=first.rater.map(mapping)))
    original = {frozenset((p.rater_a, p.rater_b)): p for p in compare_rater_pairs(design, first).pairs}
    for pair in renamed.pairs:
        back = {v: k for k, v in mapping.items()}
        twin = original[frozenset((back[pair.rater_a], back[pair.rater_b]))]
        # a pair whose shared cases leave a dummy constant gets NaN either way (issue 12, item 7)
        assert np.isclose(pair.r, twin.r, rtol=0, atol=1e-12, equal_nan=True)
        assert np.isclose(pair.g, twin.g, rtol=0, atol=1e-12, equal_nan=True)
        # swapping the pair swaps the consistencies and the sign of the mean gap
        if back[pair.rater_a] != twin.rater_a:
            assert np.isclose(pair.r_s_a, twin.r_s_b, rtol=0, atol=1e-12, equal_nan=True)
            assert np.isclose(pair.mean_gap, -twin.mean_gap, rtol=0, atol=1e-9, equal_nan=True)


@settings(max_examples=10, deadline=None)
@given(seed=seeds, scale=scales, shift=shifts)
def test_homogeneity_ignores_one_common_affine_change(seed, scale, shift):
    # The same positive affine change for every rater leaves both tests unchanged; with
    # the same seed, the bootstrap draws are the same standardised draws.
    design, first = _panel(seed)
    before = policy_homogeneity(design, first, rng=1, n_resamples=199)
    after = policy_homogeneity(design, first.assign(judgment=first.judgment * scale + shift),
                               rng=1, n_resamples=199)
    assert abs(after.statistic - before.statistic) <= 1e-6 * max(1.0, before.statistic)
    assert abs(after.classical_statistic - before.classical_statistic) <= 1e-6 * max(
        1.0, before.classical_statistic)
    assert after.p_value == before.p_value


def _ordered(seed):
    rng = np.random.default_rng(seed)
    design = case_pool(rng, 120)
    first = first_judgments(rng, design, per_rater=60, weights=WEIGHTS, noise=0.6)
    position = first.groupby("rater").cumcount()
    trend = 0.01 * position * (first.rater == "reader001")
    return design, first.assign(judgment=first.judgment + trend, position=position)


@settings(max_examples=15, deadline=None)
@given(seed=seeds, scale=scales, shift=shifts, order_seed=seeds)
def test_drift_scales_with_the_judgments_and_ignores_row_order(seed, scale, shift, order_seed):
    design, ordered = _ordered(seed)
    before = drift(design, ordered, n_resamples=0).to_frame()
    changed = ordered.assign(judgment=ordered.judgment * scale + shift)
    after = drift(design, changed.sample(frac=1.0, random_state=order_seed % 2**32),
                  n_resamples=0).to_frame()
    np.testing.assert_allclose(after.slope, before.slope * scale, rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(after.consistency_slope, before.consistency_slope * scale,
                               rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(after.p_value, before.p_value, rtol=1e-6, atol=1e-14)
    np.testing.assert_allclose(after.r_s_first_half, before.r_s_first_half, atol=1e-9)
    pd.testing.assert_series_equal(after.flagged, before.flagged)
