"""The 'inconsistent' rule's panel reference: median of the other raters' lower ends.

Reference: numpy.median over the others, computed one rater at a time.
"""

from __future__ import annotations

import numpy as np
import pytest

from calibrate.policy import _typical_lower_end_of_others


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
