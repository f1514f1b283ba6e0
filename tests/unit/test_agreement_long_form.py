"""The agreement stage works from the long form: the block-wise robust offset variances,
the shared factor of the parametric bootstrap and the category counts by one bincount
give the same numbers as the whole-table code they replaced (kept here as the reference)."""

from dataclasses import replace

import numpy as np
import pytest
from panel_simulation import simulate_panel

from calibrate.agreement import offsets
from calibrate.agreement.icc import (
    _bounds_below,
    alpha_parametric_draws,
    icc_parametric_draws,
    krippendorff_alpha,
    parametric_panels,
)
from calibrate.agreement.offsets import (
    check_first,
    crossed_layout,
    fit_additive,
    fit_additive_many,
    fixed_design,
    robust_offset_variance,
)
from calibrate.agreement.readers import henderson_components


def _robust_variance_whole_table(layout, fit, form):
    """The previous implementation: an (R, C) table of A^+ m_c for every case at once."""
    pinv = np.nan_to_num(fit.offset_cov_unit)
    ri, ci, y = layout.rater_index, layout.case_index, layout.y
    n_c = layout.readers_per_case()
    b = np.nan_to_num(fit.offsets)
    share = layout.incidence(1.0 / n_c[ci])
    pinv_m = np.asarray((share.T @ pinv).T)
    quad_case = np.asarray(share.multiply(pinv_m).sum(axis=0)).ravel()
    leverage = 1.0 / n_c[ci] + np.diag(pinv)[ri] - 2.0 * pinv_m[ri, ci] + quad_case[ci]
    case_mean = np.bincount(ci, weights=y, minlength=layout.n_cases) / n_c
    mean_offset = np.bincount(ci, weights=b[ri], minlength=layout.n_cases) / n_c
    resid = y - case_mean[ci] - (b[ri] - mean_offset[ci])
    free = 1.0 - leverage
    power = {"HC2": 1.0, "HC3": 2.0}[form]
    omega = np.where(free > 1e-9, resid**2 / np.where(free > 1e-9, free, 1.0) ** power, 0.0)
    gain = pinv[ri, :] - pinv_m[:, ci].T
    variance = omega @ gain**2
    variance[fit.part_of_rater < 0] = np.nan
    return variance


PANELS = {
    "complete": dict(n_raters=6, n_cases=30, readers=6, seed=3),
    "incomplete": dict(n_raters=12, n_cases=60, readers=3, seed=4),
    "two readers": dict(n_raters=9, n_cases=45, readers=2, seed=8),
}


@pytest.mark.parametrize("panel", sorted(PANELS))
@pytest.mark.parametrize("form", ["HC2", "HC3"])
@pytest.mark.parametrize("block", [7, 50, 2_000_000])
def test_robust_variances_by_blocks_equal_the_whole_table(monkeypatch, panel, form, block):
    first, _, _ = simulate_panel(**PANELS[panel])
    layout = crossed_layout(check_first(first))
    fit = fit_additive(layout, with_variance=True)
    expected = _robust_variance_whole_table(layout, fit, form)
    monkeypatch.setattr(offsets, "ROBUST_BLOCK_VALUES", block * layout.n_raters)
    got = robust_offset_variance(layout, fit, form)
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=0)


def test_batches_sharing_one_factor_equal_a_fresh_factor_each():
    first, _, _ = simulate_panel(n_raters=10, n_cases=50, readers=3, seed=9)
    layout = crossed_layout(check_first(first))
    ys = np.random.default_rng(1).normal(size=(layout.y.size, 4))
    shared = fit_additive_many(layout, ys, fixed_design(layout))
    fresh = fit_additive_many(layout, ys)
    for name in ("ss_total", "ss_within_cases", "ss_raters", "ss_rater_given_case", "ss_residual"):
        np.testing.assert_array_equal(getattr(shared, name), getattr(fresh, name))
    np.testing.assert_array_equal(shared.offsets, fresh.offsets)


def test_icc_draws_equal_one_fit_per_simulated_panel():
    # exact identity: each draw is the ICC of fit_additive on that simulated panel
    first, _, _ = simulate_panel(n_raters=8, n_cases=40, readers=3, seed=2)
    layout = crossed_layout(check_first(first))
    comps = henderson_components(fit_additive(layout))
    draws = icc_parametric_draws(layout, comps, 3.0, 5, np.random.default_rng(4))
    (_, ys), = parametric_panels(layout, comps, 5, np.random.default_rng(4))
    for b in range(5):
        one = henderson_components(fit_additive(replace(layout, y=ys[:, b])))
        assert draws[b, 1] == pytest.approx(one.case / (one.case + one.rater + one.residual), rel=1e-9)


def test_bounds_below_equals_searchsorted_with_ties_on_the_bounds():
    bounds = np.arange(1.5, 7.0, 1.0)
    rng = np.random.default_rng(0)
    values = np.concatenate([rng.normal(4, 3, 500), bounds, [-1e9, 1e9]]).reshape(-1, 2)
    np.testing.assert_array_equal(_bounds_below(bounds, values), np.searchsorted(bounds, values))


def test_category_counts_by_bincount_equal_counting_each_category():
    # alpha on ordinal panels from the bincount counts equals the coincidence count per category
    first, _, _ = simulate_panel(n_raters=7, n_cases=35, readers=3, seed=6)
    first["judgment"] = np.clip(np.round(first["judgment"] + 4.0), 1, 7)
    layout = crossed_layout(check_first(first))
    comps = henderson_components(fit_additive(layout))
    cats = np.arange(1.0, 8.0)
    got = alpha_parametric_draws(layout, comps, "ordinal", cats, 4, np.random.default_rng(3))
    (_, ys), = parametric_panels(layout, comps, 4, np.random.default_rng(3))
    for b in range(4):
        nearest = cats[np.searchsorted((cats[1:] + cats[:-1]) / 2.0, ys[:, b])]
        ref = krippendorff_alpha(layout.case_index, nearest, level="ordinal").estimate
        assert got[b] == pytest.approx(ref, rel=1e-9)
