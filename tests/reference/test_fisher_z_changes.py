"""Fisher's z for two correlations on different cases, against published worked examples."""

import math

import numpy as np
import pytest
from scipy import stats

from calibrate.training import fisher_z_difference


@pytest.mark.parametrize("r1, n1, r2, n2, published, recomputed", [
    # Guilford & Fruchter (1978, p. 164), as listed in REFERENCE-DATA.md: z = 2.19 printed,
    # 2.194 from unrounded intermediate values.
    (0.82, 50, 0.92, 60, 2.19, 2.194),
    # Glass & Stanley (1970, p. 312), as listed in REFERENCE-DATA.md: z = 4.40 printed, 4.418 recomputed.
    (0.28, 78, 0.71, 200, 4.40, 4.418),
])
def test_published_examples(r1, n1, r2, n2, published, recomputed):
    z, p, low, high = fisher_z_difference(r1, n1, r2, n2)
    assert z == pytest.approx(recomputed, abs=5e-4)
    assert z == pytest.approx(published, abs=0.02)
    assert p == pytest.approx(2 * stats.norm.sf(recomputed), rel=1e-2)  # z rounded to 3 decimals
    assert low < r2 - r1 < high


def test_zou_interval_matches_its_formula_written_out():
    # Zou (2007, Psychological Methods 12, 399-413), eq. for independent correlations:
    # L = d - sqrt((r2 - l2)^2 + (u1 - r1)^2), U = d + sqrt((u2 - r2)^2 + (r1 - l1)^2).
    r1, n1, r2, n2 = 0.5, 40, 0.7, 45
    q = stats.norm.ppf(0.975)
    l1, u1 = math.tanh(math.atanh(r1) - q / math.sqrt(n1 - 3)), math.tanh(math.atanh(r1) + q / math.sqrt(n1 - 3))
    l2, u2 = math.tanh(math.atanh(r2) - q / math.sqrt(n2 - 3)), math.tanh(math.atanh(r2) + q / math.sqrt(n2 - 3))
    _, _, low, high = fisher_z_difference(r1, n1, r2, n2)
    assert low == pytest.approx(0.2 - math.sqrt((r2 - l2) ** 2 + (u1 - r1) ** 2))
    assert high == pytest.approx(0.2 + math.sqrt((u2 - r2) ** 2 + (r1 - l1) ** 2))


def test_too_few_cases_gives_nan():
    assert all(np.isnan(fisher_z_difference(0.5, 3, 0.6, 40)))
