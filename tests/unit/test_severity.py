"""Severity offsets, connectedness, range use and central tendency."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from panel_simulation import simulate_panel

from calibrate.agreement.offsets import severity
from calibrate.errors import DataError


def test_offsets_and_se_equal_statsmodels_sum_coded_fit():
    # reference: statsmodels OLS  judgment ~ C(case) + C(rater, Sum)  (sum-to-zero rater effects)
    first, _, _ = simulate_panel(n_raters=7, n_cases=40, readers=3, seed=11)
    result = severity(first, scale="continuous", scale_min=-4, scale_max=4)
    fit = smf.ols("judgment ~ C(case) + C(rater, Sum)", data=first).fit()
    names = [k for k in fit.params.index if k.startswith("C(rater")]
    coef = fit.params[names].to_numpy()
    cov = fit.cov_params().loc[names, names].to_numpy()
    expand = np.vstack([np.eye(len(names)), -np.ones(len(names))])  # last rater = minus the sum
    ref_offsets = expand @ coef
    ref_se = np.sqrt(np.diag(expand @ cov @ expand.T))
    ours = np.array([r.estimate for r in result.raters])
    ours_se = np.array([r.se_pooled for r in result.raters])
    np.testing.assert_allclose(ours, ref_offsets, atol=1e-10)
    np.testing.assert_allclose(ours_se, ref_se, rtol=1e-9)
    assert result.residual_sd == pytest.approx(np.sqrt(fit.scale), rel=1e-10)
    assert abs(ours.mean()) < 1e-12
    assert result.connected and len(result.parts) == 1


def _statsmodels_offset_se(frame, cov_type):
    fit = smf.ols("judgment ~ C(case) + C(rater, Sum)", data=frame).fit(cov_type=cov_type)
    names = [k for k in fit.params.index if k.startswith("C(rater")]
    cov = fit.cov_params().loc[names, names].to_numpy()
    expand = np.vstack([np.eye(len(names)), -np.ones(len(names))])  # last rater = minus the sum
    return np.sqrt(np.diag(expand @ cov @ expand.T))


def test_hc3_se_equal_statsmodels_with_unequal_rater_noise():
    # reference: statsmodels OLS(...).fit(cov_type="HC3") on the same additive model
    # (HC3: MacKinnon & White 1985, as statsmodels implements it); raters differ in noise
    first, _, _ = simulate_panel(n_raters=8, n_cases=60, readers=3, noise_sd=0.3, seed=21)
    rng = np.random.default_rng(4)
    noise_sd = dict(zip(sorted(first["rater"].unique()), np.linspace(0.2, 1.2, 8)))
    first["judgment"] += rng.normal(0, 1, len(first)) * first["rater"].map(noise_sd)
    # cases read by one rater only: zero residual, leverage 1, no weight (statsmodels gives NaN)
    lone = pd.DataFrame({"rater": ["r000", "r003"], "case": ["z1", "z2"], "judgment": [0.4, -1.0]})
    result = severity(pd.concat([first, lone], ignore_index=True), scale="continuous",
                      scale_min=-5, scale_max=5)
    ours = np.array([r.se for r in result.raters])
    np.testing.assert_allclose(ours, _statsmodels_offset_se(first, "HC3"), rtol=1e-10)
    assert ours[-1] > 1.3 * result.raters[-1].se_pooled   # the noisiest rater's interval widens
    assert "HC3" in result.method and result.raters[0].to_dict()["se_method"] == "HC3"


def test_planted_offsets_are_recovered():
    # planted truth: 60 raters, 1500 cases, 3 readers each
    first, truth, planted = simulate_panel(n_raters=60, n_cases=1500, readers=3,
                                           rater_sd=0.6, noise_sd=0.6, seed=5)
    result = severity(first, scale="continuous", scale_min=-4, scale_max=4)
    estimated = np.array([r.estimate for r in result.raters])
    assert np.corrcoef(estimated, planted)[0, 1] > 0.9
    # coverage of the 95% intervals over raters (a loose check: 60 raters)
    low = np.array([r.ci_low for r in result.raters])
    high = np.array([r.ci_high for r in result.raters])
    assert 0.85 <= np.mean((low <= planted) & (planted <= high)) <= 1.0


def test_positive_offset_means_lenient():
    first, _, planted = simulate_panel(n_raters=10, n_cases=300, readers=3, seed=2)
    first.loc[first["rater"] == "r000", "judgment"] += 2.0
    result = severity(first, scale="continuous", scale_min=-5, scale_max=5)
    r0 = result.for_rater("r000")
    assert r0.estimate > 1.5 and "lenient" in r0.flags
    first.loc[first["rater"] == "r000", "judgment"] -= 4.0
    assert "severe" in severity(first, scale="continuous", scale_min=-5, scale_max=5).for_rater("r000").flags


def test_disconnected_parts_are_named():
    a, _, _ = simulate_panel(n_raters=4, n_cases=20, readers=2, seed=1)
    b, _, _ = simulate_panel(n_raters=3, n_cases=10, readers=2, seed=2)
    b["rater"] = "x" + b["rater"]
    b["case"] = "y" + b["case"]
    result = severity(pd.concat([a, b]), scale="continuous", scale_min=-5, scale_max=5)
    assert not result.connected
    assert [p.raters for p in result.parts] == [
        ("r000", "r001", "r002", "r003"), ("xr000", "xr001", "xr002")]
    assert any("share no files" in w for w in result.warnings)
    for part in result.parts:
        offs = [result.for_rater(r).estimate for r in part.raters]
        assert abs(np.sum(offs)) < 1e-10   # centred within each part


def test_range_use_and_central_tendency_flags():
    rng = np.random.default_rng(8)
    first, truth, _ = simulate_panel(n_raters=8, n_cases=400, readers=4, rater_sd=0.0,
                                     noise_sd=0.3, case_sd=1.2, seed=8)
    first["judgment"] = np.clip(np.round(first["judgment"] + 4), 1, 7)
    narrow = first["rater"] == "r003"
    first.loc[narrow, "judgment"] = np.clip(
        np.round(4 + 0.3 * (first.loc[narrow, "judgment"] - 4) + rng.normal(0, 0.1, narrow.sum())), 1, 7)
    result = severity(first, scale="ordinal", scale_min=1, scale_max=7)
    r3 = result.for_rater("r003")
    assert r3.sd_ratio < 0.67 and "narrow_range" in r3.flags
    assert r3.middle_share > r3.panel_middle_share + 0.2 and "central_tendency" in r3.flags
    others = [r for r in result.raters if r.rater != "r003"]
    assert all("narrow_range" not in r.flags for r in others)
    # sd ratio by hand for one rater: own SD over the other readers' adjusted SD on the same files
    frame = first.merge(result.to_frame()[["rater", "estimate"]], on="rater")
    frame["adjusted"] = frame["judgment"] - frame["estimate"]
    cases = frame.loc[frame["rater"] == "r000", "case"]
    others_adj = frame[(frame["case"].isin(cases)) & (frame["rater"] != "r000")]["adjusted"]
    own = frame.loc[frame["rater"] == "r000", "judgment"]
    assert result.for_rater("r000").sd_ratio == pytest.approx(own.std() / others_adj.std(), rel=1e-10)


def test_bad_input_raises_clear_errors():
    with pytest.raises(DataError, match="lacks column"):
        severity(pd.DataFrame({"rater": ["a"], "case": ["c"]}), scale="continuous")
    dup = pd.DataFrame({"rater": ["a", "a"], "case": ["c", "c"], "judgment": [1.0, 2.0]})
    with pytest.raises(DataError, match="more than one row"):
        severity(dup, scale="continuous")
    with pytest.raises(DataError, match="scale must be one of"):
        severity(dup.iloc[:1], scale="likert")


def test_to_dict_is_json_safe_and_has_contract_keys():
    import json

    first, _, _ = simulate_panel(n_raters=3, n_cases=4, readers=1, seed=0)  # no shared files
    result = severity(first, scale="continuous")
    payload = json.loads(json.dumps(result.to_dict()))
    rater = payload["raters"][0]
    assert {"offset", "se"} <= set(rater)
    assert any("observed lowest" in w for w in result.warnings)
