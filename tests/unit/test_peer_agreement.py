"""Agreement with the rest of the panel, against an explicit loop with scipy.stats.pearsonr."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from calibrate.agreement.with_panel import agreement_with_panel


def _incomplete_panel(seed=5, n_raters=6, n_cases=80):
    rng = np.random.default_rng(seed)
    truth = rng.normal(0.0, 2.0, size=n_cases)
    rows = []
    for c in range(n_cases):
        for r in rng.choice(n_raters, size=rng.integers(1, 4), replace=False):
            rows.append({"rater": f"r{r}", "case": f"c{c}", "judgment": truth[c] + rng.normal(0, 0.3 + r / 2)})
    return pd.DataFrame(rows)


def test_matches_an_explicit_leave_rater_out_loop():
    first = _incomplete_panel()
    result = agreement_with_panel(first)
    for rater, mine in first.groupby("rater"):
        own, others = [], []
        for _, row in mine.iterrows():
            rest = first[(first["case"] == row["case"]) & (first["rater"] != rater)]["judgment"]
            if len(rest):
                own.append(row["judgment"])
                others.append(rest.mean())
        ref = stats.pearsonr(own, others)  # scipy as the independent reference
        ci = ref.confidence_interval(0.95)  # Fisher z interval
        got = result.for_rater(rater)
        assert got.n == len(own)
        assert got.r == pytest.approx(ref.statistic, abs=1e-12)
        assert (got.ci_low, got.ci_high) == pytest.approx((ci.low, ci.high), abs=1e-9)
        assert got.mean_gap == pytest.approx(np.mean(np.subtract(own, others)), abs=1e-12)


def test_noisier_raters_agree_less():
    # planted: rater noise grows with the index
    result = agreement_with_panel(_incomplete_panel(seed=9, n_cases=2000))
    rs = [result.for_rater(f"r{i}").r for i in range(6)]
    assert rs == sorted(rs, reverse=True)


def test_rater_with_no_shared_case_gets_nan():
    first = pd.DataFrame({"rater": ["a", "a", "b", "b", "b", "c", "c", "c"],
                          "case": ["x", "y", "p", "q", "s", "p", "q", "s"],
                          "judgment": [1.0, 2, 3, 4, 5, 3, 5, 4]})
    result = agreement_with_panel(first)
    assert result.for_rater("a").n == 0 and np.isnan(result.for_rater("a").r)
    assert result.for_rater("b").r == pytest.approx(0.5)
