"""The study spec: every validation rule names the problem and the fix."""

from pathlib import Path

import pytest

from calibrate.data.spec import parse_spec, read_spec
from calibrate.errors import SpecError

BASE = {
    "study": {"name": "t", "data": "j.csv"},
    "columns": {"rater": "rater", "case": "case", "judgment": "score"},
    "judgment": {"scale": "ordinal", "min": 1, "max": 7},
    "cues": {"x1": "numeric", "region": "categorical"},
}


def _spec(**changes):
    doc = {k: dict(v) for k, v in BASE.items()}
    for key, value in changes.items():
        section, _, name = key.partition("__")
        if name:
            doc.setdefault(section, {})[name] = value
        else:
            doc[section] = value
    return doc


def _problems(doc) -> str:
    with pytest.raises(SpecError) as info:
        parse_spec(doc, base_dir=Path("."))
    return str(info.value)


def test_valid_spec_round_trips_through_toml(tmp_path):
    doc = _spec(rubric={"basis": "standardized", "x1": 3, "region": 1},
                excluded={"columns": ["gender"]})
    spec = parse_spec(doc, base_dir=tmp_path)
    assert spec.rubric == {"x1": 0.75, "region": 0.25}  # normalised to sum 1
    path = tmp_path / "study.toml"
    path.write_text(spec.to_toml(relative_to=tmp_path))
    again = read_spec(path)
    assert again.cues == spec.cues and again.rubric == spec.rubric
    assert again.excluded == ("gender",) and again.data[0].path.name == "j.csv"


def test_unknown_key_suggests_the_closest():
    doc = _spec()
    doc["judgment"]["scael"] = "ordinal"
    msg = _problems(doc)
    assert "unknown key 'scael' in [judgment]" in msg and "did you mean 'scale'" in msg


def test_misspelt_table_name_suggests_the_closest():
    doc = _spec()
    doc["rubrik"] = {"x1": 1}
    assert "did you mean 'rubric'" in _problems(doc)


def test_missing_role_is_named():
    doc = _spec()
    del doc["columns"]["judgment"]
    assert "[columns] has no 'judgment'" in _problems(doc)


def test_cue_listed_twice_is_caught_by_the_toml_reader(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text('[study]\nname="t"\ndata="j.csv"\n[columns]\nrater="r"\ncase="c"\njudgment="j"\n'
                    '[judgment]\nmin=1\nmax=7\n[cues]\nx1="numeric"\nx1="numeric"\n')
    with pytest.raises(SpecError, match="listed twice"):
        read_spec(path)


def test_cue_that_is_also_a_role_column():
    assert "is also named in [columns]" in _problems(_spec(cues={"score": "numeric"}))


def test_rubric_with_unknown_cue_and_negative_weight():
    msg = _problems(_spec(rubric={"x2": 0.5, "region": -1}))
    assert "names 'x2', which is not a cue" in msg
    assert "negative weight" in msg


def test_excluded_attribute_that_is_a_cue():
    assert "is also a cue" in _problems(_spec(excluded={"columns": ["x1"]}))


def test_min_not_below_max():
    assert "min (7) must be below max (1)" in _problems(_spec(judgment={"scale": "ordinal", "min": 7,
                                                                         "max": 1}))


def test_phase_column_needs_phase_order():
    doc = _spec()
    doc["columns"]["phase"] = "phase"
    assert "no [phases] order" in _problems(doc)


def test_phases_without_any_phase_source():
    assert "has no phase column" in _problems(_spec(phases={"order": ["a", "b"]}))


def test_bad_scale_and_cue_type_are_named():
    msg = _problems(_spec(judgment={"scale": "ordnial", "min": 1, "max": 7},
                          cues={"x1": "numerc"}))
    assert "did you mean 'ordinal'" in msg and "did you mean 'numeric'" in msg


def test_every_problem_is_reported_at_once():
    doc = _spec(judgment={"scale": "ordinal", "min": 9, "max": 1}, rubric={"zz": 1})
    del doc["columns"]["rater"]
    err = pytest.raises(SpecError, parse_spec, doc, base_dir=Path("."))
    assert len(err.value.problems) >= 3


def test_missing_spec_file_says_how_to_make_one(tmp_path):
    with pytest.raises(SpecError, match="calibrate init"):
        read_spec(tmp_path / "nope.toml")
