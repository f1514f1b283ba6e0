"""The agreement stage's fast routes equal plain references written here (issue 17).

- The robust (HC2/HC3) offset variances: the closed form on a complete design and the
  pairs-of-co-readers route on an incomplete one equal the whole-table computation (every
  judgment's row of ``Z A^+`` made explicitly, with ``A^+`` from a dense pseudo-inverse).
- The additive fit's closed form on a complete design equals solving the reduced system.
"""

import numpy as np
import pandas as pd
import pytest
from panel_simulation import simulate_panel

from calibrate.agreement import offsets
from calibrate.agreement.offsets import (
    check_first,
    crossed_layout,
    fit_additive,
    robust_offset_variance,
    severity,
)


def _reference_pinv(layout):
    """A^+ of the reduced normal equations, by numpy's pseudo-inverse of the dense matrix,
    part by part (offsets sum to zero within each connected part)."""
    R, C = layout.n_raters, layout.n_cases
    counts = np.zeros((R, C))
    counts[layout.rater_index, layout.case_index] = 1.0
    n_c = counts.sum(axis=0)
    keep = n_c > 0
    reduced = np.diag(counts.sum(axis=1)) - (counts[:, keep] / n_c[keep]) @ counts[:, keep].T
    return np.linalg.pinv(reduced, rcond=1e-10, hermitian=True)


def _reference_variance(layout, form):
    """Plain loop over raters of the robust variance, from explicit rows of Z A^+."""
    pinv = _reference_pinv(layout)
    R = layout.n_raters
    ri, ci, y = layout.rater_index, layout.case_index, layout.y
    n_c = layout.readers_per_case()
    b = pinv @ np.bincount(ri, weights=y - (np.bincount(ci, weights=y) / n_c)[ci], minlength=R)
    z = np.zeros((y.size, R))            # Z: rater indicators centred within each case
    z[np.arange(y.size), ri] = 1.0
    for c in range(layout.n_cases):
        rows = np.flatnonzero(ci == c)
        z[rows] -= z[rows].mean(axis=0)
    gain = z @ pinv
    resid = y - (np.bincount(ci, weights=y) / n_c)[ci] - z @ b
    leverage = 1.0 / n_c[ci] + np.einsum("ir,ir->i", gain, z)
    power = {"HC2": 1.0, "HC3": 2.0}[form]
    free = 1.0 - leverage
    omega = np.where(free > 1e-9, resid**2 / np.where(free > 1e-9, free, 1.0) ** power, 0.0)
    return np.array([float(np.sum(omega * gain[:, s] ** 2)) for s in range(R)])


def _to_scale(first, scale, seed):
    out = first.copy()
    if scale == "1-7":
        out["judgment"] = np.clip(np.round(out["judgment"] * 1.5 + 4.0), 1, 7)
    elif scale == "0/1":
        out["judgment"] = (out["judgment"] + np.random.default_rng(seed).normal(0, 0.3, len(out)) > 0).astype(float)
    return out


def _complete(n_raters, n_cases, seed):
    first, _, _ = simulate_panel(n_raters=n_raters, n_cases=n_cases, readers=n_raters, seed=seed)
    return first


def _near_complete(n_raters, n_cases, seed, drop=0.1):
    first = _complete(n_raters, n_cases, seed)
    keep = np.random.default_rng(seed).random(len(first)) > drop
    return first.loc[keep].reset_index(drop=True)


def _with_lone_cases(first):
    lone = pd.DataFrame({"rater": [first["rater"].iloc[0], first["rater"].iloc[-1]],
                         "case": ["z1", "z2"], "judgment": [first["judgment"].iloc[0]] * 2})
    return pd.concat([first, lone], ignore_index=True)


PANELS = {
    "complete 6 x 30": lambda: _complete(6, 30, 3),
    "complete 25 x 12": lambda: _complete(25, 12, 5),
    "near complete 20 x 15": lambda: _near_complete(20, 15, 6),
    "incomplete 12 x 60, 3 readers": lambda: simulate_panel(n_raters=12, n_cases=60, readers=3, seed=4)[0],
    "two readers, lone cases": lambda: _with_lone_cases(
        simulate_panel(n_raters=9, n_cases=45, readers=2, seed=8)[0]),
}


@pytest.mark.parametrize("panel", sorted(PANELS))
@pytest.mark.parametrize("scale", ["continuous", "1-7", "0/1"])
@pytest.mark.parametrize("form", ["HC2", "HC3"])
def test_robust_offset_variances_equal_a_loop_over_raters(panel, scale, form):
    first = _to_scale(PANELS[panel](), scale, seed=1)
    layout = crossed_layout(check_first(first))
    fit = fit_additive(layout, with_variance=True)
    got = robust_offset_variance(layout, fit, form)
    np.testing.assert_allclose(got, _reference_variance(layout, form), rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("block", [1, 7, 50])
def test_pairs_held_a_block_at_a_time_give_the_same_variances(monkeypatch, block):
    first = _near_complete(12, 20, 2)
    layout = crossed_layout(check_first(first))
    fit = fit_additive(layout, with_variance=True)
    whole = robust_offset_variance(layout, fit, "HC2")
    monkeypatch.setattr(offsets, "ROBUST_BLOCK_VALUES", block)
    np.testing.assert_allclose(robust_offset_variance(layout, fit, "HC2"), whole, rtol=1e-12)


def test_disconnected_parts_keep_their_variances():
    # two panels that share no files: each part's offsets and variances as on its own
    a = simulate_panel(n_raters=5, n_cases=20, readers=3, seed=1)[0]
    b = simulate_panel(n_raters=4, n_cases=16, readers=2, seed=2)[0]
    b = b.assign(rater="s" + b["rater"], case="d" + b["case"])
    both = severity(pd.concat([a, b], ignore_index=True), scale="continuous", scale_min=-5, scale_max=5)
    alone = severity(a, scale="continuous", scale_min=-5, scale_max=5)
    for r in alone.raters:
        other = both.for_rater(r.rater)
        assert other.estimate == pytest.approx(r.estimate, rel=1e-9, abs=1e-12)
        assert other.se == pytest.approx(r.se, rel=1e-9)


@pytest.mark.parametrize("scale", ["continuous", "1-7", "0/1"])
def test_closed_form_fit_on_a_complete_design_equals_the_reduced_system(scale):
    first = _to_scale(_complete(8, 25, 9), scale, seed=2)
    layout = crossed_layout(check_first(first))
    fit = fit_additive(layout, with_variance=True)
    pinv = _reference_pinv(layout)
    R = layout.n_raters
    ri, ci, y = layout.rater_index, layout.case_index, layout.y
    n_c = layout.readers_per_case()
    rhs = np.bincount(ri, weights=y - (np.bincount(ci, weights=y) / n_c)[ci], minlength=R)
    np.testing.assert_allclose(fit.offsets, pinv @ rhs, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(fit.offset_cov_unit, pinv, rtol=1e-9, atol=1e-14)
    assert fit.ss_rater_given_case == pytest.approx(float(rhs @ pinv @ rhs), rel=1e-9)
    # the incomplete route on the same data (one judgment moved to a new case) still agrees
    # with the reference: the closed form is not what makes the numbers
    moved = first.copy()
    moved.loc[0, "case"] = "extra"
    lay2 = crossed_layout(check_first(moved))
    fit2 = fit_additive(lay2, with_variance=True)
    np.testing.assert_allclose(fit2.offset_cov_unit, _reference_pinv(lay2), rtol=1e-9, atol=1e-14)


# ---------------------------------------------------------------------------
# panel agreement: the same numbers from codes, and reduced forms that say so
# ---------------------------------------------------------------------------

def _ordinal_panel(seed=3, n_raters=10, n_cases=40, readers=3):
    first, _, _ = simulate_panel(n_raters=n_raters, n_cases=n_cases, readers=readers, seed=seed)
    return _to_scale(first, "1-7", seed)


def test_category_counts_from_case_codes_equal_those_from_the_ids():
    from calibrate.agreement.categories import category_agreement

    first = _ordinal_panel()
    layout = crossed_layout(check_first(first))
    coded = pd.DataFrame({"case": layout.case_index, "judgment": layout.y})
    by_ids = category_agreement(first, categories=range(1, 8), n_boot=200, rng=5)
    by_codes = category_agreement(coded, categories=range(1, 8), n_boot=200, rng=5)
    assert [c.to_dict() for c in by_codes] == [c.to_dict() for c in by_ids]


def test_jackknife_interval_equals_a_loop_leaving_each_case_out():
    from calibrate.agreement.categories import category_agreement, category_counts, fleiss_kappa, gwet_ac1

    first = _ordinal_panel(seed=4)
    found = category_agreement(first, categories=range(1, 8), jackknife=True)
    counts, _ = category_counts(first["case"].to_numpy(), first["judgment"].to_numpy(), categories=range(1, 8))
    n = counts.shape[0]
    for result, coefficient in zip(found, (fleiss_kappa, gwet_ac1)):
        jack = np.array([coefficient(np.delete(counts, i, axis=0)) for i in range(n)])
        se = np.sqrt((n - 1) / n * np.sum((jack - jack.mean()) ** 2))
        assert result.estimate == pytest.approx(coefficient(counts), rel=1e-12)
        assert result.ci_low == pytest.approx(result.estimate - 1.959963984540054 * se, rel=1e-9)
        assert result.ci_high == pytest.approx(result.estimate + 1.959963984540054 * se, rel=1e-9)
        assert "jackknife" in result.method


def test_simulated_panel_count_keeps_the_full_form_within_budget():
    from calibrate.agreement.icc import PARAMETRIC_MIN_PANELS, simulated_panel_count

    assert simulated_panel_count(80_000, 500) == 500          # 400 raters x 200 files: full
    assert simulated_panel_count(400_000, 500) == 100         # 2,000 raters x 200 files
    assert simulated_panel_count(10_000_000, 500) == PARAMETRIC_MIN_PANELS
    assert simulated_panel_count(400_000, 50) == 50           # never more than asked


@pytest.mark.parametrize("readers", [3, 10])     # incomplete, complete
def test_large_panel_reduced_forms_are_stated_and_full_extras_restores_them(monkeypatch, readers):
    from calibrate.agreement import icc

    first = _ordinal_panel(seed=6, readers=readers)
    full = icc.panel_agreement(first, scale="ordinal", scale_min=1, scale_max=7, n_boot=60, rng=2)
    assert full.reduced_forms == ()
    monkeypatch.setattr(icc, "PARAMETRIC_FULL_VALUES", 20 * len(first))
    monkeypatch.setattr(icc, "PARAMETRIC_MIN_PANELS", 20)
    monkeypatch.setattr(icc, "CATEGORY_BOOTSTRAP_VALUES", 10)
    reduced = icc.panel_agreement(first, scale="ordinal", scale_min=1, scale_max=7, n_boot=60, rng=2)
    assert len(reduced.reduced_forms) == 2
    assert "20 simulated panels instead of 60" in reduced.reduced_forms[0]
    assert "jackknife" in reduced.reduced_forms[1]
    assert reduced.alpha.n_boot == 20 and "(20 simulated panels)" in reduced.alpha.method
    assert all("jackknife" in c.method for c in reduced.categories)
    again = icc.panel_agreement(first, scale="ordinal", scale_min=1, scale_max=7, n_boot=60, rng=2,
                                full_extras=True)
    assert again.reduced_forms == () and again.to_dict() == full.to_dict()


def test_agreement_with_panel_codes_follow_the_sorted_ids():
    from calibrate.agreement.with_panel import agreement_with_panel

    first = _ordinal_panel(seed=7)
    shuffled = first.sample(frac=1.0, random_state=1).reset_index(drop=True)
    a, b = agreement_with_panel(first), agreement_with_panel(shuffled)
    assert [r.rater for r in a.raters] == sorted(first["rater"].unique())
    for x, y in zip(a.raters, b.raters):
        assert x.rater == y.rater and x.n == y.n
        assert x.r == pytest.approx(y.r, rel=1e-12) and x.mean_gap == pytest.approx(y.mean_gap, abs=1e-12)
