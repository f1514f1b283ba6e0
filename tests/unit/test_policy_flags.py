"""The 'inconsistent' rule's panel reference: median of the other raters' lower ends.

Reference: numpy.median over the others, computed one rater at a time.
"""

from __future__ import annotations

import numpy as np
import pytest

from calibrate.policy.fit import _typical_lower_end_of_others


@pytest.mark.parametrize("size", [6, 7, 10, 11, 40])
def test_median_of_others_matches_a_direct_loop(size):
    rng = np.random.default_rng(size)
    lower = rng.random(size)
    lower[1] = np.nan
    lower[3] = lower[4]  # a tie
    ours = _typical_lower_end_of_others(lower)
    finite = np.flatnonzero(np.isfinite(lower))
    expected = [np.median(lower[finite[finite != g]]) for g in finite]
    np.testing.assert_allclose(ours[finite], expected, rtol=1e-15)
    assert np.isnan(ours[1])


def test_small_panels_have_no_panel_reference():
    assert np.isnan(_typical_lower_end_of_others(np.array([0.5, 0.6, 0.7, 0.8]))).all()


def _panel_with_noise(noise_sds, n_cases=120, seed=4):
    import pandas as pd

    from calibrate.data.cues import CueRule, build_cue_design

    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n_cases, 3))
    cases = pd.DataFrame(X, columns=["a", "b", "c"], index=[f"c{i}" for i in range(n_cases)])
    design = build_cue_design(cases, [CueRule("a"), CueRule("b"), CueRule("c")])
    rows = []
    for r, sd in enumerate(noise_sds):
        y = X @ np.array([1.0, 0.6, 0.3]) + rng.normal(0, sd, n_cases)
        rows += [{"rater": f"r{r}", "case": f"c{i}", "judgment": v} for i, v in enumerate(y)]
    return design, pd.DataFrame(rows)


def test_a_usual_rater_in_a_very_consistent_panel_is_not_called_inconsistent():
    # planted: five raters with R_s near .99 and one near .86 (about the usual level of expert
    # judges; Karelaia & Hogarth 2008, from memory), and one near .6
    from calibrate.policy.fit import fit_policies

    design, first = _panel_with_noise([0.1, 0.1, 0.1, 0.1, 0.1, 0.68, 1.45])
    policies = fit_policies(design, first, scale="continuous", n_boot=300, rng=2)
    r = {p.rater: p.r for p in policies.raters}
    assert 0.82 < r["r5"] < 0.90 and r["r6"] < 0.7
    assert "inconsistent" not in policies["r5"].flags
    assert "inconsistent" in policies["r6"].flags
