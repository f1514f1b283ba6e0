"""Krippendorff (2011), "Computing Krippendorff's Alpha-Reliability": 4 coders x 12 units.

The data with missing values and the alphas (nominal .743, ordinal .815,
interval .849, ratio .797) as copied in the shared REFERENCE-DATA.md.
Unit 12 has one value and is not pairable.
"""

import numpy as np
import pandas as pd
import pytest

from calibrate.agreement.icc import krippendorff_alpha, panel_agreement

nan = np.nan
CODERS = np.array([
    [1, 2, 3, 3, 2, 1, 4, 1, 2, nan, nan, nan],
    [1, 2, 3, 3, 2, 2, 4, 1, 2, 5, nan, 3],
    [nan, 3, 3, 3, 2, 3, 4, 2, 2, 5, 1, nan],
    [1, 2, 3, 3, 2, 4, 4, 1, 2, 5, 1, nan],
])
PUBLISHED = {"nominal": 0.743, "ordinal": 0.815, "interval": 0.849, "ratio": 0.797}


@pytest.mark.parametrize("level", sorted(PUBLISHED))
def test_alpha_matches_published(level):
    units = np.tile(np.arange(12), 4)
    result = krippendorff_alpha(units, CODERS.ravel(), level=level)
    assert result.estimate == pytest.approx(PUBLISHED[level], abs=5e-4)
    assert result.n_cases == 11          # unit 12 is not pairable
    assert result.n == 40                # pairable values


@pytest.mark.parametrize("scale,level", [("ordinal", "ordinal"), ("binary", None)])
def test_panel_uses_the_scale_level(scale, level):
    rows = [(f"coder{a}", f"unit{u:02d}", CODERS[a, u])
            for a in range(4) for u in range(12) if np.isfinite(CODERS[a, u])]
    first = pd.DataFrame(rows, columns=["rater", "case", "judgment"])
    if scale == "binary":
        first["judgment"] = (first["judgment"] >= 3).astype(float)
        expected = krippendorff_alpha(first["case"], first["judgment"], level="nominal").estimate
    else:
        expected = PUBLISHED["ordinal"]
    result = panel_agreement(first, scale=scale, n_boot=200, rng=3)
    assert result.alpha.estimate == pytest.approx(expected, abs=5e-4)
    assert result.alpha.ci_low <= result.alpha.estimate <= result.alpha.ci_high
