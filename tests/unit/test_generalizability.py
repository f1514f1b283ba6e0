"""Variance components (Henderson's method III), D-study and flip rates."""

import numpy as np
import pytest
from panel_simulation import long_from_matrix, simulate_panel
from scipy.stats import norm

from calibrate.agreement.readers import (
    d_study_coefficients,
    flip_rates,
    generalizability,
    henderson_components,
)
from calibrate.agreement.offsets import crossed_layout, fit_additive


def _dense_henderson(first):
    """Independent dense implementation: explicit projections and trace coefficients.

    Henderson's method III (Searle, Casella & McCulloch 1992, sec. 5.5, from memory):
    E[y'(P_full - P_case) y] = tr(Z_r'(I - P_case) Z_r) s2_r + rank diff * s2_e, etc.
    """
    cases = first["case"].astype("category").cat.codes.to_numpy()
    raters = first["rater"].astype("category").cat.codes.to_numpy()
    y = first["judgment"].to_numpy()
    n = y.size
    Zc = np.eye(cases.max() + 1)[cases]
    Zr = np.eye(raters.max() + 1)[raters]

    def proj(X):
        return X @ np.linalg.pinv(X)

    P_c, P_r, P_f = proj(Zc), proj(np.column_stack([np.ones(n), Zr])), proj(np.column_stack([Zc, Zr]))
    rank = np.linalg.matrix_rank
    df_e = n - rank(np.column_stack([Zc, Zr]))
    s2_e = y @ (np.eye(n) - P_f) @ y / df_e
    red_r = y @ (P_f - P_c) @ y
    red_c = y @ (P_f - P_r) @ y
    k_r = np.trace(Zr.T @ (np.eye(n) - P_c) @ Zr)
    k_c = np.trace(Zc.T @ (np.eye(n) - P_r) @ Zc)
    df_r = rank(np.column_stack([Zc, Zr])) - rank(Zc)
    df_c = rank(np.column_stack([Zc, Zr])) - rank(np.column_stack([np.ones(n), Zr]))
    return (red_c - df_c * s2_e) / k_c, (red_r - df_r * s2_e) / k_r, s2_e


def test_components_match_dense_projection_formulas_on_incomplete_design():
    first, _, _ = simulate_panel(n_raters=9, n_cases=45, readers=3, seed=4)
    first = first.iloc[5:]   # some cases lose a reader: unequal readers per case
    comps = henderson_components(fit_additive(crossed_layout(first)))
    case, rater, residual = _dense_henderson(first)
    assert comps.case == pytest.approx(case, rel=1e-9)
    assert comps.rater == pytest.approx(rater, rel=1e-9)
    assert comps.residual == pytest.approx(residual, rel=1e-9)


def test_components_are_unbiased_in_planted_simulation():
    # planted components 1.0 (case), 0.25 (rater), 0.36 (residual); mean over 60 panels
    estimates = []
    for seed in range(60):
        first, _, _ = simulate_panel(n_raters=15, n_cases=120, readers=3, case_sd=1.0,
                                     rater_sd=0.5, noise_sd=0.6, seed=100 + seed)
        c = henderson_components(fit_additive(crossed_layout(first)))
        estimates.append((c.case, c.rater, c.residual))
    mean = np.mean(estimates, axis=0)
    se = np.std(estimates, axis=0, ddof=1) / np.sqrt(len(estimates))
    # centring the planted offsets leaves their (n - 1)-divisor variance, which the estimator targets
    planted = np.array([1.0, 0.25, 0.36])
    assert np.all(np.abs(mean - planted) < 4 * se)


def test_d_study_equals_average_measure_icc_on_complete_design():
    # identity: E rho^2(k) = ICC(C,k), Phi(k) = ICC(A,k) at the observed k (no truncation)
    pingouin = pytest.importorskip("pingouin")
    first, _, _ = simulate_panel(n_raters=5, n_cases=30, readers=5, seed=9)
    g = generalizability(first)
    assert not g.components.set_to_zero
    ref = pingouin.intraclass_corr(first, targets="case", raters="rater", ratings="judgment")
    ref = ref.set_index("Type")["ICC"]
    assert g.d_study[4].g_rel == pytest.approx(ref["ICC(C,k)"], abs=1e-10)
    assert g.d_study[4].phi == pytest.approx(ref["ICC(A,k)"], abs=1e-10)


def test_readers_needed_is_the_first_k_reaching_the_target():
    first, _, _ = simulate_panel(n_raters=20, n_cases=300, readers=3, seed=3,
                                 case_sd=1.0, rater_sd=0.4, noise_sd=1.0)
    g = generalizability(first)
    c = g.components
    for name in ("g_rel", "phi"):
        for target in ("0.70", "0.80"):
            k = g.readers_needed[name][target]
            g_rel, phi = d_study_coefficients(c.case, c.rater, c.residual, [k - 1, k])
            values = g_rel if name == "g_rel" else phi
            assert values[1] >= float(target) and (k == 1 or values[0] < float(target))


def test_negative_component_is_set_to_zero_and_said():
    # two raters with identical means: SS(raters) = 0, so sigma2_r = -MSE / n < 0 exactly
    ratings = np.array([[1.0, 2.0], [2.0, 1.0], [3.0, 4.0], [4.0, 3.0], [5.0, 5.5], [5.5, 5.0]])
    first = long_from_matrix(ratings)
    g = generalizability(first)
    mse = np.var(ratings[:, 0] - ratings[:, 1], ddof=1) / 2   # residual MS of a 2-column layout
    assert g.components.rater_raw == pytest.approx(-mse / 6, rel=1e-10)
    assert g.components.set_to_zero == ("rater",)
    assert g.components.rater == 0.0
    assert any("rater variance component came out negative" in w for w in g.warnings)


def _flip_closed_form(rater, residual, k, near):
    """P(two reader sets disagree) = mean over t ~ U(-h, h) of 2 p (1 - p), p = Phi(t / s)."""
    s = np.sqrt((rater + residual) / k)
    nodes, weights = np.polynomial.legendre.leggauss(200)
    p = norm.cdf(near * nodes / s)
    return float(np.sum(weights * 2 * p * (1 - p)) / 2)


def test_flip_rates_match_closed_form():
    rows = flip_rates(0.3, 0.8, cut_off=4.0, near=0.5, n_sim=40000, rng=7)
    for row in rows:
        exact = _flip_closed_form(0.3, 0.8, row.raters, 0.5)
        assert abs(row.flip_rate - exact) < 4 * row.se
        adjusted = _flip_closed_form(0.0, 0.8, row.raters, 0.5)
        assert abs(row.flip_rate_adjusted - adjusted) < 4 * row.se + 1e-3
    assert rows[0].flip_rate > rows[-1].flip_rate


def test_same_seed_same_numbers_and_json():
    import json

    first, _, _ = simulate_panel(n_raters=8, n_cases=80, readers=3, seed=1)
    a = generalizability(first, cut_off=0.0, rng=5, n_sim=2000)
    b = generalizability(first, cut_off=0.0, rng=5, n_sim=2000)
    assert json.dumps(a.to_dict()) == json.dumps(b.to_dict())
    payload = a.to_dict()
    assert set(payload["variance_components"]) >= {"case", "rater", "residual"}
    assert [row["raters"] for row in payload["d_study"]] == list(range(1, 11))
    assert set(payload["d_study"][0]) == {"raters", "g_rel", "phi"}
    assert len(payload["flips"]) == 5
    assert len(a.to_frame()) == 10
