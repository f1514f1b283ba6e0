"""Test-retest per rater, and R_s against sqrt(r_tt)."""

import numpy as np
import pandas as pd
import pytest
from scipy.stats import pearsonr
from sklearn.metrics import cohen_kappa_score

from calibrate.consistency.repeats import consistency_verdict, retest
from calibrate.errors import DataError


def _repeats(seed=0, n_raters=4, pairs=25, noise=(0.3, 0.6, 1.0, 2.0), ordinal=True):
    rng = np.random.default_rng(seed)
    rows = []
    for g in range(n_raters):
        true = rng.normal(4, 1.3, pairs)
        a = true + rng.normal(0, noise[g], pairs)
        b = true + 0.2 * g + rng.normal(0, noise[g], pairs)
        if ordinal:
            a, b = np.clip(np.round(a), 1, 7), np.clip(np.round(b), 1, 7)
        rows += [(f"rater{g}", f"c{i}", x, y) for i, (x, y) in enumerate(zip(a, b))]
    return pd.DataFrame(rows, columns=["rater", "case", "first", "second"])


def test_r_and_fisher_interval_equal_scipy():
    # scipy.stats.pearsonr(...).confidence_interval uses the Fisher z transform
    data = _repeats(ordinal=False)
    result = retest(data, scale="continuous")
    for rater in result.raters:
        part = data[data["rater"] == rater.rater]
        ref = pearsonr(part["first"], part["second"])
        ci = ref.confidence_interval(0.95)
        assert rater.r == pytest.approx(ref.statistic, abs=1e-12)
        assert rater.r_ci_low == pytest.approx(ci.low, abs=1e-9)
        assert rater.r_ci_high == pytest.approx(ci.high, abs=1e-9)


def test_icc_a1_equals_pingouin_two_way_absolute():
    # pingouin.intraclass_corr ICC(A,1) with the two readings as two "raters"
    pingouin = pytest.importorskip("pingouin")
    data = _repeats(ordinal=False)
    result = retest(data, scale="continuous")
    for rater in result.raters:
        part = data[data["rater"] == rater.rater]
        long = part.melt(id_vars="case", value_vars=["first", "second"], var_name="occasion")
        ref = pingouin.intraclass_corr(long, targets="case", raters="occasion", ratings="value")
        assert rater.icc_a1 == pytest.approx(ref.set_index("Type").loc["ICC(A,1)", "ICC"], abs=1e-10)


def test_quadratic_kappa_equals_scikit_learn():
    # sklearn.metrics.cohen_kappa_score(weights="quadratic") with every scale category as a label
    data = _repeats()
    result = retest(data, scale="ordinal", scale_min=1, scale_max=7)
    for rater in result.raters:
        part = data[data["rater"] == rater.rater]
        ref = cohen_kappa_score(part["first"].astype(int), part["second"].astype(int),
                                weights="quadratic", labels=list(range(1, 8)))
        assert rater.kappa_quadratic == pytest.approx(ref, abs=1e-12)


def test_agreement_shares_and_bland_altman_by_hand():
    data = _repeats()
    result = retest(data, scale="ordinal", scale_min=1, scale_max=7)
    for rater in result.raters:
        part = data[data["rater"] == rater.rater]
        d = part["second"] - part["first"]
        assert rater.exact == pytest.approx((d == 0).mean())
        assert rater.within_one == pytest.approx((d.abs() <= 1).mean())
        assert rater.mean_abs_diff == pytest.approx(d.abs().mean())
        assert rater.bias == pytest.approx(d.mean())
        assert rater.limit_high - rater.limit_low == pytest.approx(2 * 1.96 * d.std(ddof=1))


def test_noisiest_rater_has_lowest_r_and_is_flagged():
    data = _repeats(pairs=60, ordinal=False)
    result = retest(data, scale="continuous")
    r = {x.rater: x.r for x in result.raters}
    assert min(r, key=r.get) == "rater3"
    assert "low_retest" in result.for_rater("rater3").flags
    assert "low_retest" not in result.for_rater("rater0").flags


def test_degenerate_rater_gives_nan_with_warning():
    data = pd.DataFrame({"rater": ["a"] * 3, "case": ["x", "y", "z"],
                         "first": [2.0, 2.0, 2.0], "second": [2.0, 2.0, 2.0]})
    rater = retest(data, scale="ordinal", scale_min=1, scale_max=5).raters[0]
    assert np.isnan(rater.r) and np.isnan(rater.r_ci_low)
    assert any("do not vary" in w for w in rater.warnings)
    assert any("rough" in w for w in rater.warnings)
    assert rater.to_dict()["r"] is None


def test_missing_column_raises():
    with pytest.raises(DataError, match="lacks column"):
        retest(pd.DataFrame({"rater": ["a"], "case": ["x"], "first": [1.0]}), scale="ordinal")


@pytest.mark.parametrize("r_s,r_s_ci,r_tt,r_tt_ci,verdict", [
    (0.55, (0.45, 0.63), 0.90, (0.84, 0.94), "model_misses_rule"),   # 0.63 < sqrt(0.84) = 0.917
    (0.50, (0.38, 0.60), 0.35, (0.10, 0.56), "inconsistent"),
    (0.80, (0.72, 0.86), 0.75, (0.40, 0.91), "cannot_tell"),
    (0.60, (0.40, 0.75), 0.85, (0.50, 0.95), "cannot_tell"),          # R_s interval reaches the ceiling
    (np.nan, (np.nan, np.nan), 0.85, (0.70, 0.93), "cannot_tell"),
])
def test_verdicts(r_s, r_s_ci, r_tt, r_tt_ci, verdict):
    result = consistency_verdict(r_s, r_tt, r_tt_ci=r_tt_ci, r_s_ci=r_s_ci)
    assert result.verdict == verdict
    if np.isfinite(r_tt_ci[0]):
        assert result.ceiling_ci_low == pytest.approx(np.sqrt(r_tt_ci[0]))
