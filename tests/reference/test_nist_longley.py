"""NIST StRD Longley through the same batched path the audit uses.

Source: NIST Statistical Reference Datasets, "Longley" (Longley 1967, JASA 62:
819-841), certified coefficients and standard errors, as shipped in statsmodels
(``statsmodels.datasets.longley`` for the data; certified values in
``statsmodels/regression/tests/results/results_regression.py``, class ``Longley``).
Its cues are nearly collinear (condition number of the cue correlation matrix
about 110, of the raw cross-products far more), which is where plain normal
equations lose digits. Measured here: 11.7-13 digits for the coefficients and
12.6-14 for the standard errors.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.datasets import longley
from statsmodels.regression.tests.results.results_regression import Longley

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.policy.fit import fit_policies

CUES = ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]


def significant_digits(ours, certified):
    """Log relative error, the measure NIST uses (LRE)."""
    ours, certified = np.asarray(ours, float), np.asarray(certified, float)
    return -np.log10(np.abs(ours - certified) / np.abs(certified))


@pytest.fixture(scope="module")
def longley_policy():
    data = longley.load_pandas()
    cases = data.exog.copy()
    cases.index = [f"year{int(y)}" for y in cases["YEAR"]]
    design = build_cue_design(cases, [CueRule(c) for c in CUES])
    first = pd.DataFrame({"rater": "nist", "case": cases.index,
                          "judgment": data.endog.to_numpy()})
    return fit_policies(design, first, scale="continuous", n_boot=0)["nist"]


def test_certified_coefficients_to_ten_digits(longley_policy):
    cert = Longley()
    # NIST order: intercept last in statsmodels' copy of the certified values.
    ours = [longley_policy.weights[c] for c in CUES] + [longley_policy.intercept]
    digits = significant_digits(ours, cert.params)
    assert digits.min() >= 10, digits


def test_certified_standard_errors_to_ten_digits(longley_policy):
    cert = Longley()
    ours = [longley_policy.se[c] for c in CUES] + [longley_policy.intercept_se]
    digits = significant_digits(ours, cert.bse)
    assert digits.min() >= 10, digits


def test_certified_r2_and_collinearity_flag(longley_policy):
    cert = Longley()
    assert significant_digits(longley_policy.r2, cert.rsquared) >= 10
    assert longley_policy.r2_adj == pytest.approx(cert.rsquared_adj, abs=1e-8)
    assert "collinear_cues" in longley_policy.flags
    assert "few_cases" in longley_policy.flags  # 16 cases for 6 weights
