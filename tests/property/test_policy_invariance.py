"""Properties a captured policy must have (hypothesis).

Exact identities of least squares (common practice, no single source): a
positive affine change of every judgment, a renaming of raters and a shuffled
row order leave R_s, standardized weights, importance and the cross-validated r
unchanged; raw weights scale with the judgments.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from calibrate.policy.fit import fit_policies
from tests.policy_panels import mixed_panel

DESIGN, FIRST = mixed_panel(seed=8, n_cases=60, n_raters=4)
BASE = fit_policies(DESIGN, FIRST, scale="continuous", n_boot=0)


@settings(max_examples=15, deadline=None)
@given(scale=st.floats(0.05, 20.0), shift=st.floats(-50.0, 50.0), seed=st.integers(0, 2**32 - 1))
def test_affine_judgments_rename_and_shuffle(scale, shift, seed):
    rng = np.random.default_rng(seed)
    changed = FIRST.sample(frac=1.0, random_state=rng.integers(2**31)).copy()
    changed["judgment"] = shift + scale * changed["judgment"]
    changed["rater"] = "z-" + changed["rater"]
    fitted = fit_policies(DESIGN, changed, scale="continuous", n_boot=0)
    for before in BASE.raters:
        after = fitted["z-" + before.rater]
        assert np.isclose(after.r, before.r, rtol=1e-9)
        assert np.isclose(after.r_cv, before.r_cv, rtol=1e-9)
        for c in DESIGN.columns:
            if np.isfinite(before.weights[c]):
                assert np.isclose(after.std_weights[c], before.std_weights[c], rtol=1e-7, atol=1e-12)
                assert np.isclose(after.weights[c], scale * before.weights[c], rtol=1e-7, atol=1e-12)
        for cue in DESIGN.cues:
            assert np.isclose(after.importance[cue], before.importance[cue], rtol=1e-7, atol=1e-12)
