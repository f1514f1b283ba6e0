"""The notebook's way in and out: DataFrames and dict specs through the same door as files,
a short repr and an HTML summary, tables by name, and user errors as CalibrateError."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import calibrate
from calibrate.errors import CalibrateError, DataError, SpecError
from tests.helpers import simple_judgments, write_study

SPEC = {
    "study": {"name": "Notebook <panel>", "seed": 11},
    "columns": {"rater": "rater", "case": "case", "judgment": "score"},
    "judgment": {"scale": "ordinal", "min": 1, "max": 7},
    "cues": {"x1": "numeric", "x2": "numeric"},
}


def _judgments(n_raters=4, n_cases=20):
    data = simple_judgments(n_raters=n_raters, n_cases=n_cases, seed=3)
    cases = data[["case", "x1", "x2"]].drop_duplicates("case").reset_index(drop=True)
    return data, cases


@pytest.fixture(scope="module")
def from_frames():
    data, cases = _judgments()
    return calibrate.audit(calibrate.load_study(SPEC, data=data[["rater", "case", "score"]], cases=cases),
                           n_boot=50)


def _without_inputs(result):
    d = json.loads(json.dumps(result.to_dict()))
    d.pop("inputs")
    d.pop("provenance")
    d["study"].pop("name")
    return d


def test_dataframes_give_the_numbers_files_give(tmp_path, from_frames):
    data, cases = _judgments()
    path = write_study(tmp_path / "s", data[["rater", "case", "score"]], cases=cases, scale="ordinal",
                       extra_study="seed = 11")
    from_files = calibrate.audit(path, n_boot=50)
    assert _without_inputs(from_frames) == _without_inputs(from_files)
    assert [i["path"] for i in from_frames.inputs] == ["data DataFrame", "cases DataFrame"]
    assert all(len(i["sha256"]) == 64 for i in from_frames.inputs)


def test_the_callers_dataframes_are_never_changed():
    data, cases = _judgments()
    data = data.set_index(pd.Index(np.arange(len(data)) * 3 + 7))   # an index of its own
    data.loc[data.index[2], "score"] = np.nan                       # a judgment missing: dropped, counted
    data["note"] = pd.array([None] * len(data), dtype="string")
    kept_data, kept_cases = data.copy(deep=True), cases.copy(deep=True)
    table = calibrate.load_study(SPEC, data=data, cases=cases)
    calibrate.audit(table, n_boot=50)
    pd.testing.assert_frame_equal(data, kept_data)
    pd.testing.assert_frame_equal(cases, kept_cases)
    assert any("no judgment" in w.message or "without a judgment" in w.message for w in table.warnings)


def test_a_dataframe_passes_the_same_rules_as_a_file():
    data, cases = _judgments()
    data = data.astype({"score": object})
    data.loc[4, "score"] = "seven"   # the 6th line of the CSV the DataFrame would be
    with pytest.raises(DataError) as info:
        calibrate.load_study(SPEC, data=data, cases=cases)
    problem = info.value.problems[0]
    assert (problem.file, problem.row, problem.column) == ("data DataFrame", 6, "score")


def test_one_dataframe_per_phase():
    data, cases = _judgments()
    spec = {**SPEC, "phases": {"order": ["before", "after"]}}
    table = calibrate.load_study(spec, data={"before": data, "after": data}, cases=cases)
    assert [p.name for p in table.phases] == ["before", "after"]
    with pytest.raises(CalibrateError, match=r"no \[phases\] order"):
        calibrate.load_study(SPEC, data={"before": data})


@pytest.mark.parametrize("data, cases, message", [
    ([1, 2], None, "data must be a pandas DataFrame"),
    (pd.DataFrame(), None, "data is empty"),
    ("data", None, "data must be a pandas DataFrame"),
    ({}, None, "empty mapping"),
    (None, "cases.csv", "cases must be a pandas DataFrame"),
])
def test_bad_tables_are_user_errors(data, cases, message):
    with pytest.raises(CalibrateError, match=message):
        calibrate.load_study(SPEC, data=data, cases=cases)


def test_a_dict_spec_is_validated_like_a_file():
    data, _ = _judgments()
    with pytest.raises(SpecError, match="has no 'judgment'"):
        calibrate.load_study({**SPEC, "columns": {"rater": "rater", "case": "case"}}, data=data)
    with pytest.raises(CalibrateError, match="must be a path to a study.toml, a dict"):
        calibrate.load_study(42, data=data)


def test_repr_is_short_and_html_is_one_escaped_table(from_frames):
    text = repr(from_frames)
    assert len(text.splitlines()) <= 6 and len(text) < 1000
    assert "4 raters" in text and "ICC(A,1)" in text and "result.table(name)" in text
    html = from_frames._repr_html_()
    assert html.count("<table>") == 1 and "Notebook &lt;panel&gt;" in html and "<panel>" not in html
    assert "<th>flagged</th>" in html and "<th>ICC(A,1)</th>" in html


def test_tables_by_name(from_frames):
    policies = from_frames.table("policies")
    assert list(policies["rater"]) == ["r1", "r2", "r3", "r4"]
    policies.loc[0, "rater"] = "changed"
    assert from_frames.table("policies").loc[0, "rater"] == "r1"   # a copy
    with pytest.raises(CalibrateError, match="Did you mean 'policies'"):
        from_frames.table("policy")


@pytest.mark.parametrize("options, message", [
    ({"seed": -1}, "seed must be a whole number"), ({"seed": "7"}, "seed must be a whole number"),
    ({"seed": 1.5}, "seed must be a whole number"), ({"n_boot": 5}, "n_boot"),
])
def test_bad_options_are_user_errors(options, message):
    data, cases = _judgments()
    with pytest.raises(CalibrateError, match=message):
        calibrate.audit(calibrate.load_study(SPEC, data=data, cases=cases), **options)


def test_compare_checks_its_seed_too():
    data, cases = _judgments()
    with pytest.raises(CalibrateError, match="seed must be a whole number"):
        calibrate.compare(calibrate.load_study(SPEC, data=data, cases=cases), seed=-3)
