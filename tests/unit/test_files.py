"""The per-file view: adjusted scores, spread, files to read again."""

import numpy as np
import pytest
import statsmodels.formula.api as smf
from panel_simulation import simulate_panel

from calibrate.agreement.files import file_view
from calibrate.agreement.offsets import severity
from calibrate.errors import DataError


def test_adjusted_scores_equal_additive_model_case_effects():
    # statsmodels OLS judgment ~ C(case) + C(rater, Sum): mean of a case's fitted values plus
    # its mean residual equals mu + a_case with rater effects summing to zero
    first, _, _ = simulate_panel(n_raters=6, n_cases=30, readers=3, seed=14)
    view = file_view(first, severity(first, scale="continuous", scale_min=-4, scale_max=4))
    fit = smf.ols("judgment ~ C(case) + C(rater, Sum)", data=first).fit()
    frame = first.assign(fitted=fit.fittedvalues)
    names = [k for k in fit.params.index if k.startswith("C(rater")]
    effects = dict(zip(sorted(first["rater"].unique()),
                       list(fit.params[names]) + [-fit.params[names].sum()]))
    frame["rater_effect"] = frame["rater"].map(effects)
    expected = (frame["fitted"] - frame["rater_effect"]).groupby(frame["case"]).mean()
    ours = view.to_frame().set_index("case")["adjusted"]
    np.testing.assert_allclose(ours.loc[expected.index], expected, atol=1e-10)


def test_adjusted_scores_are_closer_to_truth_than_raw_means():
    # planted: strong rater offsets, 2 readers per file
    first, truth, _ = simulate_panel(n_raters=40, n_cases=1200, readers=2,
                                     rater_sd=0.8, noise_sd=0.4, seed=6)
    view = file_view(first, severity(first, scale="continuous", scale_min=-5, scale_max=5))
    frame = view.to_frame()
    raw_err = np.mean((frame["raw_mean"] - truth) ** 2)
    adj_err = np.mean((frame["adjusted"] - truth) ** 2)
    assert adj_err < 0.7 * raw_err


def test_needs_another_read_rules():
    first, truth, _ = simulate_panel(n_raters=12, n_cases=200, readers=3, noise_sd=0.3, seed=2)
    # one file where the readers disagree wildly
    wild = first["case"] == "c00007"
    first.loc[wild, "judgment"] = [-3.0, 0.0, 3.0]
    sev = severity(first, scale="continuous", scale_min=-5, scale_max=5)
    view = file_view(first, sev, cut_off=0.0)
    rows = {f.case: f for f in view.files}
    assert "high_disagreement" in rows["c00007"].reasons
    assert rows["c00007"].spread_range == pytest.approx(6.0)
    for f in view.files:
        inside = abs(f.adjusted) < 1.959963984540054 * sev.residual_sd / np.sqrt(f.n_readers)
        assert ("near_cut_off" in f.reasons) == inside
    assert set(view.needs_another_read()) == {f.case for f in view.files if f.reasons}
    share = np.mean([("high_disagreement" in f.reasons) for f in view.files])
    assert share < 0.05       # the screen at p < 0.01 keeps the list short on a well-behaved panel


def test_severity_from_other_data_is_refused():
    first, _, _ = simulate_panel(n_raters=4, n_cases=20, readers=2, seed=0)
    other = first.assign(rater=first["rater"] + "x")
    with pytest.raises(DataError, match="no offset for rater"):
        file_view(first, severity(other, scale="continuous", scale_min=-5, scale_max=5))
