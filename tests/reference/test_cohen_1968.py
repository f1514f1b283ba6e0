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
