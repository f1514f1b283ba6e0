"""Severity offsets, connectedness, range use and central tendency."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import stats
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


@pytest.mark.parametrize("form", ["HC2", "HC3"])
def test_robust_se_equal_statsmodels_with_unequal_rater_noise(form):
    # reference: statsmodels OLS(...).fit(cov_type="HC2"/"HC3") on the same additive model
    # (MacKinnon & White 1985, as statsmodels implements them); raters differ in noise
    first, _, _ = simulate_panel(n_raters=8, n_cases=60, readers=3, noise_sd=0.3, seed=21)
    rng = np.random.default_rng(4)
    noise_sd = dict(zip(sorted(first["rater"].unique()), np.linspace(0.2, 1.2, 8)))
    first["judgment"] += rng.normal(0, 1, len(first)) * first["rater"].map(noise_sd)
    # cases read by one rater only: zero residual, leverage 1, no weight (statsmodels gives NaN)
    lone = pd.DataFrame({"rater": ["r000", "r003"], "case": ["z1", "z2"], "judgment": [0.4, -1.0]})
    result = severity(pd.concat([first, lone], ignore_index=True), scale="continuous",
                      scale_min=-5, scale_max=5, robust_form=form)
    ours = np.array([r.se for r in result.raters])
    np.testing.assert_allclose(ours, _statsmodels_offset_se(first, form), rtol=1e-10)
    assert ours[-1] > 1.15 * result.raters[-1].se_pooled   # the noisiest rater's interval widens
    assert form in result.method and result.raters[0].to_dict()["se_method"] == form
    assert result.to_frame()["se_method"].eq(form).all()


def test_robust_intervals_cover_with_unequal_rater_noise():
    # a seeded, smaller version of benchmarks/bench_severity_coverage.py: 14 raters with
    # residual SDs 0.3 to 1.2, 350 cases x 4 readers, 120 panels. The HC2 interval must
    # cover 93-97% over all raters (99.9% binomial interval overlapping the band) and the
    # noisiest rater at least reach 93%; the pooled-variance one misses that rater.
    rng = np.random.default_rng(77)
    offsets = rng.normal(0.0, 0.5, 14)
    offsets -= offsets.mean()
    noise = np.linspace(0.3, 1.2, 14)
    n_panels = 120
    hits = np.zeros(14)
    pooled_hits = np.zeros(14)
    for _ in range(n_panels):
        chosen = np.argsort(rng.random((350, 14)), axis=1)[:, :4]
        ci, ri = np.repeat(np.arange(350), 4), chosen.ravel()
        y = rng.normal(0, 1, 350)[ci] + offsets[ri] + rng.normal(0, 1, ci.size) * noise[ri]
        first = pd.DataFrame({"rater": [f"r{i:02d}" for i in ri], "case": ci.astype(str), "judgment": y})
        result = severity(first, scale="continuous", scale_min=-5, scale_max=5)
        est = np.array([r.estimate for r in result.raters])
        hits += np.abs(est - offsets) <= 1.959964 * np.array([r.se for r in result.raters])
        pooled_hits += np.abs(est - offsets) <= 1.959964 * np.array([r.se_pooled for r in result.raters])

    def band(h, n):
        return stats.beta.ppf(0.0005, h, n - h + 1), stats.beta.ppf(0.9995, h + 1, n - h)

    low, high = band(hits.sum(), hits.size * n_panels)
    assert low <= 0.97 and high >= 0.93
    assert band(hits[-1], n_panels)[1] >= 0.93
    assert pooled_hits[-1] < hits[-1]


def test_unknown_robust_form_raises():
    first, _, _ = simulate_panel(n_raters=3, n_cases=10, readers=2, seed=0)
    with pytest.raises(DataError, match="robust form"):
        severity(first, scale="continuous", robust_form="HC9")


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


def test_repeated_pair_check_agrees_with_duplicated():
    # the agreement functions find a repeated (rater, case) from integer codes; a missing
    # id must count as one id, as pandas' duplicated counts it
    from calibrate.agreement.offsets import _repeats_a_pair

    rng = np.random.default_rng(3)
    for _ in range(500):
        n = int(rng.integers(1, 10))
        table = pd.DataFrame({"rater": pd.array(rng.choice(["a", "b", "c", None], n), dtype="str"),
                              "case": pd.array(rng.choice(["x", "y", None], n), dtype="str")})
        assert _repeats_a_pair(table) == bool(table.duplicated(["rater", "case"], keep=False).any())
