"""Properties of the lens model, rubric alignment, excluded and cutoff checks (hypothesis)."""

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from calibrate.lens.cutoffs import cutoff_check
from calibrate.lens.model import lens_model
from calibrate.lens.rubric import excluded_check, rubric_alignment
from tests.simulated_panels import linear_panel

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _panel(seed, n_raters, per_rater, noise):
    rng = np.random.default_rng(seed)
    panel = linear_panel(rng, n_cases=80, n_raters=n_raters, per_rater=per_rater,
                         weights=rng.normal(size=3), noise=noise)
    criterion = pd.Series(panel.design.matrix @ rng.normal(size=3) + rng.standard_normal(80),
                          index=list(panel.design.case_ids))
    return panel, criterion


@SETTINGS
@given(seed=st.integers(0, 2**31), n_raters=st.integers(1, 6), per_rater=st.integers(12, 80),
       noise=st.floats(0.05, 5.0))
def test_lens_model_equation_holds_for_any_panel(seed, n_raters, per_rater, noise):
    # Identity (Tucker 1964) on arbitrary incomplete designs.
    panel, criterion = _panel(seed, n_raters, per_rater, noise)
    result = lens_model(panel.design, panel.first, criterion, n_boot=0)
    assert result.max_lme_error < 1e-9
    for r in result.raters:
        assert abs(r.model_validity - r.g * r.r_e) < 1e-9


@SETTINGS
@given(seed=st.integers(0, 2**31), scale=st.floats(0.01, 100.0), shift=st.floats(-50.0, 50.0))
def test_positive_affine_change_of_judgments_changes_nothing(seed, scale, shift):
    # Correlations, shares and F tests are invariant to a positive affine change of y.
    panel, criterion = _panel(seed, 3, 50, 1.0)
    moved = panel.first.assign(judgment=shift + scale * panel.first.judgment)
    excluded = pd.DataFrame({"other": np.random.default_rng(seed).normal(size=80)},
                            index=list(panel.design.case_ids))
    rubric = {"grades": 0.2, "essay": 0.5, "years": 0.3}
    for before, after in [
        (lens_model(panel.design, panel.first, criterion, n_boot=50).to_frame(),
         lens_model(panel.design, moved, criterion, n_boot=50).to_frame()),
        (rubric_alignment(panel.design, panel.first, rubric).to_frame(),
         rubric_alignment(panel.design, moved, rubric).to_frame()),
        (excluded_check(panel.design, panel.first, excluded).to_frame(),
         excluded_check(panel.design, moved, excluded).to_frame()),
        (cutoff_check(panel.design, panel.first, rng=3, n_sim=49).to_frame().drop(columns="step"),
         cutoff_check(panel.design, moved, rng=3, n_sim=49).to_frame().drop(columns="step")),
    ]:
        numeric = before.select_dtypes("number").columns
        assert np.allclose(before[numeric].to_numpy(float), after[numeric].to_numpy(float),
                           rtol=1e-6, atol=1e-8, equal_nan=True)
