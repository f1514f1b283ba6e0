"""The change in r_a when a rater judged the same cases against the same outcome in both
phases: Williams' T2 (Steiger 1980, eq. 7), as compare uses it.

No printed worked example of this test is in REFERENCE-DATA.md; the figures R's psych
package prints for the same test are checked in `test_psych_r_test.py`. The checks here are
a second derivation of the same test and its size on the data users have:

- Meng, Rosenthal & Rubin (1992, Psychological Bulletin 111, 172-175) give a z test of
  two correlated correlations on Fisher's z scale; the formula below is written from
  memory (z = (z1 - z2) sqrt((n - 3) / (2 (1 - r_x) h)), h = (1 - f rbar^2)/(1 - rbar^2),
  f = min((1 - r_x) / (2 (1 - rbar^2)), 1)). The two tests are derived differently and
  must agree closely on the same numbers in large samples.
- Under no change, on 1-7 ratings with a ceiling, p < .05 in about 5% (the benchmark
  runs 2,000 comparisons; here 400, judged by the 99.9% binomial band).
"""

import math

import numpy as np
import pytest
from scipy import stats

from calibrate.lens.model import dependent_correlation_test


def _meng_rosenthal_rubin_z(r1, r2, r_x, n):
    rbar2 = (r1 ** 2 + r2 ** 2) / 2
    f = min((1 - r_x) / (2 * (1 - rbar2)), 1.0)
    h = (1 - f * rbar2) / (1 - rbar2)
    return (math.atanh(r1) - math.atanh(r2)) * math.sqrt((n - 3) / (2 * (1 - r_x) * h))


@pytest.mark.parametrize("r1, r2, r_x, n", [(0.45, 0.42, 0.60, 4000), (0.20, 0.23, 0.80, 8000),
                                             (0.55, 0.53, 0.40, 6000)])
def test_williams_t2_agrees_with_meng_rosenthal_rubin_in_large_samples(r1, r2, r_x, n):
    # Near no change (the local alternatives a test's size and power are about), where the
    # r scale and Fisher's z scale differ only by the slope of atanh.
    t, df, p, _, _ = dependent_correlation_test(r1, r2, r_x, n)
    z = _meng_rosenthal_rubin_z(r1, r2, r_x, n)
    assert float(t) == pytest.approx(z, rel=0.02)
    assert float(p) == pytest.approx(2 * stats.norm.sf(abs(z)), rel=0.05)


def test_size_under_no_change_on_a_ceiling_scale():
    rng = np.random.default_rng(1992)
    runs, n, hits = 400, 40, 0
    for _ in range(runs):
        case = rng.normal(0, 1, n)
        outcome = 0.6 * case + rng.normal(0, 0.8, n)
        before = np.clip(np.round(4.8 + 1.2 * (case + rng.normal(0, 0.9, n))), 1, 7)
        after = np.clip(np.round(4.8 + 1.2 * (case + rng.normal(0, 0.9, n))), 1, 7)
        r_b, r_a, r_ab = (np.corrcoef(u, v)[0, 1] for u, v in
                          ((outcome, before), (outcome, after), (before, after)))
        hits += dependent_correlation_test(r_a, r_b, r_ab, n)[2] < 0.05
    ci = stats.binomtest(hits, runs).proportion_ci(0.999)
    assert ci.low <= 0.05 <= ci.high
