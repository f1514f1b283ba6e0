"""The study spec: every validation rule names the problem and the fix."""

from pathlib import Path

import pytest

from calibrate.data.spec import (
    DEFAULT_MISSING_WORDS,
    known_scale_ranks,
    parse_spec,
    read_spec,
)
from calibrate.data.drafting import draft_spec
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


# ----------------------------------------------------------------------------- hostile values


@pytest.mark.parametrize("value", ["no", "false", 0, 1])
def test_string_or_number_booleans_are_refused(value):
    msg = _problems(_spec(study__criterion_only_for_selected=value))
    assert "criterion_only_for_selected must be true or false (without quotes)" in msg


@pytest.mark.parametrize("key, value", [("judgment__min", float("nan")), ("judgment__max", float("inf")),
                                        ("judgment__cut_off", float("-inf")),
                                        ("judgment__max", 10**400)])
def test_non_finite_spec_numbers_are_refused(key, value):
    assert "must be a finite number" in _problems(_spec(**{key: value}))


@pytest.mark.parametrize("weight", [float("inf"), float("nan")])
def test_non_finite_rubric_weight_is_refused(weight):
    msg = _problems(_spec(rubric={"x1": weight, "region": 1}))
    assert "[rubric] x1 must be a finite number" in msg


@pytest.mark.parametrize("cue, sep", [("g:missing", ":"), ("lvl=hi", "=")])
def test_cue_named_like_a_generated_term_is_refused(cue, sep):
    msg = _problems(_spec(cues={"x1": "numeric", cue: "numeric"}))
    assert f"[cues] cue '{cue}' holds '{sep}'" in msg


@pytest.mark.parametrize("changes, says", [
    ({"cues": {"_row": "numeric"}}, "[cues] cue '_row' starts with '_'"),
    ({"columns__rater": "_file"}, "[columns] rater '_file' starts with '_'"),
    ({"excluded": {"columns": ["_phase"]}}, "[excluded] column '_phase' starts with '_'"),
])
def test_internal_column_names_are_refused(changes, says):
    assert says in _problems(_spec(**changes))


def test_missing_words_are_explicit_and_default_only_for_numbers():
    spec = parse_spec(_spec(), base_dir=Path("."))
    assert spec.numeric_missing_words == DEFAULT_MISSING_WORDS
    assert spec.categorical_missing_words == ()  # a level "None" stays a level
    own = parse_spec(_spec(study__missing_words=["unknown", " n/a "]), base_dir=Path("."))
    assert own.numeric_missing_words == own.categorical_missing_words == ("unknown", "n/a")
    import tomllib

    again = parse_spec(tomllib.loads(own.to_toml()), base_dir=Path("."))
    assert again.missing_words == ("unknown", "n/a")  # written back as read
    assert "missing_words must be a list of words" in _problems(_spec(study__missing_words="NA"))


def test_labels_out_of_a_known_scale_order_are_refused():
    """The issue's case: words numbered alphabetically put 'poor' above 'great'."""
    msg = _problems(_spec(judgment={"scale": "ordinal", "min": 1, "max": 4,
                                    "labels": {"fair": 1, "good": 2, "great": 3, "poor": 4}}))
    assert "labels do not follow the order of the words (poor < fair < good < great)" in msg
    for labels in ({"poor": 1, "fair": 2, "good": 3, "great": 4},     # along the scale
                   {"poor": 4, "fair": 3, "good": 2, "great": 1},     # consistently reversed
                   {"brisk": 2, "calm": 1}):                          # not a known scale
        parse_spec(_spec(judgment={"scale": "ordinal", "min": 1, "max": 4, "labels": labels}),
                   base_dir=Path("."))


def test_known_scale_ranks_ignore_case_spaces_and_underscores():
    ranks = known_scale_ranks(["Strongly_Agree", "disagree", " neutral "])
    assert ranks["disagree"] < ranks[" neutral "] < ranks["Strongly_Agree"]
    assert known_scale_ranks(["poor", "banana"]) is None


def test_name_must_be_text_and_spec_folder_is_named(tmp_path):
    assert "[study] name must be text" in _problems(_spec(study__name={"a": 1}))
    with pytest.raises(SpecError, match="is a folder, not a spec file"):
        read_spec(tmp_path)


def test_draft_numbers_known_words_in_order_and_marks_unknown_words():
    import pandas as pd

    table = pd.DataFrame({"rater": ["a"] * 4, "case": ["c1", "c2", "c3", "c4"],
                          "rating": ["poor", "great", "good", "fair"], "x1": [1, 2, 3, 4]})
    text = draft_spec(table, data_name="j.csv", study_name="t")
    assert 'labels = { "poor" = 1, "fair" = 2, "good" = 3, "great" = 4 }' in text
    assert "alphabetical order" not in text
    table["rating"] = ["brisk", "keen", "calm", "keen"]
    text = draft_spec(table, data_name="j.csv", study_name="t")
    assert "# CHECK: these words are numbered in alphabetical order" in text


@pytest.mark.parametrize("key, value", [("study__data", "j\x00.csv"), ("study__cases", "c\x00.csv"),
                                        ("study__data", [{"path": "a\nb.csv"}])])
def test_paths_with_control_characters_are_refused(key, value):
    assert "holds a control character; give a plain file path" in _problems(_spec(**{key: value}))


def test_an_absolute_data_path_is_kept(tmp_path):
    spec = parse_spec(_spec(study__data=str(tmp_path / "j.csv")), base_dir=Path("/elsewhere"))
    assert spec.data[0].path == tmp_path / "j.csv"


@pytest.mark.parametrize("cues", [None, {}])
def test_agreement_only_study_needs_no_cues(cues):
    doc = _spec()
    if cues is None:
        del doc["cues"]
    else:
        doc["cues"] = cues
    assert parse_spec(doc, base_dir=Path(".")).cues == ()


def test_cues_that_are_not_a_table_and_excluded_without_cues():
    assert "leave it out for agreement-only data" in _problems(_spec(cues="x1"))
    msg = _problems(_spec(cues={}, excluded={"columns": ["gender"]}))
    assert "[excluded] needs at least one cue" in msg
