"""Cohen (1968), weighted kappa: 3 categories, cell proportions, disagreement weights 0 1 3 / 1 0 6 / 3 6 0.

Kappa .492 and weighted kappa .348 (recomputed .4915 and .3478), as copied in
the shared REFERENCE-DATA.md.
"""

import numpy as np
import pytest

from calibrate.agreement.icc import weighted_kappa
from calibrate.errors import DataError

TABLE = np.array([[0.44, 0.07, 0.09], [0.05, 0.20, 0.05], [0.01, 0.03, 0.06]])
WEIGHTS = np.array([[0, 1, 3], [1, 0, 6], [3, 6, 0]], dtype=float)


def test_unweighted_kappa():
    assert weighted_kappa(TABLE) == pytest.approx(0.4915, abs=5e-5)


def test_weighted_kappa_with_published_weights():
    assert weighted_kappa(TABLE, weights=WEIGHTS) == pytest.approx(0.3478, abs=5e-5)


def test_counts_give_the_same_as_proportions():
    assert weighted_kappa(TABLE * 200, weights=WEIGHTS) == pytest.approx(0.3478, abs=5e-5)


def test_bad_weights_raise():
    with pytest.raises(DataError, match="Kappa weights must be"):
        weighted_kappa(TABLE, weights="cubic")
    with pytest.raises(DataError, match="square"):
        weighted_kappa(TABLE[:2])


def test_two_rater_ac1_on_the_same_table_equals_the_multi_reader_form():
    # Cohen prints no AC1: Gwet's (2008) two-rater AC1 computed from the 3 x 3 table directly
    # (tests/category_identities.py) against calibrate's multi-reader form on the 100 cases
    # the table describes (two readers each), which must reduce to it exactly
    from calibrate.agreement.categories import gwet_ac1
    from tests.category_identities import two_rater_ac1

    cells = np.rint(TABLE * 100).astype(int)
    rows = []
    for (first, second), n in np.ndenumerate(cells):
        row = np.zeros(3)
        row[first] += 1
        row[second] += 1
        rows += [row] * n
    assert len(rows) == 100
    assert gwet_ac1(np.array(rows)) == pytest.approx(two_rater_ac1(TABLE), rel=0, abs=1e-12)
