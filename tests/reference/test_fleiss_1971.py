"""Fleiss (1971), Psychological Bulletin 76:378-382: 30 patients x 6 psychiatrists x 5 diagnoses.

The table is Fleiss' own layout: for each patient, how many of the six psychiatrists chose
each diagnosis (depression, personality disorder, schizophrenia, neurosis, other). Typed from
the 30 x 6 diagnoses table of statsmodels' test suite (statsmodels/stats/tests/
test_inter_rater.py, marked "Fleiss 1971"), counted per diagnosis. Fleiss prints kappa = .430;
statsmodels.stats.inter_rater.fleiss_kappa gives 0.43024 on the same counts.
Fleiss prints no AC1; it is checked against statsmodels' Fleiss and Randolph kappas by
exact identities (tests/category_identities.py says which steps are algebra and which
rest on Gwet's 2008 definition).
"""

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.inter_rater import fleiss_kappa as statsmodels_fleiss_kappa

from calibrate.agreement.categories import category_agreement, fleiss_kappa, gwet_ac1
from tests.category_identities import ac1_from_statsmodels

COUNTS = np.array([
    [0, 0, 0, 6, 0], [0, 3, 0, 0, 3], [0, 1, 4, 0, 1], [0, 0, 0, 0, 6], [0, 3, 0, 3, 0],
    [2, 0, 4, 0, 0], [0, 0, 4, 0, 2], [2, 0, 3, 1, 0], [2, 0, 0, 4, 0], [0, 0, 0, 0, 6],
    [1, 0, 0, 5, 0], [1, 1, 0, 4, 0], [0, 3, 3, 0, 0], [1, 0, 0, 5, 0], [0, 2, 0, 3, 1],
    [0, 0, 5, 0, 1], [3, 0, 0, 1, 2], [5, 1, 0, 0, 0], [0, 2, 0, 4, 0], [1, 0, 2, 0, 3],
    [0, 0, 0, 0, 6], [0, 1, 0, 5, 0], [0, 2, 0, 1, 3], [2, 0, 0, 4, 0], [1, 0, 0, 4, 1],
    [0, 5, 0, 1, 0], [4, 0, 0, 0, 2], [0, 2, 0, 4, 0], [1, 0, 5, 0, 0], [0, 0, 0, 0, 6],
])
PUBLISHED_KAPPA = 0.430  # Fleiss (1971)


def _long(counts):
    """One row per psychiatrist and patient (who chose what is not in Fleiss' table; it does not matter)."""
    rows = []
    for patient, row in enumerate(counts):
        chosen = np.repeat(np.arange(1, counts.shape[1] + 1), row)
        rows += [(f"psy{j + 1}", f"p{patient + 1:02d}", float(v)) for j, v in enumerate(chosen)]
    return pd.DataFrame(rows, columns=["rater", "case", "judgment"])


def test_the_typed_table_is_fleiss_design():
    assert COUNTS.shape == (30, 5)
    assert (COUNTS.sum(axis=1) == 6).all()


def test_kappa_matches_the_published_figure_and_statsmodels():
    assert fleiss_kappa(COUNTS) == pytest.approx(PUBLISHED_KAPPA, abs=5e-4)
    assert fleiss_kappa(COUNTS) == pytest.approx(statsmodels_fleiss_kappa(COUNTS), rel=1e-12)


def test_ac1_matches_a_computation_from_gwet_2008_formula():
    # Gwet (2008), Br. J. Math. Stat. Psychol. 61:29-48: AC1 = (p_a - p_e) / (1 - p_e),
    # p_e = sum_k pi_k (1 - pi_k) / (q - 1); written out here case by case, apart from the module
    n, q = COUNTS.shape[0], COUNTS.shape[1]
    p_a = sum(sum(c * (c - 1) for c in row) / (6 * 5) for row in COUNTS) / n
    pi = [sum(row[k] / 6 for row in COUNTS) / n for k in range(q)]
    p_e = sum(p * (1 - p) for p in pi) / (q - 1)
    assert gwet_ac1(COUNTS) == pytest.approx((p_a - p_e) / (1 - p_e), rel=1e-12)


def test_ac1_matches_statsmodels_by_identity():
    # p_a from statsmodels' Randolph kappa, sum pi_k^2 from its Fleiss kappa (Fleiss 1971's table)
    assert gwet_ac1(COUNTS) == pytest.approx(ac1_from_statsmodels(COUNTS), rel=0, abs=1e-12)


def test_panel_coefficients_from_the_long_table():
    results = {c.coefficient: c for c in category_agreement(_long(COUNTS), categories=[1, 2, 3, 4, 5],
                                                            n_boot=200, rng=3)}
    kappa = results["fleiss_kappa"]
    assert kappa.estimate == pytest.approx(PUBLISHED_KAPPA, abs=5e-4)
    assert kappa.ci_low < kappa.estimate < kappa.ci_high
    assert (kappa.n_cases, kappa.n_categories, kappa.readers_min, kappa.readers_max) == (30, 5, 6, 6)
    assert results["gwet_ac1"].estimate == pytest.approx(gwet_ac1(COUNTS), rel=1e-12)
