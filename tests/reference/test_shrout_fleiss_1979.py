"""Shrout & Fleiss (1979), Psychological Bulletin 86:420-428: 6 targets rated by 4 judges.

Data and the six ICC values (.17 .29 .71 .44 .62 .91) from their Table 1 and
Table 4, as copied in the shared REFERENCE-DATA.md; four-decimal values
recomputed there (.1657 .2898 .7148 .4428 .6201 .9093). Their mean squares:
targets 11.24, judges 32.49, within targets 6.26, residual 1.02.
"""

import numpy as np
import pandas as pd
import pytest

from calibrate.agreement.icc import icc_anova, panel_agreement
from calibrate.agreement.readers import generalizability, henderson_components
from calibrate.agreement.offsets import crossed_layout, fit_additive

RATINGS = np.array([
    [9, 2, 5, 8],
    [6, 1, 3, 2],
    [8, 4, 6, 8],
    [7, 1, 2, 6],
    [10, 5, 6, 9],
    [6, 2, 4, 7],
], dtype=float)
PUBLISHED = {"i1": 0.17, "a1": 0.29, "c1": 0.71, "ik": 0.44, "ak": 0.62, "ck": 0.91}
RECOMPUTED = {"i1": 0.1657, "a1": 0.2898, "c1": 0.7148, "ik": 0.4428, "ak": 0.6201, "ck": 0.9093}


def _long():
    rows = [(f"judge{j + 1}", f"target{i + 1}", RATINGS[i, j]) for i in range(6) for j in range(4)]
    return pd.DataFrame(rows, columns=["rater", "case", "judgment"])


@pytest.mark.parametrize("method", ["anova", "components"])
def test_six_forms_match_published_values(method):
    # Shrout & Fleiss 1979, Table 4 (two decimals); recomputed values to 4 decimals
    result = panel_agreement(_long(), scale="continuous", method=method, n_boot=50, rng=0)
    values = result.icc_values()
    for form, published in PUBLISHED.items():
        assert round(values[form], 2) == pytest.approx(published, abs=1e-9)
        assert values[form] == pytest.approx(RECOMPUTED[form], abs=5e-5)


def test_mean_squares_match_published():
    # Shrout & Fleiss 1979, Table 1: BMS 11.24, JMS 32.49, WMS 6.26, EMS 1.02
    fit = fit_additive(crossed_layout(_long()))
    assert fit.ss_cases / 5 == pytest.approx(11.24, abs=0.005)
    assert fit.ss_raters / 3 == pytest.approx(32.49, abs=0.005)
    assert fit.ss_within_cases / 18 == pytest.approx(6.26, abs=0.005)
    assert fit.ss_residual / 15 == pytest.approx(1.02, abs=0.005)
    # complete design: R(rater | case) is the plain judges' sum of squares
    assert fit.ss_rater_given_case == pytest.approx(fit.ss_raters, rel=1e-12)


def test_components_equal_expected_mean_square_solutions():
    # exact identity on a balanced design: sigma2_c = (BMS - EMS)/k, sigma2_r = (JMS - EMS)/n
    bms, jms, ems = 11.24166666, 32.48611111, 1.01944444
    comps = henderson_components(fit_additive(crossed_layout(_long())))
    assert comps.residual == pytest.approx(ems, abs=1e-6)
    assert comps.case == pytest.approx((bms - ems) / 4, abs=1e-6)
    assert comps.rater == pytest.approx((jms - ems) / 6, abs=1e-6)


def test_d_study_at_four_readers_equals_average_measure_icc():
    # identity (Brennan 2001; McGraw & Wong 1996): E rho^2(k) = ICC(C,k), Phi(k) = ICC(A,k)
    g = generalizability(_long())
    assert not g.components.set_to_zero
    row = g.d_study[3]
    assert row.raters == 4
    assert row.g_rel == pytest.approx(RECOMPUTED["ck"], abs=5e-5)
    assert row.phi == pytest.approx(RECOMPUTED["ak"], abs=5e-5)
    assert g.d_study[0].g_rel == pytest.approx(RECOMPUTED["c1"], abs=5e-5)
    assert g.d_study[0].phi == pytest.approx(RECOMPUTED["a1"], abs=5e-5)


def test_intervals_match_pingouin():
    # pingouin.intraclass_corr (McGraw & Wong 1996 formulas), CIs printed to 2 decimals
    pingouin = pytest.importorskip("pingouin")
    ref = pingouin.intraclass_corr(_long(), targets="case", raters="rater", ratings="judgment")
    ours = {e.label: e for e in icc_anova(RATINGS)}
    assert list(ref["Type"]) == list(ours)   # pingouin 0.7 labels the forms as McGraw & Wong do
    for _, row in ref.iterrows():
        mine = ours[row["Type"]]
        assert mine.estimate == pytest.approx(row["ICC"], abs=1e-10)
        assert mine.ci_low == pytest.approx(row["CI95"][0], abs=0.005 + 1e-9)
        assert mine.ci_high == pytest.approx(row["CI95"][1], abs=0.005 + 1e-9)
