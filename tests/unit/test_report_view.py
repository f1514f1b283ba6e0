"""The typed view the reports read: built from the demo audit's results.json, and loud
about a missing or misspelt key (a renamed field must fail a test, not print an empty
section)."""

from __future__ import annotations

import copy
import json

import pytest

from calibrate.analyses import audit
from calibrate.data.demo import write_demo
from calibrate.errors import CalibrateError
from calibrate.report import rater_pdf
from calibrate.report.view import ResultsView, ResultsViewError
from tests.pdf_text import page_texts


@pytest.fixture(scope="module")
def results(tmp_path_factory) -> dict:
    files = write_demo(tmp_path_factory.mktemp("view") / "study")
    # through JSON, exactly as a results folder holds it
    return json.loads(json.dumps(audit(files.spec).to_dict()))


def test_view_of_the_demo_holds_the_results(results):
    view = ResultsView.read(results)
    assert view.study_name == results["study"]["name"]
    assert view.phases == tuple(results["phases"])
    assert len(view.raters) == len(results["raters"]) and len(view.panels) == len(results["panels"])
    assert view.cues == tuple(results["data_summary"]["missing_per_cue"])
    assert view.scale == (results["judgment"]["min"], results["judgment"]["max"])
    for entry, rv in zip(results["raters"], view.raters):
        assert (rv.rater, rv.phase, rv.n_cases, rv.flags) == (entry["rater"], entry["phase"], entry["n_cases"],
                                                              tuple(entry["flags"]))
        assert rv.policy.r == entry["policy"]["r"]
        assert rv.policy.weight_intervals == {t: tuple(ci) for t, ci in entry["policy"]["ci"].items()}
        assert rv.retest.r == entry["retest"]["r"] and rv.retest.n_pairs == entry["retest"]["n_pairs"]
        assert rv.lens.g == entry["lens"]["g"] and rv.lens.model_validity_cv == entry["lens"]["model_validity_cv"]
        assert rv.severity.offset == entry["severity"]["offset"]
        assert rv.severity.sd_ratio == entry["severity"]["range_use"]["sd_ratio"]
        assert rv.alignment.most_over == entry["alignment"]["most_over"]
        assert rv.drift.flagged == entry["drift"]["flagged"]
        assert rv.ceiling_verdict == entry["consistency"]["verdict"]
        assert set(rv.excluded) == set(entry["excluded"])
    for panel, pv in zip(results["panels"], view.panels):
        assert pv.icc.estimates == panel["icc"]
        forms = panel["agreement"]["icc_detail"]["forms"]
        assert pv.icc.intervals == {f["form"]: (f["ci_low"], f["ci_high"]) for f in forms}
        assert [g.raters for g in pv.groups] == [tuple(g["raters"]) for g in panel["groups"]]
        assert len(pv.pairs) == len(panel["rater_pairs"]["pairs"])


def test_the_view_is_frozen(results):
    view = ResultsView.read(results)
    with pytest.raises(AttributeError):
        view.raters[0].rater = "someone else"


@pytest.mark.parametrize("where, path", [
    (lambda r: r["raters"][3].pop("retest"), "results.raters[3].retest"),
    (lambda r: r["raters"][0]["policy"].pop("r"), "results.raters[0].policy.r"),
    (lambda r: r["raters"][1]["severity"].pop("range_use"), "results.raters[1].severity.range_use"),
    (lambda r: r["panels"][1].pop("icc"), "results.panels[1].icc"),
    (lambda r: r["panels"][0]["rater_pairs"]["pairs"][0].pop("main_source"),
     "results.panels[0].rater_pairs.pairs[0].main_source"),
    (lambda r: r["study"].pop("name"), "results.study.name"),
])
def test_a_missing_required_key_is_named(results, where, path):
    broken = copy.deepcopy(results)
    where(broken)
    with pytest.raises(ResultsViewError) as caught:
        ResultsView.read(broken)
    assert caught.value.path == path
    assert path in str(caught.value)
    assert isinstance(caught.value, CalibrateError)


def test_a_misspelt_key_is_an_error_not_an_empty_section(results):
    broken = copy.deepcopy(results)
    broken["raters"][2]["lens"]["ra"] = broken["raters"][2]["lens"].pop("r_a")
    with pytest.raises(ResultsViewError, match=r"results\.raters\[2\]\.lens\.r_a"):
        ResultsView.read(broken)
    broken = copy.deepcopy(results)
    broken["raters"][5]["severty"] = broken["raters"][5].pop("severity")
    with pytest.raises(ResultsViewError, match=r"results\.raters\[5\]\.severity is missing"):
        rater_pdf(broken, broken["raters"][0]["rater"])


def test_a_wrong_kind_of_value_is_an_error(results):
    broken = copy.deepcopy(results)
    broken["raters"][0]["retest"]["r"] = "0.8"
    with pytest.raises(ResultsViewError, match=r"results\.raters\[0\]\.retest\.r should be a number"):
        ResultsView.read(broken)


def test_null_stays_null_and_a_recorded_reason_is_printed(results):
    changed = copy.deepcopy(results)
    entry = changed["raters"][0]
    last_phase = changed["phases"][-1]
    entry = next(e for e in changed["raters"] if e["rater"] == entry["rater"] and e["phase"] == last_phase)
    entry["lens"] = None
    entry["retest"] = None
    entry["severity"] = None
    entry["unavailable"] = {"lens": "the outcome is known for too few of these cases",
                            "severity": "no other reader shared these cases"}
    rv = next(r for r in ResultsView.read(changed).raters if r.rater == entry["rater"] and r.phase == last_phase)
    assert rv.lens is None and rv.retest is None
    assert rv.reason("lens") == "the outcome is known for too few of these cases"
    assert rv.reason("retest") is None
    text = " ".join(" ".join(page_texts(rater_pdf(changed, entry["rater"]))).split())
    assert "The lens model is not available: the outcome is known for too few of these cases." in text
    assert "No case was shown to you more than once, so test-retest is not available." in text
    assert "Severity is not available: no other reader shared these cases." in text
    assert "Not available: no other reader shared these cases." in text     # first-page reading


#: Keys results.schema.json requires that no report prints (the output tests check them
#: against the schema); every other required key must be read, and so required, by the view.
NOT_READ_BY_REPORTS = {
    "raters": set(), "policy": {"intercept", "importance_r2", "r_ci", "r2_adj", "r_cv"},
    "retest": {"low_p"}, "lens": set(), "severity": set(), "alignment": set(),
    "drift": {"p_value", "p_adjusted"}, "panels": set(), "icc": set(), "variance_components": set(),
    "homogeneity": set(), "d_study": set(), "groups": {"std_weights"},
}


def _schema_required(schema: dict) -> dict:
    """Each object's required keys in the schema, with how to reach that object in a result."""
    rater = schema["properties"]["raters"]["items"]
    panel = schema["properties"]["panels"]["items"]

    def first(r):
        return r["raters"][0]

    def block(name):
        return lambda r: r["raters"][0][name]

    def panel_block(name):
        return lambda r: r["panels"][0][name]

    out = {"raters": (rater["required"], first), "panels": (panel["required"], lambda r: r["panels"][0]),
           "d_study": (panel["properties"]["d_study"]["items"]["required"], lambda r: r["panels"][0]["d_study"][0]),
           "groups": (panel["properties"]["groups"]["items"]["required"], lambda r: r["panels"][0]["groups"][0])}
    for name in ("policy", "retest", "lens", "severity", "alignment", "drift"):
        out[name] = (rater["properties"][name]["required"], block(name))
    for name in ("icc", "variance_components", "homogeneity"):
        out[name] = (panel["properties"][name]["required"], panel_block(name))
    return out


def test_the_view_requires_what_the_schema_requires(results):
    from calibrate.output.tables import results_schema

    for name, (required, holder) in _schema_required(results_schema()).items():
        for key in required:
            broken = copy.deepcopy(results)
            holder(broken).pop(key)
            if key in NOT_READ_BY_REPORTS[name]:
                ResultsView.read(broken)
                continue
            with pytest.raises(ResultsViewError) as caught:
                ResultsView.read(broken)
            assert caught.value.path.endswith(f".{key}"), (name, key, caught.value.path)


@pytest.mark.parametrize("variant", ["binary", "too_few_cases"])
def test_reports_build_for_studies_unlike_the_demo(tmp_path, variant):
    """Binary decisions (a logistic policy beside the linear one) and a rater too few cases to
    fit (policy null): the strict view must read what the audit writes for them."""
    import pandas as pd

    from calibrate.report import panel_pdf
    from tests.e2e.test_study_variants import CUES, _panel
    from tests.helpers import write_study

    if variant == "binary":
        path = write_study(tmp_path / "s", _panel(binary=True), scale="binary", jmin=0, jmax=1, cues=CUES,
                           extra_judgment='labels = { admit = 1, decline = 0 }')
    else:
        df = _panel()
        df = pd.concat([df[df["rater"] != "p1"], df[df["rater"] == "p1"].head(4)])
        path = write_study(tmp_path / "s", df, scale="continuous", jmin=0, jmax=100, cues=CUES)
    results = json.loads(json.dumps(audit(path, n_boot=100).to_dict()))
    view = ResultsView.read(results)
    assert panel_pdf(results).startswith(b"%PDF")
    for rater in view.rater_ids():
        assert rater_pdf(results, rater).startswith(b"%PDF")
    if variant == "too_few_cases":
        p1 = next(r for r in view.raters if r.rater == "p1")
        assert p1.policy is None
        text = " ".join(" ".join(page_texts(rater_pdf(results, "p1"))).split())
        assert "Your policy is not available: too few usable cases to fit a policy." in text
