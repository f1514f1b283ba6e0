"""The Lens Model Equation (Tucker 1964) and the lens-model parts behind it.

Tucker, L. R. (1964), Psychological Review 71:528-530: with both linear models
fitted by least squares on the same cases,
r_a = G R_e R_s + C sqrt(1 - R_e^2) sqrt(1 - R_s^2) holds exactly. Every part is
also recomputed here, rater by rater, with statsmodels OLS (an independent
general-purpose library) from fitted values and residuals.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from calibrate.lens.model import lens_model
from tests.simulated_panels import demo_phases, linear_panel


def _criterion(panel, rng, *, known_share=1.0):
    X = panel.design.matrix
    value = X[:, 0] * 0.05 + X[:, 1] * 0.3 + rng.standard_normal(X.shape[0])
    value[rng.random(X.shape[0]) > known_share] = np.nan
    return pd.Series(value, index=list(panel.design.case_ids))


@pytest.mark.parametrize("categorical", [False, True])
def test_lens_model_equation_holds_on_incomplete_random_panels(categorical):
    # Identity: Tucker (1964), eq. for r_a; exact to rounding for OLS on the same cases.
    rng = np.random.default_rng(11)
    weights = np.array([0.1, 0.5, 0.2] + ([0.3, -0.4] if categorical else []))
    panel = linear_panel(rng, n_cases=300, n_raters=25, per_rater=60, weights=weights,
                         noise=rng.uniform(0.2, 2.0, 25), categorical=categorical)
    result = lens_model(panel.design, panel.first, _criterion(panel, rng, known_share=0.7))
    errors = np.array([r.lme_error for r in result.raters])
    assert np.all(np.isfinite(errors))
    assert errors.max() < 1e-9
    for r in result.raters:
        rebuilt = r.g * r.r_e * r.r_s + r.c * np.sqrt(1 - r.r_e**2) * np.sqrt(1 - r.r_s**2)
        assert rebuilt == pytest.approx(r.r_a, abs=1e-9)
        # model validity is G * R_e (corr of the rater model's prediction with the criterion)
        assert r.model_validity == pytest.approx(r.g * r.r_e, abs=1e-12)


def test_lens_parts_match_statsmodels_per_rater():
    # Independent reference: statsmodels OLS fitted values / residuals, numpy corrcoef.
    rng = np.random.default_rng(5)
    panel = linear_panel(rng, n_cases=200, n_raters=6, per_rater=70,
                         weights=np.array([0.1, 0.4, -0.3, 0.5, 0.2]), noise=0.8, categorical=True)
    criterion = _criterion(panel, rng, known_share=0.8)
    result = lens_model(panel.design, panel.first, criterion)
    for name, rows in panel.rater_rows.items():
        c = criterion.to_numpy()[rows]
        keep = np.isfinite(c)
        X = sm.add_constant(panel.design.matrix[rows][keep])
        y = panel.first.loc[panel.first.rater == name, "judgment"].to_numpy()[keep]
        fit_s, fit_e = sm.OLS(y, X).fit(), sm.OLS(c[keep], X).fit()
        ours = result.for_rater(name)
        assert ours.n == keep.sum()
        assert ours.r_a == pytest.approx(np.corrcoef(y, c[keep])[0, 1], abs=1e-10)
        assert ours.r_s == pytest.approx(np.sqrt(fit_s.rsquared), abs=1e-10)
        assert ours.r_e == pytest.approx(np.sqrt(fit_e.rsquared), abs=1e-10)
        assert ours.g == pytest.approx(np.corrcoef(fit_s.fittedvalues, fit_e.fittedvalues)[0, 1], abs=1e-10)
        assert ours.c == pytest.approx(np.corrcoef(fit_s.resid, fit_e.resid)[0, 1], abs=1e-10)
        assert ours.model_validity == pytest.approx(np.corrcoef(fit_s.fittedvalues, c[keep])[0, 1], abs=1e-10)


def test_environment_model_matches_statsmodels():
    # Independent reference: statsmodels OLS of the criterion on the judged cases with a
    # criterion (cases of the design that nobody judged stay out of the environment).
    rng = np.random.default_rng(8)
    panel = linear_panel(rng, n_cases=150, n_raters=3, per_rater=50, weights=np.array([.1, .2, .3]),
                         noise=1.0)
    criterion = _criterion(panel, rng, known_share=0.6)
    env = lens_model(panel.design, panel.first, criterion).environment
    judged = np.isin(np.asarray(panel.design.case_ids), panel.first["case"].unique())
    assert not judged.all()  # the check below needs unjudged cases to mean anything
    known = np.isfinite(criterion.to_numpy()) & judged
    X = panel.design.matrix[known]
    fit = sm.OLS(criterion.to_numpy()[known], sm.add_constant(X)).fit()
    assert env.n == known.sum()
    assert env.r_e == pytest.approx(np.sqrt(fit.rsquared), abs=1e-10)
    assert np.allclose(list(env.weights.values()), fit.params[1:], atol=1e-10)
    validities = [np.corrcoef(X[:, j], criterion.to_numpy()[known])[0, 1] for j in range(3)]
    assert np.allclose(list(env.ecological_validities.values()), validities, atol=1e-12)


def test_lens_model_equation_holds_on_the_demo():
    # Identity on the invented demo study (Tucker 1964), both phases.
    for _, design, first, pool in demo_phases():
        result = lens_model(design, first, pool["first_year_result"], criterion_selected=True, n_boot=0)
        assert result.max_lme_error < 1e-9
        assert len(result.raters) == 14
        assert any("biased" in c for c in result.cautions)
