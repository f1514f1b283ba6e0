"""ICC routes, Krippendorff's alpha against a brute-force pairwise count, raw agreement."""

import itertools
import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from panel_simulation import icc_truth, long_from_matrix, simulate_panel
from scipy import stats

from calibrate.agreement.icc import (
    F_CI,
    PARAMETRIC_CI,
    alpha_parametric_draws,
    icc_anova,
    krippendorff_alpha,
    pairwise_agreement,
    panel_agreement,
    parametric_panels,
)
from calibrate.agreement.offsets import check_first, crossed_layout, fit_additive, fit_additive_many
from calibrate.agreement.readers import henderson_components
from calibrate.errors import DataError


def _alpha_brute_force(units, values, delta):
    """Alpha from its definition (Krippendorff 2011): all ordered pairs within units, each unit
    weighted 1/(m_u - 1), against all ordered pairs of pairable values."""
    by_unit = {}
    for u, v in zip(units, values):
        if np.isfinite(v):
            by_unit.setdefault(u, []).append(v)
    pairable = [vals for vals in by_unit.values() if len(vals) >= 2]
    pooled = [v for vals in pairable for v in vals]
    n = len(pooled)
    observed = sum(
        sum(delta(a, b, pooled) for a, b in itertools.permutations(vals, 2)) / (len(vals) - 1)
        for vals in pairable
    ) / n
    expected = sum(delta(a, b, pooled) for a, b in itertools.permutations(pooled, 2)) / (n * (n - 1))
    return 1 - observed / expected


def _ordinal_delta(a, b, pooled):
    values, counts = np.unique(pooled, return_counts=True)
    lo, hi = min(a, b), max(a, b)
    inside = counts[(values >= lo) & (values <= hi)].sum()
    return (inside - (counts[values == a][0] + counts[values == b][0]) / 2) ** 2


DELTAS = {
    "nominal": lambda a, b, _: float(a != b),
    "interval": lambda a, b, _: (a - b) ** 2,
    "ratio": lambda a, b, _: ((a - b) / (a + b)) ** 2,
    "ordinal": _ordinal_delta,
}


@pytest.mark.parametrize("level", sorted(DELTAS))
def test_alpha_equals_definition_on_random_data_with_missing(level):
    rng = np.random.default_rng(len(level))
    ratings = rng.integers(1, 6, size=(15, 4)).astype(float)
    ratings[rng.random(ratings.shape) < 0.3] = np.nan
    first = long_from_matrix(ratings)
    ours = krippendorff_alpha(first["case"], first["judgment"], level=level).estimate
    ref = _alpha_brute_force(first["case"], first["judgment"], DELTAS[level])
    assert ours == pytest.approx(ref, abs=1e-12)


def test_exact_and_adjacent_agreement_by_hand():
    ratings = np.array([[1, 1, 2], [3, 5, np.nan], [4, 4, 4], [2, np.nan, np.nan]], dtype=float)
    first = long_from_matrix(ratings)
    exact, adjacent = pairwise_agreement(first["case"], first["judgment"])
    # unordered pairs: case 0: (1,1) (1,2) (1,2); case 1: (3,5); case 2: three equal pairs
    assert exact == pytest.approx(4 / 7)
    assert adjacent == pytest.approx(6 / 7)


def test_components_route_equals_anova_on_random_complete_design():
    first, _, _ = simulate_panel(n_raters=6, n_cases=25, readers=6, seed=12)
    a = panel_agreement(first, scale="continuous", method="anova", n_boot=20, rng=0)
    c = panel_agreement(first, scale="continuous", method="components", n_boot=20, rng=0)
    for x, y in zip(a.icc, c.icc):
        assert x.form == y.form
        assert x.estimate == pytest.approx(y.estimate, abs=1e-12)
    assert a.design == "complete" and "ANOVA" in a.icc_method
    assert "Henderson" in c.icc_method


def test_anova_intervals_match_pingouin_on_random_data():
    # pingouin.intraclass_corr implements McGraw & Wong (1996) intervals; it rounds them to 2 decimals
    pingouin = pytest.importorskip("pingouin")
    first, _, _ = simulate_panel(n_raters=5, n_cases=40, readers=5, seed=30)
    ref = pingouin.intraclass_corr(first, targets="case", raters="rater", ratings="judgment")
    ratings = first.pivot(index="case", columns="rater", values="judgment").to_numpy()
    for est, (_, row) in zip(icc_anova(ratings), ref.iterrows()):
        assert est.label == row["Type"]
        assert est.estimate == pytest.approx(row["ICC"], abs=1e-10)
        assert est.ci_low == pytest.approx(row["CI95"][0], abs=0.005 + 1e-9)
        assert est.ci_high == pytest.approx(row["CI95"][1], abs=0.005 + 1e-9)


def test_incomplete_design_bootstrap_covers_planted_icc():
    # planted ICC(A,1) = 1 / (1 + 0.25 + 0.25) = 0.667 and ICC(C,1) = 0.8
    first, _, _ = simulate_panel(n_raters=30, n_cases=400, readers=3, rater_sd=0.5,
                                 noise_sd=0.5, seed=44)
    result = panel_agreement(first, scale="continuous", n_boot=150, rng=1)
    values = {e.form: e for e in result.icc}
    assert result.design == "incomplete"
    assert values["a1"].ci_low < 2 / 3 < values["a1"].ci_high
    assert values["c1"].ci_low < 0.8 < values["c1"].ci_high
    assert result.readers_per_case == pytest.approx(3.0)


def test_same_seed_same_json():
    first, _, _ = simulate_panel(n_raters=10, n_cases=60, readers=3, seed=3)
    a = panel_agreement(first, scale="continuous", n_boot=40, rng=9).to_dict()
    b = panel_agreement(first, scale="continuous", n_boot=40, rng=9).to_dict()
    assert json.dumps(a) == json.dumps(b)
    assert set(a["icc"]) == {"i1", "a1", "c1", "ik", "ak", "ck"}
    assert isinstance(a["alpha"], float)


def test_dominant_category_warning_on_binary_scale():
    rng = np.random.default_rng(0)
    ratings = (rng.random((50, 3)) < 0.1).astype(float)   # mostly 0
    result = panel_agreement(long_from_matrix(ratings), scale="binary", n_boot=30, rng=0)
    assert result.alpha.level == "nominal"
    assert result.dominant_share > 0.8
    assert any("makes up" in w for w in result.warnings)
    assert result.exact_agreement > 0.7 and np.isnan(result.adjacent_agreement)


def test_no_shared_case_gives_nan_and_warning():
    first = pd.DataFrame({"rater": ["a", "b"], "case": ["x", "y"], "judgment": [1.0, 2.0]})
    result = panel_agreement(first, scale="continuous", n_boot=10, rng=0)
    assert result.to_dict()["icc"] is None
    assert any("two or more raters" in w for w in result.warnings)


def test_anova_on_incomplete_design_raises():
    first, _, _ = simulate_panel(n_raters=5, n_cases=20, readers=2, seed=0)
    with pytest.raises(DataError, match="every rater to judge every case"):
        panel_agreement(first, scale="continuous", method="anova")
    with pytest.raises(DataError, match="level must be one of"):
        krippendorff_alpha(first["case"], first["judgment"], level="cardinal")


def test_many_fits_equal_one_fit_per_column():
    # exact identity: the batched fit on a fixed design equals fit_additive on each column
    first, _, _ = simulate_panel(n_raters=9, n_cases=50, readers=3, seed=7)
    layout = crossed_layout(check_first(first))
    rng = np.random.default_rng(0)
    ys = np.column_stack([layout.y, rng.normal(size=layout.y.size), 3 * layout.y - 1])
    many = henderson_components(fit_additive_many(layout, ys))
    for b in range(ys.shape[1]):
        one = henderson_components(fit_additive(replace(layout, y=ys[:, b])))
        for name in ("case", "rater", "residual", "case_oneway", "within_oneway"):
            assert getattr(many, name)[b] == pytest.approx(getattr(one, name), abs=1e-12)


@pytest.mark.parametrize("level, categories", [("interval", None), ("ordinal", np.arange(1.0, 8.0)),
                                               ("nominal", np.array([0.0, 1.0]))])
def test_alpha_on_simulated_panels_equals_alpha_of_each_panel(level, categories):
    first, _, _ = simulate_panel(n_raters=8, n_cases=40, readers=3, seed=5)
    if level == "ordinal":
        first["judgment"] += 4.0   # centre on the 1-7 scale
    layout = crossed_layout(check_first(first))
    comps = henderson_components(fit_additive(layout))
    draws = alpha_parametric_draws(layout, comps, level, categories, 6, np.random.default_rng(2))
    (_, ys), = parametric_panels(layout, comps, 6, np.random.default_rng(2))
    for b in range(6):
        values = ys[:, b]
        if categories is not None:   # nearest scale value
            values = categories[np.abs(values[:, None] - categories[None, :]).argmin(axis=1)]
        ref = krippendorff_alpha(layout.case_index, values, level=level).estimate
        assert np.isfinite(ref) and draws[b] == pytest.approx(ref, abs=1e-12)


def test_interval_methods_are_named():
    inc, _, _ = simulate_panel(n_raters=10, n_cases=60, readers=3, seed=3)
    result = panel_agreement(inc, scale="continuous", n_boot=40, rng=9).to_dict()
    assert all(f["method"] == PARAMETRIC_CI for f in result["icc_detail"]["forms"])
    assert result["icc_detail"]["ci_method"].startswith("parametric bootstrap")
    assert result["alpha_detail"]["method"].startswith("parametric bootstrap")
    full, _, _ = simulate_panel(n_raters=4, n_cases=20, readers=4, seed=3)
    result = panel_agreement(full, scale="continuous", n_boot=40, rng=9).to_dict()
    assert all(f["method"] == F_CI for f in result["icc_detail"]["forms"])


def test_parametric_intervals_cover_on_incomplete_panels():
    # a seeded, smaller version of benchmarks/bench_icc_coverage.py: 60 panels of
    # 14 raters x 350 cases x 4 readers, rater variance 0.5, 200 simulated panels each.
    # A loose band: the 99.9% binomial interval of the coverage must reach 93%
    # (the case bootstrap this replaced covered ICC(A,1) 77.5% in this setting).
    truth = icc_truth(1.0, 0.5, 0.5, 4)
    rng = np.random.default_rng(2026)
    n_panels, hits = 60, {"a1": 0, "c1": 0, "ak": 0, "alpha": 0}
    for _ in range(n_panels):
        first, _, _ = simulate_panel(n_raters=14, n_cases=350, readers=4, rater_sd=np.sqrt(0.5),
                                     noise_sd=np.sqrt(0.5), seed=int(rng.integers(2**31)))
        result = panel_agreement(first, scale="continuous", n_boot=200, rng=rng)
        forms = {e.form: e for e in result.icc}
        for form in ("a1", "c1", "ak"):
            hits[form] += forms[form].ci_low <= truth[form] <= forms[form].ci_high
        hits["alpha"] += result.alpha.ci_low <= truth["a1"] <= result.alpha.ci_high
    for name, h in hits.items():
        upper = stats.beta.ppf(0.9995, h + 1, n_panels - h) if h < n_panels else 1.0
        assert upper >= 0.93, (name, h)
        assert h / n_panels <= 1.0
