"""Fleiss' kappa and Gwet's AC1 on incomplete designs and at their edges.

Independent checks: statsmodels' fleiss_kappa (and, for AC1, its Fleiss and Randolph
kappas by identity, tests/category_identities.py) where every case has the same number of
readers (different readers per case, as Fleiss 1971 allows); Gwet's (2008) two-rater AC1
on the pooled table where every case has two readers, whoever they are; and a plain loop
over cases written from the varying-readers rule (module notes of
calibrate.agreement.categories) where the number of readers varies.
"""

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.inter_rater import fleiss_kappa as statsmodels_fleiss_kappa

from calibrate.agreement.categories import category_agreement, category_counts, fleiss_kappa, gwet_ac1
from calibrate.agreement.icc import panel_agreement
from calibrate.errors import CalibrateError
from tests.category_identities import ac1_from_statsmodels, two_rater_ac1


def _panel(readers_per_case, n_cases=40, n_raters=6, seed=5):
    rng = np.random.default_rng(seed)
    rows = []
    for c in range(n_cases):
        level = rng.normal()
        k = readers_per_case if isinstance(readers_per_case, int) else int(rng.integers(1, n_raters + 1))
        for r in rng.choice(n_raters, size=k, replace=False):
            rows.append((f"r{r}", f"c{c:02d}", float(np.clip(np.round(4 + 1.5 * level + rng.normal()), 1, 7))))
    return pd.DataFrame(rows, columns=["rater", "case", "judgment"])


def _loop(counts, q):
    """The generalised formulas, one case at a time."""
    agree, n_pairable, shares, n_rated = 0.0, 0, np.zeros(q), 0
    for row in counts:
        r = row.sum()
        if r >= 1:
            shares += row / r
            n_rated += 1
        if r >= 2:
            agree += sum(c * (c - 1) for c in row) / (r * (r - 1))
            n_pairable += 1
    p_a, pi = agree / n_pairable, shares / n_rated
    pe_f, pe_g = (pi**2).sum(), (pi * (1 - pi)).sum() / (q - 1)
    return (p_a - pe_f) / (1 - pe_f), (p_a - pe_g) / (1 - pe_g)


def test_same_number_of_readers_matches_statsmodels():
    counts, _ = category_counts(*_panel(3)[["case", "judgment"]].to_numpy().T, categories=range(1, 8))
    assert fleiss_kappa(counts) == pytest.approx(statsmodels_fleiss_kappa(counts), rel=1e-12)


def test_same_number_of_readers_ac1_matches_statsmodels_by_identity():
    for readers in (2, 3, 6):
        data = _panel(readers)
        counts, _ = category_counts(data["case"], data["judgment"], categories=range(1, 8))
        assert gwet_ac1(counts) == pytest.approx(ac1_from_statsmodels(counts), rel=0, abs=1e-12)


def test_two_readers_per_case_is_gwet_2008_two_rater_ac1_on_the_pooled_table():
    # every case read by two of six raters, a different pair from case to case; the pairs
    # pooled into one 7 x 7 table (first-listed reader in the rows; the order does not matter)
    data = _panel(2, n_cases=60)
    pairs = data.groupby("case")["judgment"].agg(list)
    pooled = pd.crosstab(pairs.str[0], pairs.str[1]).reindex(index=range(1, 8), columns=range(1, 8),
                                                               fill_value=0)
    counts, _ = category_counts(data["case"], data["judgment"], categories=range(1, 8))
    assert data.groupby("case")["rater"].agg(frozenset).nunique() > 5
    assert gwet_ac1(counts) == pytest.approx(two_rater_ac1(pooled.to_numpy()), rel=0, abs=1e-12)
    assert gwet_ac1(counts) == pytest.approx(two_rater_ac1(pooled.to_numpy().T), rel=0, abs=1e-12)


def test_equal_category_shares_make_ac1_kappa_and_randolph_one_number():
    # pi_k = 1/q for every k: all three chance terms are 1/q
    counts = np.array([[2, 1, 0], [0, 2, 1], [1, 0, 2], [3, 0, 0], [0, 3, 0], [0, 0, 3]])
    randolph = statsmodels_fleiss_kappa(counts, method="randolph")
    assert gwet_ac1(counts) == pytest.approx(randolph, rel=0, abs=1e-12)
    assert fleiss_kappa(counts) == pytest.approx(randolph, rel=0, abs=1e-12)


def test_varying_readers_match_the_loop():
    data = _panel("varying")
    counts, cats = category_counts(data["case"], data["judgment"], categories=range(1, 8))
    assert counts.sum(axis=1).min() == 1 and counts.sum(axis=1).max() > 2
    kappa, ac1 = _loop(counts, cats.size)
    assert fleiss_kappa(counts) == pytest.approx(kappa, rel=1e-12)
    assert gwet_ac1(counts) == pytest.approx(ac1, rel=1e-12)


def test_perfect_agreement_and_unused_categories():
    counts = np.array([[3, 0, 0], [0, 3, 0], [0, 0, 3]])
    assert fleiss_kappa(counts) == pytest.approx(1.0)
    assert gwet_ac1(counts) == pytest.approx(1.0)
    # one category nobody used still counts in AC1's chance term, not in kappa's
    padded = np.column_stack([counts, np.zeros(3)])
    assert fleiss_kappa(padded) == pytest.approx(1.0)
    assert gwet_ac1(padded) == pytest.approx(1.0)


def test_ac1_stays_high_where_kappa_drops_under_one_dominant_category():
    # 18 of 20 cases: everyone says 1; two cases split: the prevalence problem AC1 was built for
    counts = np.array([[4, 0]] * 18 + [[2, 2]] * 2)
    assert fleiss_kappa(counts) < 0.5 < 0.9 < gwet_ac1(counts)


def test_values_outside_the_categories_are_a_user_error():
    with pytest.raises(CalibrateError, match="not among the categories"):
        category_counts(["a", "a"], [1.0, 9.0], categories=[1, 2, 3])


def test_panel_agreement_carries_both_on_ordinal_and_binary_not_on_continuous():
    data = _panel("varying")
    ordinal = panel_agreement(data, scale="ordinal", scale_min=1, scale_max=7, rng=1)
    assert set(ordinal.category_values()) == {"fleiss_kappa", "gwet_ac1"}
    assert all(np.isfinite(v) for v in ordinal.category_values().values())
    assert {"Fleiss' kappa", "Gwet's AC1"} <= set(ordinal.to_frame()["coefficient"])
    binary = data.assign(judgment=(data["judgment"] >= 4).astype(float))
    assert np.isfinite(panel_agreement(binary, scale="binary", rng=1).category_values()["gwet_ac1"])
    continuous = panel_agreement(data, scale="continuous", rng=1)
    assert continuous.category_values() == {"fleiss_kappa": None, "gwet_ac1": None}
    assert continuous.to_dict()["category_detail"] == []


def test_leave_one_out_shortcut_equals_refitting_without_each_case():
    from calibrate.agreement.categories import _case_terms, _coefficients, _leave_one_out

    data = _panel("varying")
    counts, _ = category_counts(data["case"], data["judgment"], categories=range(1, 8))
    terms = _case_terms(counts)
    n = counts.shape[0]
    refit = np.column_stack(_coefficients(*terms, 1.0 - np.eye(n)))
    assert np.allclose(np.column_stack(_leave_one_out(*terms)), refit, rtol=0, atol=1e-12, equal_nan=True)


def test_bca_interval_covers_on_few_cases_seeded_small_version():
    # the small seeded version of benchmarks/bench_category_agreement_coverage.py (1,000 panels
    # there): 1-7 with a ceiling, 30 cases each read by 3 of 6 raters, 80 panels here
    from scipy import stats

    from tests.unit.category_simulation import simulate, truth

    true_values = truth(3, False, n_truth=60_000)
    rng = np.random.default_rng(20261203)
    hits = np.zeros(2)
    for _ in range(80):
        found = category_agreement(simulate(rng, 30, 3, False), categories=range(1, 8), n_boot=300, rng=rng)
        hits += [c.ci_low <= t <= c.ci_high for c, t in zip(found, true_values)]
    upper = stats.beta.ppf(0.9995, hits + 1, 80 - hits)   # 99.9% Clopper-Pearson upper bound
    assert (upper >= 0.93).all(), hits / 80
    assert (hits / 80 <= 0.995).all(), hits / 80          # not trivially wide


def test_one_category_only_gives_no_interval_and_no_warning():
    # every reader chose 7: kappa is 0/0 (undefined); AC1's chance term is 0, so AC1 = 1
    data = pd.DataFrame({"rater": ["a", "b", "a", "b"], "case": ["x", "x", "y", "y"], "judgment": [7.0] * 4})
    kappa, ac1 = category_agreement(data, categories=range(1, 8), n_boot=50, rng=1)
    assert np.isnan(kappa.estimate) and np.isnan(kappa.ci_low) and np.isnan(kappa.ci_high)
    assert ac1.estimate == pytest.approx(1.0)
