"""The excluded-attribute check: nested F / likelihood ratio, Holm, proxies, the demo."""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from calibrate.errors import DataError
from calibrate.lens.rubric import ASSOCIATION_CAUTION, EXCLUDED_FLAG, canonical_correlation, excluded_check
from tests.simulated_panels import demo_phases, linear_panel

WEIGHTS = np.array([0.05, 0.4, 0.3])


def _attributes(rng, panel, *, numeric_from_cue=0.0):
    n = len(panel.design.case_ids)
    numeric = rng.standard_normal(n) + numeric_from_cue * (panel.design.matrix[:, 1] - 3) / 1.2
    group = rng.choice(["east", "north", "west"], size=n, p=[0.5, 0.3, 0.2]).astype(object)
    numeric[rng.random(n) < 0.1] = np.nan
    group[rng.random(n) < 0.1] = None
    return pd.DataFrame({"age_band": numeric, "region": group}, index=list(panel.design.case_ids))


def test_nested_f_and_delta_r2_match_statsmodels():
    # Independent reference: statsmodels OLS compare_f_test (full against reduced model).
    rng = np.random.default_rng(50)
    panel = linear_panel(rng, n_cases=150, n_raters=4, per_rater=80, weights=WEIGHTS, noise=1.0)
    excluded = _attributes(rng, panel)
    result = excluded_check(panel.design, panel.first, excluded, scale="ordinal")
    assert result.attribute_kinds == {"age_band": "numeric", "region": "categorical"}
    for name, rows in panel.rater_rows.items():
        y = panel.first.loc[panel.first.rater == name, "judgment"].to_numpy()
        for attribute in ("age_band", "region"):
            values = excluded[attribute].to_numpy()[rows]
            keep = pd.notna(values)
            X = panel.design.matrix[rows][keep]
            A = (values[keep].astype(float)[:, None] if attribute == "age_band"
                 else pd.get_dummies(pd.Series(values[keep])).drop(columns="east").to_numpy(float))
            reduced = sm.OLS(y[keep], sm.add_constant(X)).fit()
            full = sm.OLS(y[keep], sm.add_constant(np.hstack([X, A]))).fit()
            F, p, df = full.compare_f_test(reduced)
            test = next(t for t in result.for_rater(name).tests if t.attribute == attribute)
            assert test.n == keep.sum() and test.df_num == df
            assert test.statistic == pytest.approx(F, rel=1e-9)
            assert test.p_value == pytest.approx(p, rel=1e-8, abs=1e-15)
            assert test.delta_r2 == pytest.approx(full.rsquared - reduced.rsquared, abs=1e-12)


def test_level_missing_for_one_rater_keeps_the_right_degrees_of_freedom():
    # Reference: statsmodels OLS on the columns that vary for that rater.
    rng = np.random.default_rng(51)
    panel = linear_panel(rng, n_cases=120, n_raters=2, per_rater=60, weights=WEIGHTS, noise=1.0)
    region = np.where(rng.random(120) < 0.6, "east", "north").astype(object)
    rows0 = panel.rater_rows["rater0000"]
    others = np.setdiff1d(np.arange(120), rows0)
    region[others[:5]] = "south"                 # a level rater0000 never sees
    excluded = pd.DataFrame({"region": region}, index=list(panel.design.case_ids))
    test = excluded_check(panel.design, panel.first, excluded).for_rater("rater0000").tests[0]
    y = panel.first.loc[panel.first.rater == "rater0000", "judgment"].to_numpy()
    X = panel.design.matrix[rows0]
    north = (region[rows0] == "north").astype(float)[:, None]
    F, p, df = sm.OLS(y, sm.add_constant(np.hstack([X, north]))).fit().compare_f_test(
        sm.OLS(y, sm.add_constant(X)).fit())
    assert test.df_num == df == 1
    assert test.p_value == pytest.approx(p, rel=1e-8)


def test_likelihood_ratio_matches_statsmodels_logit():
    # Independent reference: statsmodels Logit log-likelihoods, LR = 2 (llf_full - llf_reduced).
    rng = np.random.default_rng(52)
    panel = linear_panel(rng, n_cases=200, n_raters=3, per_rater=150, weights=WEIGHTS, noise=1.0)
    excluded = _attributes(rng, panel)
    binary = panel.first.assign(judgment=(panel.first.judgment > panel.first.judgment.median()).astype(float))
    result = excluded_check(panel.design, binary, excluded, scale="binary")
    for name, rows in panel.rater_rows.items():
        y = binary.loc[binary.rater == name, "judgment"].to_numpy()
        values = excluded["region"].to_numpy()[rows]
        keep = pd.notna(values)
        X = sm.add_constant(panel.design.matrix[rows][keep])
        A = pd.get_dummies(pd.Series(values[keep])).drop(columns="east").to_numpy(float)
        reduced = sm.Logit(y[keep], X).fit(disp=0)
        full = sm.Logit(y[keep], np.hstack([X, A])).fit(disp=0)
        test = next(t for t in result.for_rater(name).tests if t.attribute == "region")
        assert test.test == "likelihood_ratio"
        assert test.statistic == pytest.approx(2 * (full.llf - reduced.llf), abs=1e-7)
        assert test.p_value == pytest.approx(stats.chi2.sf(2 * (full.llf - reduced.llf), 2), abs=1e-8)


def test_unadjusted_p_values_are_uniform_over_1000_null_raters():
    # Exact theory: under no effect and normal errors the nested F p-value is U(0, 1).
    rng = np.random.default_rng(53)
    panel = linear_panel(rng, n_cases=400, n_raters=1000, per_rater=40, weights=WEIGHTS, noise=1.0)
    excluded = _attributes(rng, panel)[["age_band"]]
    p = excluded_check(panel.design, panel.first, excluded).to_frame()["p_value"].to_numpy()
    assert p.size == 1000 and np.isfinite(p).all()
    # Kolmogorov-Smirnov against U(0,1) (scipy); measured KS p = 0.61, 4.7% below .05, with this seed.
    assert stats.kstest(p, "uniform").pvalue > 0.01
    assert 0.03 <= np.mean(p < 0.05) <= 0.07


def test_holm_keeps_null_panels_clean_and_finds_a_moderate_plant():
    # 200 null panels (8 raters x 2 attributes, 80 cases each): Holm (1979) bounds the
    # chance of any flag in a panel by 5%; the count of panels flagged is binomial, so
    # the check allows two binomial SEs (measured: 7 of 200 = 3.5%). Then 100 panels
    # where one rater adds 0.5 judgment SD per attribute SD (delta R^2 about .13, a
    # medium effect, f^2 = .15 in Cohen 1988, from memory): flagged in most panels
    # (measured: 85 of 100; another rater flagged in 4 of them).
    rng = np.random.default_rng(54)
    null_flagged, plant_found, plant_other = 0, 0, 0
    for panel_no in range(300):
        plant = panel_no >= 200
        panel = linear_panel(rng, n_cases=200, n_raters=8, per_rater=80, weights=WEIGHTS, noise=1.0)
        excluded = _attributes(rng, panel)
        first = panel.first
        if plant:
            rows0 = panel.rater_rows["rater0000"]
            first = first.copy()
            first.loc[first.rater == "rater0000", "judgment"] += 0.5 * np.nan_to_num(
                excluded["age_band"].to_numpy()[rows0])
        flagged = [r.rater for r in excluded_check(panel.design, first, excluded).raters if r.flags]
        if not plant:
            null_flagged += bool(flagged)
        else:
            plant_found += "rater0000" in flagged
            plant_other += any(f != "rater0000" for f in flagged)
    assert null_flagged / 200 <= 0.05 + 2 * np.sqrt(0.05 * 0.95 / 200), null_flagged
    assert plant_found >= 70, plant_found
    assert plant_other <= 10, plant_other


def test_proxy_cues_are_named_and_measured_by_canonical_correlation():
    # Reference: for one numeric attribute the canonical correlation with one cue is |r|
    # and with all cues the multiple R from statsmodels OLS (Hotelling 1936, from memory).
    rng = np.random.default_rng(55)
    panel = linear_panel(rng, n_cases=300, n_raters=3, per_rater=200, weights=WEIGHTS, noise=1.0)
    excluded = _attributes(rng, panel, numeric_from_cue=1.5)
    result = excluded_check(panel.design, panel.first, excluded)
    assert result.proxies_of("age_band") == ["essay"]
    assert result.proxies_of("region") == []
    judged = np.unique(np.concatenate(list(panel.rater_rows.values())))
    age = excluded["age_band"].to_numpy()[judged]
    keep = np.isfinite(age)
    X = panel.design.matrix[judged][keep]
    essay = next(p for p in result.proxies if p.attribute == "age_band" and p.cue == "essay")
    assert essay.association == pytest.approx(abs(np.corrcoef(X[:, 1], age[keep])[0, 1]), abs=1e-12)
    r2 = sm.OLS(age[keep], sm.add_constant(X)).fit().rsquared
    assert result.attribute_predictability["age_band"] == pytest.approx(np.sqrt(r2), abs=1e-12)
    assert canonical_correlation(X[:, :1], X[:, :1] * 3 + 1) == pytest.approx(1.0)


def test_wording_flags_and_json():
    rng = np.random.default_rng(56)
    panel = linear_panel(rng, n_cases=100, n_raters=3, per_rater=60, weights=WEIGHTS, noise=1.0)
    excluded = _attributes(rng, panel)
    first = panel.first.copy()
    first.loc[first.rater == "rater0001", "judgment"] += 3.0 * (
        excluded["region"].reindex(first.loc[first.rater == "rater0001", "case"]).to_numpy() == "west")
    result = excluded_check(panel.design, first, excluded)
    assert "not proof of intent" in result.caution and "applicable law" in result.caution
    assert result.caution == ASSOCIATION_CAUTION
    assert result.for_rater("rater0001").flags == (EXCLUDED_FLAG,) == ("excluded_attribute",)
    block = json.loads(json.dumps(result.to_dict()))["raters"][1]["excluded"]
    assert set(block) == {"age_band", "region"}
    assert set(block["region"]) >= {"delta_r2", "p_value", "p_adjusted", "flagged"}


def test_binary_judgments_must_be_zero_or_one():
    rng = np.random.default_rng(57)
    panel = linear_panel(rng, n_cases=60, n_raters=2, per_rater=40, weights=WEIGHTS, noise=1.0)
    with pytest.raises(DataError, match="coded 0 and 1"):
        excluded_check(panel.design, panel.first, _attributes(rng, panel), scale="binary")


def test_on_the_demo_only_the_planted_reviewer_is_flagged():
    # Planted truth of the invented demo study: 'Juniper' leans on alumni_family.
    from calibrate.data.demo import LEANS_ON_EXCLUDED

    for _, design, first, pool in demo_phases():
        result = excluded_check(design, first, pool[["alumni_family"]], scale="ordinal")
        assert [r.rater for r in result.raters if r.flags] == [LEANS_ON_EXCLUDED]
