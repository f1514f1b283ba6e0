"""Tested flags are decided together across the panel, and the audit says what chance would give.

The full run (100 panels) is ``benchmarks/bench_chance_flags.py``; here 20 seeded panels.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from calibrate.analyses import TESTED_FLAGS, ChanceFlags, audit
from calibrate.consistency.repeats import low_retest_p, low_retest_reach, retest
from calibrate.pvalues import holm_adjust
from calibrate.report import wording
from tests.chance_panels import chance_flags, write_ordinary_panel


def test_holm_matches_statsmodels():
    # independent implementation: statsmodels.stats.multitest.multipletests(method="holm")
    rng = np.random.default_rng(3)
    p = np.concatenate([rng.uniform(size=40), rng.uniform(0, 0.002, size=5)])
    _, reference, _, _ = multipletests(p, alpha=0.05, method="holm")
    np.testing.assert_allclose(holm_adjust(p), reference, rtol=0, atol=1e-15)


def test_low_retest_p_is_the_fisher_interval_rule():
    # exact identity: the one-sided p is below 0.025 exactly when the 95% Fisher-z interval
    # of r lies wholly below 0.70 (the flag's original rule)
    rng = np.random.default_rng(8)
    rows = []
    for k in range(300):
        n = int(rng.integers(5, 30))
        x = rng.normal(size=n)
        y = rng.uniform(0, 1) * x + rng.normal(size=n)
        rows += [{"rater": f"r{k:03d}", "case": f"c{i}", "first": a, "second": b} for i, (a, b) in enumerate(zip(x, y))]
    result = retest(pd.DataFrame(rows), scale="continuous")
    for r in result.raters:
        assert (r.low_p < 0.025) == (r.r_ci_high < 0.70)
        assert r.low_p == pytest.approx(low_retest_p(r.r, r.n_pairs))


def test_low_retest_reach_is_the_r_whose_p_equals_the_level():
    # the figure: with 12 repeats the per-rater rule (2.5% one-sided) needs r below .21
    assert low_retest_reach(12, level=0.025) == pytest.approx(0.211, abs=5e-4)
    for n in (6, 12, 15, 40):
        for level in (0.025, 0.05 / 90):
            reach = low_retest_reach(n, level=level)
            if reach > -1:
                assert low_retest_p(reach, n) == pytest.approx(level, rel=1e-9)
    assert low_retest_reach(6, level=0.05 / 90) < -0.7   # 6 repeats in a 90-test panel: only r below -0.77
    assert np.isnan(low_retest_reach(3, level=0.025))


def test_level_for_is_the_exact_holm_threshold():
    # Holm flags a test exactly when its p is at most alpha / (m - k), k other tests flagged
    rng = np.random.default_rng(11)
    for _ in range(200):
        m = int(rng.integers(2, 30))
        p = np.where(rng.uniform(size=m) < 0.2, rng.uniform(0, 0.003, m), rng.uniform(size=m))
        tests = pd.DataFrame({"rater": [f"r{i}" for i in range(m)], "flag": "curvature", "test": "reset",
                              "p_value": p})
        tests["p_panel"] = holm_adjust(p)
        tests["flagged"] = tests["p_panel"] < 0.05
        record = ChanceFlags(alpha=0.05, tests=tests)
        i = int(rng.integers(m))
        level = record.level_for(f"r{i}", "curvature")
        for trial, expect in ((level * 0.999, True), (level * 1.001, False)):
            moved = p.copy()
            moved[i] = trial
            others_unchanged = np.delete(holm_adjust(moved) < 0.05, i) == np.delete(tests["flagged"].to_numpy(), i)
            if others_unchanged.all():
                assert (holm_adjust(moved)[i] < 0.05) == expect


@pytest.fixture(scope="module")
def null_panels(tmp_path_factory):
    folder = tmp_path_factory.mktemp("ordinary")
    return [audit(write_ordinary_panel(folder / f"p{s}", 7000 + s), n_boot=100) for s in range(20)]


def test_ordinary_panels_show_chance_flags_at_about_the_stated_rate(null_panels):
    # Stated: at most 5% of panels get a tested flag. The benchmark's 100 panels gave 3 with a
    # tested flag and 5 with any flag that is not a data condition. With 20 panels and a true
    # rate of 5%, 5 or more panels would happen with probability 0.3%.
    stated = [r.to_dict()["panels"][0]["chance_flags"]["panelwise_rate"] for r in null_panels]
    assert stated == [0.05] * 20
    with_flags = sum(bool(chance_flags(r.to_dict())) for r in null_panels)
    assert stats.binom.sf(with_flags - 1, 20, 0.05) > 0.003, with_flags


def test_every_tested_flag_reads_the_panel_wide_decision(null_panels):
    for result in null_panels:
        d = result.to_dict()
        panel = d["panels"][0]["chance_flags"]
        tests = result.tables["chance_flags"]
        n_raters = len(d["raters"])
        assert panel["n_tests"] == len(tests) == n_raters * 6   # curvature, cut-off, 2 drift, 1 attribute, retest
        np.testing.assert_allclose(tests["p_panel"], holm_adjust(tests["p_value"].to_numpy()))
        shown = sum(f in TESTED_FLAGS for e in d["raters"] for f in e["flags"])
        assert shown == panel["flags_shown"]
        for e in d["raters"]:
            rows = tests[tests["rater"] == e["rater"]].set_index(["flag", "test"])["p_panel"]
            assert e["cutoff"]["p_adjusted"] == pytest.approx(rows[("cutoff_rule", "step")])
            assert e["drift"]["p_adjusted"] == pytest.approx(rows[("drift", "leniency")])
            assert e["policy"]["reset"]["p_adjusted"] == pytest.approx(rows[("curvature", "reset")])
            assert e["cutoff"]["flagged"] == ("cutoff_rule" in e["flags"])
            assert e["drift"]["flagged"] == ("drift" in e["flags"])
            others = int((tests["flagged"] & ~((tests["rater"] == e["rater"]) & (tests["flag"] == "low_retest"))).sum())
            level = 0.05 / (panel["n_tests"] - others)
            assert e["retest"]["flag_detectable_below"] == pytest.approx(
                low_retest_reach(e["retest"]["n_pairs"], level=level))


def test_the_sentences_state_the_figures():
    line = wording.chance_flags_sentence(90, 0.05, 0.05, 2)
    assert "about 0.05 tested flags" in line and "5% chance" in line and "over 90 tests" in line
    assert "this panel shows 2 tested flags (the other flags are rules" in line
    assert wording.retest_reach_sentence(12, 0.21) == (
        "With 12 repeated cases the low test-retest check can only flag a correlation below 0.21.")
    assert "cannot flag anyone" in wording.retest_reach_sentence(9, -1.0)
    assert "9 to 12 repeated cases" in wording.retest_reach_panel_sentence(9, 12, -0.2)
