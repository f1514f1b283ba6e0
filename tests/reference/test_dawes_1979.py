"""Unit-weight composite as the panel baseline (Dawes 1979, American Psychologist 34:571-582).

Dawes's improper linear model: standardize every predictor, give it weight +1 or -1
by its expected direction, add. Recomputed here directly with numpy (z-scores over
the cases with a criterion) and compared.
"""

import numpy as np
import pandas as pd
import pytest

from calibrate.data.cues import build_cue_design
from calibrate.lens.model import lens_model
from tests.simulated_panels import case_pool, rules_for


def _setup(seed):
    rng = np.random.default_rng(seed)
    cases = case_pool(rng, 120)
    design = build_cue_design(cases, rules_for(cases))
    X = design.matrix
    criterion = 0.05 * X[:, 0] - 0.4 * X[:, 1] + 0.2 * X[:, 2] + rng.standard_normal(120)
    criterion[:20] = np.nan
    first = pd.DataFrame({"rater": "solo", "case": list(design.case_ids),
                          "judgment": X @ np.array([0.1, -0.2, 0.3]) + rng.standard_normal(120)})
    return design, first, pd.Series(criterion, index=list(design.case_ids))


def _direct(design, criterion, signs):
    known = np.isfinite(criterion.to_numpy())
    X = design.matrix[known]
    z = (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)
    return np.corrcoef(z @ signs, criterion.to_numpy()[known])[0, 1]


def test_unit_weights_signed_by_ecological_validity():
    design, first, criterion = _setup(3)
    result = lens_model(design, first, criterion)
    assert list(result.unit_weight_signs.values()) == [1.0, -1.0, 1.0]
    assert result.unit_weight_validity == pytest.approx(_direct(design, criterion, np.array([1, -1, 1])),
                                                        abs=1e-12)
    # the only rater saw every case, so the rater's unit-weight figure is the panel's
    assert result.raters[0].unit_weight_validity == pytest.approx(result.unit_weight_validity, abs=1e-12)


def test_rubric_signs_override_ecological_validity():
    design, first, criterion = _setup(3)
    result = lens_model(design, first, criterion, rubric={"grades": 0.5, "essay": 0.5})
    assert list(result.unit_weight_signs.values()) == [1.0, 1.0, 1.0]
    assert result.unit_weight_validity == pytest.approx(_direct(design, criterion, np.ones(3)), abs=1e-12)
