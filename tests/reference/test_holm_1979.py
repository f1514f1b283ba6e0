"""Holm (1979), Scandinavian Journal of Statistics 6:65-70: the step-down adjustment."""

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from calibrate.pvalues import holm_adjust


def test_small_example_by_hand():
    # Hand arithmetic from Holm's rule: sorted .005 .01 .03 .04 times 4 3 2 1 gives
    # .02 .03 .06 .04, and the running maximum makes the last one .06.
    assert holm_adjust(np.array([0.01, 0.04, 0.03, 0.005])) == pytest.approx([0.03, 0.06, 0.06, 0.02])


def test_matches_statsmodels_with_missing_values():
    # Independent reference: statsmodels.stats.multitest.multipletests(method="holm").
    rng = np.random.default_rng(0)
    p = rng.random(200) ** 3
    p[::17] = np.nan
    ours = holm_adjust(p)
    finite = np.isfinite(p)
    reference = multipletests(p[finite], method="holm")[1]
    assert np.isnan(ours[~finite]).all()
    assert np.max(np.abs(ours[finite] - reference)) < 1e-14
