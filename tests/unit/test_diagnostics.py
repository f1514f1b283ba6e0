"""Diagnostics: Holm adjustment, GVIF, condition number, top rows per rater.

Sources: statsmodels ``multipletests(method="holm")`` (Holm 1979); Fox & Monette
(1992): GVIF does not depend on the coding of a categorical cue, and equals
1 / prod(1 - rho_i^2) over the canonical correlations rho_i between the cue's
columns and the other columns (identity from memory, p. 180); pandas
``groupby().nlargest`` for the per-rater selection.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.policy.diagnostics import (
    condition_number,
    top_rows_per_group,
    variance_inflation,
)
from calibrate.pvalues import holm_adjust


def test_holm_matches_statsmodels_and_keeps_nan():
    p = np.array([0.01, 0.04, np.nan, 0.03, 0.2, 0.005])
    finite = np.isfinite(p)
    expected = multipletests(p[finite], method="holm")[1]
    ours = holm_adjust(p)
    np.testing.assert_allclose(ours[finite], expected, rtol=1e-12)
    assert np.isnan(ours[2])
    assert np.isnan(holm_adjust(np.array([np.nan]))).all()


def _categorical_design(reference_swap: bool):
    rng = np.random.default_rng(9)
    n = 300
    x = rng.normal(size=n)
    level = np.where(x + rng.normal(size=n) > 0.3, "high", np.where(x > -0.5, "mid", "low"))
    if reference_swap:  # rename so a different level is the most frequent (the reference)
        counts = pd.Series(level).value_counts()
        level = np.where(level == counts.index[0], "zz", level)
        extra = rng.choice(n, size=60, replace=False)
        level[extra] = "low"
    cases = pd.DataFrame({"x": x, "z": rng.normal(size=n) + 0.5 * x, "band": level})
    design = build_cue_design(cases, [CueRule("x"), CueRule("z"), CueRule("band", "categorical")])
    return design


def _corr(design):
    return np.corrcoef(design.matrix, rowvar=False)[None]


def test_gvif_does_not_depend_on_reference_level():
    design = _categorical_design(False)
    corr = _corr(design)
    _, gvif = variance_inflation(corr, design.cue_groups())
    # Same data, dummies for a different reference level: recode by hand.
    band = design.columns_of("band")
    levels_matrix = design.matrix[:, band]
    reference = 1.0 - levels_matrix.sum(axis=1)
    recoded = np.column_stack([design.matrix[:, :2], reference, levels_matrix[:, 1]])
    _, gvif2 = variance_inflation(np.corrcoef(recoded, rowvar=False)[None], [[0], [1], [2, 3]])
    np.testing.assert_allclose(gvif, gvif2, rtol=1e-10)


def test_gvif_equals_canonical_correlation_form():
    design = _categorical_design(False)
    _, gvif = variance_inflation(_corr(design), design.cue_groups())
    X = design.matrix - design.matrix.mean(axis=0)
    for c, cols in enumerate(design.cue_groups()):
        rest = [j for j in range(X.shape[1]) if j not in cols]
        q1, _ = np.linalg.qr(X[:, cols])
        q2, _ = np.linalg.qr(X[:, rest])
        rho = np.linalg.svd(q1.T @ q2, compute_uv=False)
        assert gvif[0, c] == pytest.approx(1.0 / np.prod(1.0 - rho**2), rel=1e-9)


def test_singular_correlation_gives_nan_not_error():
    corr = np.ones((1, 2, 2))
    vif, gvif = variance_inflation(corr, [[0], [1]])
    assert np.isnan(vif).all() and np.isnan(gvif).all()
    assert np.isinf(condition_number(corr))[0]


def test_top_rows_per_group_matches_pandas():
    rng = np.random.default_rng(1)
    groups = np.repeat(np.arange(7), rng.integers(1, 12, size=7))
    score = rng.random(groups.size)
    score[3] = np.nan
    ours = top_rows_per_group(groups, score, 5)
    frame = pd.DataFrame({"g": groups, "s": score}).dropna()
    expected = frame.groupby("g")["s"].nlargest(5).index.get_level_values(1).to_numpy()
    np.testing.assert_array_equal(ours, expected)
