"""Invariances of the panel statistics (hypothesis): rater renaming and positive affine changes."""

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from calibrate.agreement.icc import panel_agreement
from calibrate.agreement.readers import variance_components
from calibrate.agreement.offsets import severity


@st.composite
def panels(draw):
    """A random incomplete panel: 3-6 raters, 6-15 cases, 2-3 readers per case."""
    seed = draw(st.integers(0, 10_000))
    n_raters = draw(st.integers(3, 6))
    n_cases = draw(st.integers(6, 15))
    readers = draw(st.integers(2, 3))
    rng = np.random.default_rng(seed)
    chosen = np.argsort(rng.random((n_cases, n_raters)), axis=1)[:, :readers]
    cases = np.repeat(np.arange(n_cases), readers)
    y = rng.normal(0, 1, n_cases)[cases] + rng.normal(0, 0.7, cases.size)
    return pd.DataFrame({"rater": [f"r{i}" for i in chosen.ravel()],
                         "case": [f"c{i:02d}" for i in cases], "judgment": y})


@settings(max_examples=25, deadline=None)
@given(panels(), st.floats(0.1, 10), st.floats(-50, 50))
def test_affine_change_leaves_icc_alpha_unchanged_and_scales_offsets(first, a, b):
    moved = first.assign(judgment=a * first["judgment"] + b)
    one = panel_agreement(first, scale="continuous", n_boot=0, rng=0)
    two = panel_agreement(moved, scale="continuous", n_boot=0, rng=0)
    np.testing.assert_allclose([e.estimate for e in one.icc], [e.estimate for e in two.icc],
                               rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(one.alpha.estimate, two.alpha.estimate, rtol=1e-7, atol=1e-9)
    s1 = severity(first, scale="continuous", scale_min=-10, scale_max=10)
    s2 = severity(moved, scale="continuous", scale_min=-10 * a + b, scale_max=10 * a + b)
    np.testing.assert_allclose([a * r.estimate for r in s1.raters], [r.estimate for r in s2.raters],
                               rtol=1e-7, atol=1e-9)
    c1, c2 = variance_components(first), variance_components(moved)
    np.testing.assert_allclose(a**2 * c1.residual_raw, c2.residual_raw, rtol=1e-6, atol=1e-9)


@settings(max_examples=25, deadline=None)
@given(panels())
def test_renaming_raters_changes_nothing(first):
    renamed = first.assign(rater="z_" + first["rater"].str[::-1])
    one = panel_agreement(first, scale="continuous", n_boot=0, rng=0)
    two = panel_agreement(renamed, scale="continuous", n_boot=0, rng=0)
    np.testing.assert_allclose([e.estimate for e in one.icc], [e.estimate for e in two.icc],
                               rtol=1e-9, atol=1e-12)
    s1 = severity(first, scale="continuous", scale_min=-5, scale_max=5).offsets()
    s2 = severity(renamed, scale="continuous", scale_min=-5, scale_max=5).offsets()
    for name, value in s1.items():
        np.testing.assert_allclose(s2["z_" + name[::-1]], value, rtol=1e-9, atol=1e-12)
