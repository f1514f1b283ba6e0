"""Where two readers part ways (interpersonal lens model) on shared cases."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import calibrate.panel.pairs as rater_pairs_module
from calibrate.errors import DataError
from calibrate.panel.pairs import compare_rater_pairs
from tests.disagreement_panels import case_pool, first_judgments

WEIGHTS = np.array([[0.10, 0.5, 0.8, -0.6],
                    [0.02, 1.0, 0.1, -0.1],
                    [0.08, 0.2, 1.2, -1.0],
                    [0.12, 0.6, 0.0, 0.0],
                    [0.05, 0.4, 0.5, -0.5],
                    [0.00, 0.9, 0.9, 0.2]])


def _panel(seed: int, *, per_rater=70, n_cases=120, missing_share=0.0, noise=None):
    rng = np.random.default_rng(seed)
    design = case_pool(rng, n_cases, missing_share=missing_share)
    noise = np.linspace(0.4, 1.6, len(WEIGHTS)) if noise is None else noise
    return design, first_judgments(rng, design, per_rater=per_rater, weights=WEIGHTS, noise=noise)


def _identity_gap(frame: pd.DataFrame) -> np.ndarray:
    rebuilt = (frame.g * frame.r_s_a * frame.r_s_b
               + frame.c * np.sqrt(1 - frame.r_s_a ** 2) * np.sqrt(1 - frame.r_s_b ** 2))
    return np.abs(frame.r - rebuilt).to_numpy()


@pytest.mark.parametrize("per_rater, missing_share", [(120, 0.0), (70, 0.0), (60, 0.15)])
def test_identity_is_exact_on_complete_and_incomplete_designs(per_rater, missing_share):
    # Exact identity r = G R_a R_b + C sqrt(1-R_a^2) sqrt(1-R_b^2) when both policies are
    # refitted on the same cases (Tucker 1964, Psychological Review 71:528-530, from memory).
    design, first = _panel(11, per_rater=per_rater, missing_share=missing_share)
    frame = compare_rater_pairs(design, first).to_frame()
    assert len(frame) > 0
    assert np.nanmax(_identity_gap(frame)) < 1e-9
    decomposed = frame.loss_inconsistency + frame.loss_weighting - frame.unmodelled
    assert np.max(np.abs((1 - frame.r) - decomposed)) < 1e-9


def test_components_match_statsmodels_fits_on_the_shared_cases():
    # Reference: each rater's policy refitted with statsmodels OLS on exactly the shared
    # cases; R, G, C and r as plain Pearson correlations (np.corrcoef) of the pieces.
    design, first = _panel(5, per_rater=70, missing_share=0.1)
    result = compare_rater_pairs(design, first)
    complete = pd.Series(design.complete_rows(), index=list(design.case_ids))
    worst = 0.0
    for pair in result.pairs:
        a = first[first.rater == pair.rater_a].set_index("case").judgment
        b = first[first.rater == pair.rater_b].set_index("case").judgment
        shared = sorted(set(a.index) & set(b.index))
        shared = [c for c in shared if complete[c]]
        assert len(shared) == pair.n
        X = sm.add_constant(design.matrix[design.row_of(shared)])
        fit_a = sm.OLS(a[shared].to_numpy(), X).fit()
        fit_b = sm.OLS(b[shared].to_numpy(), X).fit()
        expected = {
            "r": np.corrcoef(a[shared], b[shared])[0, 1],
            "g": np.corrcoef(fit_a.fittedvalues, fit_b.fittedvalues)[0, 1],
            "c": np.corrcoef(fit_a.resid, fit_b.resid)[0, 1],
            "r_s_a": np.sqrt(fit_a.rsquared),
            "r_s_b": np.sqrt(fit_b.rsquared),
            "mean_gap": float(np.mean(a[shared].to_numpy() - b[shared].to_numpy())),
        }
        for key, value in expected.items():
            worst = max(worst, abs(getattr(pair, key) - value))
    assert worst < 1e-10


def test_pairs_below_min_shared_are_left_out():
    rng = np.random.default_rng(3)
    design = case_pool(rng, 60, categorical=False)
    ids = np.asarray(design.case_ids)
    y = rng.normal(size=60)
    # a and b share 30 cases, a and c share 15, b and c share 0.
    first = pd.concat([
        pd.DataFrame({"rater": "a", "case": ids[:45], "judgment": y[:45] + rng.normal(size=45)}),
        pd.DataFrame({"rater": "b", "case": ids[15:45], "judgment": y[15:45]}),
        pd.DataFrame({"rater": "c", "case": ids[45:] , "judgment": y[45:]}),
        pd.DataFrame({"rater": "c", "case": ids[:15], "judgment": y[:15]}),
    ])
    result = compare_rater_pairs(design, first, min_shared=20)
    assert [(p.rater_a, p.rater_b, p.n) for p in result.pairs] == [("a", "b", 30)]
    assert result.n_pairs_eligible == 1
    assert len(compare_rater_pairs(design, first, min_shared=15).pairs) == 2


def test_max_pairs_keeps_the_furthest_apart():
    design, first = _panel(8, per_rater=90)
    everything = compare_rater_pairs(design, first)
    kept = compare_rater_pairs(design, first, max_pairs=5)
    assert everything.n_pairs_eligible == kept.n_pairs_eligible == 15
    lowest = everything.to_frame().nsmallest(5, "r")
    assert [(p.rater_a, p.rater_b) for p in kept.pairs] == list(zip(lowest.rater_a, lowest.rater_b))
    assert kept.n_pairs_kept == 5 and any("furthest apart" in w for w in kept.warnings)
    # pairs are ordered from the lowest agreement up
    assert np.all(np.diff(everything.to_frame().r) >= 0)


def test_chunking_does_not_change_the_numbers(monkeypatch):
    design, first = _panel(9)
    whole = compare_rater_pairs(design, first).to_frame()
    monkeypatch.setattr(rater_pairs_module, "_CELLS_PER_CHUNK", 250)  # about two pairs per chunk
    pieces = compare_rater_pairs(design, first).to_frame()
    pd.testing.assert_frame_equal(whole, pieces, rtol=0, atol=1e-13)


def test_planted_sources_of_disagreement():
    # Planted truth: pair (0, 1) has the same policy and lots of noise -> inconsistency;
    # pair (2, 3) is almost noise-free with opposite weights -> weighting.
    rng = np.random.default_rng(21)
    design = case_pool(rng, 200, categorical=False)
    w = np.array([[0.1, 0.5], [0.1, 0.5], [0.1, -0.5], [-0.1, 0.5]])
    first = first_judgments(rng, design, per_rater=200, weights=w,
                            noise=np.array([1.5, 1.5, 0.05, 0.05]))
    by_pair = {(p.rater_a, p.rater_b): p for p in compare_rater_pairs(design, first).pairs}
    noisy = by_pair[("reader000", "reader001")]
    opposed = by_pair[("reader002", "reader003")]
    assert noisy.main_source == "inconsistency" and noisy.g > 0.95
    assert opposed.main_source == "weighting" and opposed.r_s_a > 0.95 and opposed.g < 0.5


def test_constant_rater_gives_empty_figures_and_a_warning():
    design, first = _panel(4)
    first = first.copy()
    first.loc[first.rater == "reader001", "judgment"] = 4.0
    result = compare_rater_pairs(design, first)
    with_constant = [p for p in result.pairs if "reader001" in (p.rater_a, p.rater_b)]
    assert with_constant and all(np.isnan(p.r) and p.main_source is None for p in with_constant)
    assert any("constant judgments" in w for w in result.warnings)
    others = [p for p in result.pairs if "reader001" not in (p.rater_a, p.rater_b)]
    assert all(np.isfinite(p.r) for p in others)
    json.dumps(result.to_dict())  # NaN must become null


def test_no_overlap_gives_an_empty_result_with_a_warning():
    rng = np.random.default_rng(2)
    design = case_pool(rng, 80, categorical=False)
    ids = np.asarray(design.case_ids)
    first = pd.DataFrame({"rater": ["a"] * 40 + ["b"] * 40, "case": ids,
                          "judgment": rng.normal(size=80)})
    result = compare_rater_pairs(design, first)
    assert result.pairs == () and result.n_pairs_eligible == 0
    assert result.warnings and result.to_frame().empty


@pytest.mark.parametrize("change, message", [
    (lambda f: f.drop(columns="judgment"), "lacks column"),
    (lambda f: pd.concat([f, pd.DataFrame({"rater": ["x"], "case": ["nowhere"],
                                           "judgment": [1.0]})]), "absent from the cue design"),
    (lambda f: pd.concat([f, f.iloc[:1]]), "more than one row"),
])
def test_bad_input_raises_a_data_error(change, message):
    design, first = _panel(1)
    with pytest.raises(DataError, match=message):
        compare_rater_pairs(design, change(first))


def test_same_input_same_output():
    design, first = _panel(13)
    shuffled = first.sample(frac=1.0, random_state=3)
    a = compare_rater_pairs(design, first).to_dict()
    b = compare_rater_pairs(design, shuffled).to_dict()
    assert json.dumps(a) == json.dumps(b)


def test_a_dummy_constant_on_the_shared_cases_is_dropped_not_nan():
    # Two raters share only files whose letter is never 'weak': that dummy is constant
    # on their cases. Reference: statsmodels OLS of each rater on the shared cases with
    # that column left out; r, G, C, R as plain Pearson correlations of the pieces.
    rng = np.random.default_rng(21)
    design = case_pool(rng, 150)
    weak = design.columns.index("letter=weak")
    ids = np.asarray(design.case_ids)
    not_weak = ids[design.matrix[:, weak] == 0]
    shared = list(not_weak[:50])
    y = design.matrix @ np.array([0.08, 0.6, 0.4, -0.5])
    row = {c: k for k, c in enumerate(ids)}
    first = pd.concat([
        pd.DataFrame({"rater": who, "case": shared,
                      "judgment": [y[row[c]] for c in shared] + rng.normal(0, sd, 50)})
        for who, sd in (("a", 0.5), ("b", 0.9))])
    result = compare_rater_pairs(design, first)
    (pair,) = result.pairs
    assert pair.dropped_terms == ("letter=weak",)
    assert any("dropped_terms" in w for w in result.warnings)
    X = sm.add_constant(np.delete(design.matrix[design.row_of(shared)], weak, axis=1))
    a = first[first.rater == "a"].judgment.to_numpy()
    b = first[first.rater == "b"].judgment.to_numpy()
    fit_a, fit_b = sm.OLS(a, X).fit(), sm.OLS(b, X).fit()
    expected = {
        "r": np.corrcoef(a, b)[0, 1],
        "g": np.corrcoef(fit_a.fittedvalues, fit_b.fittedvalues)[0, 1],
        "c": np.corrcoef(fit_a.resid, fit_b.resid)[0, 1],
        "r_s_a": np.sqrt(fit_a.rsquared),
        "r_s_b": np.sqrt(fit_b.rsquared),
    }
    for key, value in expected.items():
        assert getattr(pair, key) == pytest.approx(value, abs=1e-10), key
    assert json.loads(json.dumps(pair.to_dict()))["dropped_terms"] == ["letter=weak"]


def test_threshold_counts_cases_per_term_and_says_why_pairs_are_left_out():
    rng = np.random.default_rng(3)
    design = case_pool(rng, 60, categorical=False)
    terms = design.matrix.shape[1]
    ids = np.asarray(design.case_ids)
    y = rng.normal(size=60)
    need = max(int(np.ceil(4 * terms)), terms + 3)
    # a and b share need + 2 cases, a and c share need - 1, b and c none
    first = pd.concat([
        pd.DataFrame({"rater": "a", "case": ids[:2 * need + 1], "judgment": y[:2 * need + 1] + rng.normal(size=2 * need + 1)}),
        pd.DataFrame({"rater": "b", "case": ids[need - 1:2 * need + 1], "judgment": y[need - 1:2 * need + 1]}),
        pd.DataFrame({"rater": "c", "case": ids[:need - 1], "judgment": y[:need - 1]}),
    ])
    result = compare_rater_pairs(design, first)
    assert result.min_shared == need and result.cases_per_term == 4.0 and result.n_terms == terms
    assert [(p.rater_a, p.rater_b, p.n) for p in result.pairs] == [("a", "b", need + 2)]
    assert result.threshold == f"{need} cases (4 per cue term x {terms} terms)"
    assert result.left_out == (f"2 of 3 pairs share fewer than the {result.threshold} needed "
                               f"(1 of them share no case); the most such a pair shares is {need - 1}")
    assert result.to_dict()["threshold"] == result.threshold


def test_no_pair_with_enough_cases_names_the_need_and_the_most_shared():
    rng = np.random.default_rng(4)
    design = case_pool(rng, 30, categorical=False)
    terms = design.matrix.shape[1]
    ids = np.asarray(design.case_ids)
    first = pd.DataFrame({"rater": np.repeat(["a", "b"], 10), "case": np.tile(ids[:10], 2),
                          "judgment": rng.normal(size=20)})
    result = compare_rater_pairs(design, first, cases_per_term=6)
    need = max(6 * terms, terms + 3)
    assert result.pairs == () and result.most_shared == 10
    assert result.left_out == (f"no pair shares the {need} cases (6 per cue term x {terms} terms) "
                               "needed; the most any pair shares is 10")
    assert any(w.startswith("The rater-pairs view is empty: no pair shares") for w in result.warnings)


def test_a_fixed_number_still_keeps_terms_plus_three():
    rng = np.random.default_rng(3)
    design = case_pool(rng, 40, categorical=False)
    terms = design.matrix.shape[1]
    ids = np.asarray(design.case_ids)
    first = pd.DataFrame({"rater": np.repeat(["a", "b"], 40), "case": np.tile(ids, 2),
                          "judgment": rng.normal(size=80)})
    result = compare_rater_pairs(design, first, min_shared=1)
    assert result.min_shared == terms + 3 and result.cases_per_term is None
    assert result.threshold == f"{terms + 3} cases (a fixed number; at least terms + 3 = {terms + 3})"
    assert result.left_out is None


def test_lowest_keys_are_those_of_a_full_sort():
    # the pairs kept above max_pairs come from a partition, not a sort of every pair:
    # the same positions as a stable sort of the keys, ties and infinities included
    from calibrate.panel.pairs import _lowest

    rng = np.random.default_rng(5)
    for trial in range(400):
        n = int(rng.integers(1, 200))
        count = int(rng.integers(1, n + 3))
        key = rng.integers(0, 4, n).astype(float) if trial % 2 else rng.standard_normal(n)
        key[rng.random(n) < 0.2] = np.inf
        expected = np.sort(np.lexsort((np.arange(n), key))[:count])
        np.testing.assert_array_equal(_lowest(key, count), expected)
