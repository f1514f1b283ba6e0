"""Williams' T2 and Zou's interval for two dependent correlations sharing a variable.

Sources: Steiger, J. H. (1980), Psychological Bulletin 87, 245-251, eq. 7 (Williams'
T2 on n - 3 df); Zou, G. Y. (2007), Psychological Methods 12, 399-413, eqs. 15-16.
The printed worked examples of both papers could not be read here, so no printed figure
is asserted. The checks are instead against things outside the project: the sampling
distribution itself (trivariate normal samples drawn with numpy; the test's size and the
interval's coverage judged by the 99.9% binomial interval, scipy), a large-sample
identity with the Pearson-Filon covariance of two correlations (Steiger 1980, eq. 3),
and scikit-learn's leave-one-out predictions for the validity the verdict uses.
"""

import numpy as np
import pytest
from scipy import stats

from calibrate.lens.model import dependent_correlation_test, model_versus_rater


def _binomial_band(hits: int, trials: int) -> tuple[float, float]:
    ci = stats.binomtest(hits, trials).proportion_ci(confidence_level=0.999, method="exact")
    return ci.low, ci.high


def _sample_correlations(rng, corr, n, trials):
    """r_jk, r_jh, r_kh of ``trials`` samples of size n from a trivariate normal."""
    L = np.linalg.cholesky(corr)
    data = rng.standard_normal((trials, n, 3)) @ L.T
    data -= data.mean(axis=1, keepdims=True)
    cov = np.einsum("tni,tnj->tij", data, data)
    d = np.sqrt(np.einsum("tii->ti", cov))
    r = cov / (d[:, :, None] * d[:, None, :])
    return r[:, 0, 1], r[:, 0, 2], r[:, 1, 2]


@pytest.mark.parametrize("rho, rho_kh, n", [(0.4, 0.5, 40), (0.2, 0.8, 25), (0.6, 0.3, 80)])
def test_williams_t2_has_its_nominal_size(rho, rho_kh, n):
    rng = np.random.default_rng(1980)
    corr = np.array([[1, rho, rho], [rho, 1, rho_kh], [rho, rho_kh, 1]], dtype=float)
    trials = 4000
    r_jk, r_jh, r_kh = _sample_correlations(rng, corr, n, trials)
    _, _, p, low, high = dependent_correlation_test(r_jk, r_jh, r_kh, np.full(trials, n))
    lo, hi = _binomial_band(int((p < 0.05).sum()), trials)
    assert lo <= 0.055 and hi >= 0.045  # overlaps a 4.5-5.5% band
    lo, hi = _binomial_band(int(((low <= 0) & (high >= 0)).sum()), trials)
    assert lo <= 0.96 and hi >= 0.94


def test_zou_interval_covers_an_unequal_difference():
    rng = np.random.default_rng(2007)
    corr = np.array([[1, 0.55, 0.30], [0.55, 1, 0.45], [0.30, 0.45, 1]])
    trials, n = 4000, 50
    r_jk, r_jh, r_kh = _sample_correlations(rng, corr, n, trials)
    _, _, _, low, high = dependent_correlation_test(r_jk, r_jh, r_kh, np.full(trials, n))
    lo, hi = _binomial_band(int(((low <= 0.25) & (high >= 0.25)).sum()), trials)
    assert lo <= 0.96 and hi >= 0.94


def test_t2_matches_the_pearson_filon_z_in_large_samples():
    # For large n, T2 tends to (r_jk - r_jh) / sqrt(var) with the asymptotic
    # variance 2(1 - r_kh) - 2 * [Pearson-Filon covariance term] (Steiger 1980, eqs. 3 and 9).
    r_jk, r_jh, r_kh, n = 0.5, 0.4, 0.6, 1_000_000
    psi = r_kh * (1 - r_jk**2 - r_jh**2) - 0.5 * r_jk * r_jh * (1 - r_jk**2 - r_jh**2 - r_kh**2)
    var = ((1 - r_jk**2) ** 2 + (1 - r_jh**2) ** 2 - 2 * psi) / n
    t, df, p, _, _ = dependent_correlation_test(r_jk, r_jh, r_kh, n)
    assert df == n - 3
    assert float(t) == pytest.approx((r_jk - r_jh) / np.sqrt(var), rel=0.05)


def test_equal_correlations_give_t_zero_and_a_symmetric_interval():
    t, _, p, low, high = dependent_correlation_test(0.4, 0.4, 0.5, 60)
    assert float(t) == 0.0 and float(p) == pytest.approx(1.0)
    assert float(low) == pytest.approx(-float(high))


@pytest.mark.parametrize("r_a, model, expected", [
    (-0.22, -0.38, "neither_tracks"),  # negative correlations: no winner is named
    (0.05, 0.10, "neither_tracks"),
    (0.40, 0.45, "about_same"),
    (0.30, 0.60, "model_better"),
    (0.60, 0.30, "rater_better"),
])
def test_verdict(r_a, model, expected):
    result = model_versus_rater(r_a, model, 0.6, 120)
    assert result.verdict == expected
    assert result.gain == pytest.approx(model - r_a)
    if expected == "model_better":
        assert result.ci_low > 0 and result.p_value < 0.05
    if expected == "rater_better":
        assert result.ci_high < 0 and result.p_value < 0.05


def test_verdict_not_available_without_numbers():
    assert model_versus_rater(float("nan"), 0.3, 0.5, 40).verdict == "not_available"
