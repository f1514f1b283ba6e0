"""Behaviour of calibrate.lens beyond the published identities (see tests/reference)."""

import json

import numpy as np
import pandas as pd
import pytest

from calibrate.errors import DataError
from calibrate.lens.model import lens_model
from tests.simulated_panels import linear_panel

LENS_KEYS = {"r_a", "g", "c", "r_e", "r_s", "model_validity", "model_validity_cv"}


@pytest.fixture(scope="module")
def panel_and_criterion():
    rng = np.random.default_rng(30)
    panel = linear_panel(rng, n_cases=150, n_raters=5, per_rater=60,
                         weights=np.array([0.05, 0.4, 0.3]), noise=1.0)
    X = panel.design.matrix
    criterion = pd.Series(X @ np.array([0.05, 0.3, 0.3]) + rng.standard_normal(150),
                          index=list(panel.design.case_ids))
    return panel, criterion


def test_same_seed_same_numbers_and_json_contract(panel_and_criterion):
    panel, criterion = panel_and_criterion
    a = lens_model(panel.design, panel.first, criterion)
    b = lens_model(panel.design, panel.first, criterion)
    assert json.dumps(a.to_dict(), sort_keys=True) == json.dumps(b.to_dict(), sort_keys=True)
    block = a.raters[0].to_dict()
    assert LENS_KEYS <= set(block)
    assert set(a.to_frame().columns) >= LENS_KEYS | {"rater", "n"}
    assert not a.cautions


def test_selected_criterion_carries_a_caution(panel_and_criterion):
    panel, criterion = panel_and_criterion
    result = lens_model(panel.design, panel.first, criterion, criterion_selected=True)
    assert len(result.cautions) == 1 and "selection" in result.cautions[0]


def test_partly_known_criterion_is_reported(panel_and_criterion):
    panel, criterion = panel_and_criterion
    partial = criterion.copy()
    partial.iloc[::3] = np.nan
    result = lens_model(panel.design, panel.first, partial)
    assert any("known for" in w for w in result.warnings)
    assert all(r.n < 60 for r in result.raters)


def test_rater_with_too_few_criterion_cases_gets_nan_and_a_warning(panel_and_criterion):
    panel, criterion = panel_and_criterion
    few = pd.DataFrame({"rater": "late", "case": list(panel.design.case_ids[:4]), "judgment": [1., 2., 3., 5.]})
    result = lens_model(panel.design, pd.concat([panel.first, few]), criterion)
    late = result.for_rater("late")
    assert np.isnan(late.r_a) and np.isnan(late.model_validity_cv)
    assert late.warnings and "cannot be fitted" in late.warnings[0]
    assert json.loads(json.dumps(late.to_dict()))["g"] is None
    assert all(np.isfinite(r.g) for r in result.raters if r.rater != "late")


def test_bootstrap_sentence_says_which_way(panel_and_criterion):
    panel, criterion = panel_and_criterion
    starts = {"model_better": "A model of your own policy would have predicted the outcome better",
              "rater_better": "Your judgments predicted the outcome better",
              "about_same": "Your judgments and a model of your own policy predicted the outcome about",
              "neither_tracks": "Neither your judgments"}
    for r in lens_model(panel.design, panel.first, criterion).raters:
        verdict = r.model_vs_rater
        assert r.summary.startswith(starts[verdict.verdict])
        if verdict.verdict == "model_better":
            assert verdict.ci_low > 0
        if verdict.verdict == "rater_better":
            assert verdict.ci_high < 0


@pytest.mark.parametrize("change, message", [
    (dict(criterion="none"), "unknown for every judged case"),
    (dict(case="nowhere"), "absent from the cue design"),
    (dict(column="score"), "lacks column"),
])
def test_user_errors_are_data_errors(panel_and_criterion, change, message):
    panel, criterion = panel_and_criterion
    first = panel.first.copy()
    if "case" in change:
        first.loc[0, "case"] = change["case"]
    if "column" in change:
        first = first.rename(columns={"judgment": change["column"]})
    if change.get("criterion") == "none":
        criterion = criterion * np.nan
    with pytest.raises(DataError, match=message):
        lens_model(panel.design, first, criterion)


def _band_reached(hit: int, n: int, low=0.93, high=0.97) -> bool:
    # 99.9% Clopper-Pearson interval of the coverage must reach into the target band.
    from scipy import stats
    lo = stats.beta.ppf(0.0005, hit, n - hit + 1) if hit else 0.0
    hi = stats.beta.ppf(0.9995, hit + 1, n - hit) if hit < n else 1.0
    return hi >= low and lo <= high


def test_lens_intervals_cover_small_seeded():
    # Small seeded version of benchmarks/bench_lens_intervals.py (figures in DEVELOPERS.md).
    # r_a and C reach the 93-97% band; G and R_e run a few points short (about 90-92% at
    # 20 cases per term), stated in DEVELOPERS.md, so they are held to a floor here.
    from tests.lens_panels import coverage
    result = coverage(np.random.default_rng(5), 150, 60, n_boot=300, ordinal=True, centre=4.5)
    for figure in ("r_a", "c"):
        assert _band_reached(*result[figure]), (figure, result[figure])
    for figure in ("g", "r_e"):
        hit, n = result[figure]
        assert n >= 145 and hit / n >= 0.84, (figure, result[figure])


def test_interval_brackets_the_estimate_and_the_equation_still_holds(panel_and_criterion):
    panel, criterion = panel_and_criterion
    result = lens_model(panel.design, panel.first, criterion, n_boot=200, rng=np.random.default_rng(3))
    for r in result.raters:
        for k in ("r_a", "g", "c", "r_e"):
            low, high, value = getattr(r, f"{k}_ci_low"), getattr(r, f"{k}_ci_high"), getattr(r, k)
            assert low <= value <= high, (k, low, value, high)
        # Tucker (1964): the point estimates still satisfy the Lens Model Equation exactly.
        rebuilt = r.g * r.r_e * r.r_s + r.c * np.sqrt(1 - r.r_e**2) * np.sqrt(1 - r.r_s**2)
        assert rebuilt == pytest.approx(r.r_a, abs=1e-9)
        assert r.n_boot == 200 and "BCa" in r.interval_method
    none = lens_model(panel.design, panel.first, criterion, n_boot=0).raters[0]
    assert np.isnan(none.g_ci_low) and none.n_boot == 0


def test_small_sample_caution_under_ten_cases_per_term(panel_and_criterion):
    panel, criterion = panel_and_criterion
    # 60 cases on 3 terms: 20 per term, no caution; 25 cases: 8.3 per term, a caution.
    full = lens_model(panel.design, panel.first, criterion, n_boot=0)
    assert not any(r.small_sample for r in full.raters)
    few = panel.first.groupby("rater").head(25)
    result = lens_model(panel.design, few, criterion, n_boot=0)
    for r in result.raters:
        assert r.small_sample and r.cases_per_term == pytest.approx(25 / 3)
        assert r.small_sample_note and "8.3 per term" in r.small_sample_note
        assert r.to_dict()["small_sample"] is True


def test_verdicts_of_all_raters_at_once_equal_each_verdict_alone():
    from calibrate.lens.model import model_versus_rater, models_versus_raters

    rng = np.random.default_rng(70)
    r_a, cv, mj = rng.uniform(-0.3, 0.9, (3, 40))
    n = rng.integers(3, 200, 40)
    r_a[[1, 7]] = np.nan                                   # not available
    together = models_versus_raters(r_a, cv, mj, n)
    for i, verdict in enumerate(together):
        alone = model_versus_rater(float(r_a[i]), float(cv[i]), float(mj[i]), int(n[i]))
        assert verdict.to_dict() == alone.to_dict() or (verdict.verdict == alone.verdict == "not_available")
    assert {v.verdict for v in together} >= {"not_available", "about_same"}
