"""Each input rule alone: the rule function in calibrate.data.rules called on a small frame.

The whole door (files read, rules in order) is covered by test_ingest.py; here each rule's
own behaviour and message is pinned, rows numbered as a spreadsheet shows them (header row 1).
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibrate.data import rules
from calibrate.data.cues import CueRule
from calibrate.data.rules import FILE, PHASE, ROW, Collector
from calibrate.data.spec import parse_spec


def make_spec(**overrides):
    doc = {
        "study": {"name": "rules", "data": "judgments.csv"},
        "columns": {"rater": "rater", "case": "case", "judgment": "score"},
        "judgment": {"scale": "ordinal", "min": 1, "max": 7},
        "cues": {"gpa": "numeric", "essay": "numeric"},
    }
    for section, value in overrides.items():
        doc[section] = value
    return parse_spec(doc, base_dir=Path("/nowhere"))


def rows(**columns):
    """A judgments frame as the door holds it: text values, file and spreadsheet row."""
    frame = pd.DataFrame(columns).astype(object)
    frame[FILE] = "judgments.csv"
    frame[ROW] = np.arange(len(frame)) + 2
    if PHASE not in frame.columns:
        frame[PHASE] = None
    return frame


def messages(out, severity=None):
    return [p.message for p in out.items if severity is None or p.severity == severity]


# ----------------------------------------------------------------------------- columns


def test_missing_role_column_lists_the_available_ones():
    out = Collector()
    frame = rows(rater=["a"], case=["c1"], gpa=["1"], essay=["2"])
    rules.check_columns_exist(make_spec(), [frame], None, out)
    assert messages(out) == ["column 'score' (judgment) not found; available: rater, case, gpa, essay"]


def test_cue_missing_from_both_tables_is_named_with_its_role():
    out = Collector()
    frame = rows(rater=["a"], case=["c1"], score=["3"], gpa=["1"])
    rules.check_columns_exist(make_spec(), [frame], None, out)
    assert messages(out) == ["column 'essay' (cue) not found in the judgments table; add it or fix the spec"]


def test_cases_table_without_the_case_column_is_set_aside():
    out = Collector()
    spec = make_spec(study={"name": "rules", "data": "judgments.csv", "cases": "cases.csv"})
    frame = rows(rater=["a"], case=["c1"], score=["3"])
    cases = pd.DataFrame({"id": ["c1"], "gpa": ["1"], "essay": ["2"], ROW: [2]})
    assert rules.check_columns_exist(spec, [frame], cases, out) is None
    assert messages(out)[0].startswith("the cases table has no case column 'case' to join on")


# ----------------------------------------------------------------------------- ids and phases


def test_empty_ids_are_errors_naming_the_rows():
    out = Collector()
    frame = rows(rater=["a", " ", None], case=["c1", "c2", 3.0])
    before = frame.copy()
    kept = rules.check_ids(frame, {"rater": "rater", "case": "case"}, out)
    assert messages(out) == ["the rater id is empty in rows 3, 4; every judgment needs a rater"]
    assert kept["case"].tolist() == ["c1", "c2", "3"]  # a spreadsheet's 3.0 is the id '3'
    pd.testing.assert_frame_equal(frame, before)  # the input frame is not changed


def test_phase_not_in_the_order_is_an_error():
    out = Collector()
    spec = make_spec(columns={"rater": "rater", "case": "case", "judgment": "score", "phase": "ph"},
                     phases={"order": ["before", "after"]})
    frame = rows(rater=["a", "a", "a"], case=["c1", "c2", "c3"])
    frame[PHASE] = ["before", "during", None]
    kept = rules.check_phases(frame, spec, out)
    assert messages(out) == [
        "phase '(empty)' in rows 4 is not one of [phases] order (before, after)",
        "phase 'during' in rows 3 is not one of [phases] order (before, after)",
    ]
    assert kept[PHASE].tolist()[:2] == ["before", "during"] and pd.isna(kept[PHASE].iat[2])


def test_without_phases_the_phase_rule_keeps_every_row():
    out = Collector()
    frame = rows(rater=["a"], case=["c1"])
    assert rules.check_phases(frame, make_spec(), out) is frame
    assert not out.items


# ----------------------------------------------------------------------------- duplicates


def test_identical_rows_are_dropped_with_a_warning():
    out = Collector()
    frame = rows(rater=["a", "a", "a"], case=["c1", "c1", "c1"], score=["3", "3", "3"],
                 seq=["1", "1", "2"])
    kept = rules.drop_duplicates(frame, out)
    assert kept[ROW].tolist() == [2, 4]  # the row with another sequence is a repeat, not a duplicate
    assert messages(out, "warning") == [
        "1 row(s) identical in every column to an earlier row were dropped as duplicates (rows 3)"]


# ----------------------------------------------------------------------------- judgments and scale


def test_words_map_only_through_labels():
    values, present = rules.judgment_values(pd.Series([" Strong ", "5", "weak", None]),
                                            {"strong": 6, "Weak": 2})
    assert values.tolist()[:3] == [6.0, 5.0, 2.0]
    assert present.tolist() == [True, True, True, False]


def test_unmapped_word_is_an_error_with_the_fix():
    out = Collector()
    frame = rows(rater=["a", "a"], case=["c1", "c2"], score=["good", "4"])
    rules.check_judgments(frame, make_spec(), out)
    problem = out.errors[0]
    assert (problem.row, problem.column) == (2, "score")
    assert problem.message == ("judgment 'good' is not a number; use numbers, or map the words to "
                               "numbers with [judgment] labels, e.g. labels = { good = ? }")


def test_judgment_outside_the_scale_is_an_error():
    out = Collector()
    frame = rows(rater=["a", "a"], case=["c1", "c2"], score=["8", "7"])
    rules.check_judgments(frame, make_spec(), out)
    assert messages(out) == ["judgment 8 lies outside the scale 1..7; fix the value or the "
                             "[judgment] min and max"]


def test_binary_scale_holds_only_0_and_1():
    out = Collector()
    spec = make_spec(judgment={"scale": "binary"})
    frame = rows(rater=["a", "a", "a"], case=["c1", "c2", "c3"], score=["0", "1", "0.5"])
    rules.check_judgments(frame, spec, out)
    assert messages(out) == ["judgment 0.5 is not 0 or 1 on a binary scale"]


def test_row_without_a_judgment_is_dropped_and_counted():
    out = Collector()
    frame = rows(rater=["a", "a", "a"], case=["c1", "c2", "c3"], score=["3", "", None])
    kept = rules.check_judgments(frame, make_spec(), out)
    assert kept["_judgment"].tolist() == [3.0]
    assert messages(out, "warning") == ["2 row(s) without a judgment were dropped (rows 3, 4)"]


def test_sequence_is_a_number_or_a_date_time():
    out = Collector()
    frame = rows(rater=["a", "a"], case=["c1", "c2"], seq=["2024-05-01 10:00", "2024-05-01 10:01"])
    kept = rules.check_sequence(frame, {"sequence": "seq"}, out)
    assert kept["_sequence"].diff().iloc[1] == 60.0
    frame = rows(rater=["a", "a"], case=["c1", "c2"], seq=["1", "soon"])
    rules.check_sequence(frame, {"sequence": "seq"}, out)
    assert messages(out) == ["sequence 'soon' is neither a finite number nor a date-time"]


# ----------------------------------------------------------------------------- cues belong to the case


def test_case_value_differing_between_rows_is_an_error():
    out = Collector()
    frame = rows(rater=["a", "b", "a"], case=["c1", "c1", "c2"], gpa=["3.1", "3.4", "2.0"])
    values = rules.case_value_from_rows(frame, "gpa", "case", out)
    assert messages(out) == ["case 'c1' has different values of 'gpa' in rows 2, 3; cues belong to the "
                             "case, so a case's value must be the same on every row"]
    assert values.to_dict() == {"c1": "3.1", "c2": "2.0"}


def test_case_listed_twice_in_the_cases_table_with_different_values():
    out = Collector()
    spec = make_spec(study={"name": "rules", "data": "judgments.csv", "cases": "cases.csv"})
    cases = pd.DataFrame({"case": ["c1", "c1", "c2", "c2"], "gpa": ["1", "2", "3", "3"],
                          "essay": ["1", "1", "2", "2"], ROW: [2, 3, 4, 5]})
    judged = rows(case=["c1", "c2", "c9"])
    table = rules.index_cases_table(cases, judged, spec, out)
    assert messages(out) == [
        "case 'c1' appears in rows 2, 3 with different values; cues belong to the case, so keep one "
        "row per case",
        "1 case id(s) in the judgments are missing from the cases table: c9",
    ]
    assert table.index.tolist() == ["c1", "c2"]  # an exact repeat of a row is kept once


def test_numeric_cue_word_is_an_error():
    out = Collector()
    cases = pd.DataFrame({"gpa": ["3.5", "high"]}, index=["c1", "c2"])
    kept = rules.check_numeric_cues(cases, (CueRule("gpa", "numeric"),), pd.Series({"c1": 2, "c2": 3}),
                                    "cases.csv", out)
    assert (out.errors[0].row, out.errors[0].message) == (
        3, "cue value 'high' of case 'c2' is not a number; fix it or declare the cue categorical")
    assert kept["gpa"].iloc[0] == 3.5


# ----------------------------------------------------------------------------- missing values


def test_missing_criterion_only_leaves_the_lens_model():
    out = Collector()
    cases = pd.DataFrame({"outcome": ["1.5", None, ""]}, index=["c1", "c2", "c3"])
    kept = rules.check_criterion(cases, "outcome", None, out)
    assert kept["__criterion__"].isna().tolist() == [False, True, True]
    assert messages(out, "warning") == [
        "the criterion is missing for 2 of 3 cases; those cases leave the lens model only"]


@pytest.mark.parametrize("missing, says", [("drop", "those cases leave the policy fits"),
                                           ("indicator", "a 0/1 'missing' term is fitted")])
def test_missing_cue_follows_its_rule(missing, says):
    out = Collector()
    rules.report_missing_cue(pd.Series([1.0, np.nan, np.nan]), CueRule("gpa", "numeric", missing), out)
    (problem,) = out.items
    assert problem.severity == "warning"
    assert "missing for 2 case(s)" in problem.message and says in problem.message


def test_no_missing_cue_no_warning():
    out = Collector()
    rules.report_missing_cue(pd.Series([1.0, 2.0]), CueRule("gpa", "numeric"), out)
    assert not out.items


# ----------------------------------------------------------------------------- constant cues


def test_constant_cue_is_an_error():
    out = Collector()
    rules.check_constant_cue(pd.Series([4.0, 4.0, np.nan]), CueRule("essay", "numeric"), out)
    assert messages(out) == ["cue 'essay' is constant over the judged cases; its weight cannot be "
                             "estimated. Remove it from [cues]"]
    out = Collector()
    rules.check_constant_cue(pd.Series(["x", "y"]), CueRule("school", "categorical"), out)
    assert not out.items


# ----------------------------------------------------------------------------- categorical cues and excluded


def test_categorical_cue_levels_become_dummies_against_the_most_frequent():
    from calibrate.data.cues import build_cue_design

    cases = pd.DataFrame({"school": ["b", "a", "b", "c"]}, index=["c1", "c2", "c3", "c4"])
    design = build_cue_design(cases, [CueRule("school", "categorical")])
    assert design.columns == ("school=a", "school=c")
    assert design.reference_levels == {"school": "b"}


def test_excluded_attribute_type_follows_its_values():
    cases = pd.DataFrame({"age": ["31", "45"], "region": ["north", "7"]}, index=["c1", "c2"])
    kept, types = rules.excluded_types(cases, ("age", "region"))
    assert types == {"age": "numeric", "region": "categorical"}
    assert kept["age"].tolist() == [31.0, 45.0] and cases["age"].tolist() == ["31", "45"]


# ----------------------------------------------------------------------------- repeats


def test_second_judgment_is_the_repeat_and_a_third_is_dropped():
    out = Collector()
    frame = rows(_rater=["a"] * 4 + ["b"], _case=["c1", "c2", "c1", "c1", "c1"])
    frame["_sequence"] = [3.0, 1.0, 5.0, 7.0, np.nan]
    kept = rules.mark_repeats(frame, out, "first-two")
    assert kept[["_rater", "_case", "_nth", "_position"]].values.tolist() == [
        ["a", "c2", 0, 0], ["a", "c1", 0, 1], ["a", "c1", 1, 2], ["b", "c1", 0, 0]]
    assert kept.attrs["repeats"] == "first-two"
    assert messages(out, "warning") == [
        "1 rater-case pair(s) (1 rater(s)) were shown more than twice, up to 3 times; the 1 judgment(s) "
        "after the second of a case (rows 5) were dropped, as [judgment] repeats = \"first-two\" asks "
        "(only the first and its repeat are used)"]


def test_every_presentation_is_kept_by_default_when_a_case_is_shown_more_than_twice():
    out = Collector()
    frame = rows(_rater=["a"] * 6 + ["b"] * 3, _case=["c1", "c2", "c1", "c1", "c2", "c2", "c1", "c1", "c1"])
    frame["_sequence"] = np.arange(9, dtype=float)
    kept = rules.mark_repeats(frame, out, None)
    assert kept.attrs["repeats"] == "all"
    assert len(kept) == 9 and kept["_nth"].tolist() == [0, 0, 1, 2, 1, 2, 0, 1, 2]
    assert kept.loc[kept["_rater"] == "a", "_position"].tolist() == [0, 1, 2, 3, 4, 5]
    # one grouped warning for the three rater-case pairs, never one per case
    assert messages(out, "warning") == [
        "3 rater-case pair(s) (2 rater(s)) were shown more than twice, up to 3 times; every presentation "
        "is used ([judgment] repeats = \"all\": the policy on each case's mean judgment, consistency over "
        "all presentations)"]


def test_repeat_mode_follows_the_spec_else_the_most_presentations():
    assert rules.repeat_mode(2, None) == "first-two"
    assert rules.repeat_mode(3, None) == "all"
    assert rules.repeat_mode(10, "first-two") == "first-two"
    assert rules.repeat_mode(2, "all") == "all"


def test_without_a_sequence_row_order_decides_the_first():
    out = Collector()
    frame = rows(_rater=["a", "a"], _case=["c1", "c1"])
    frame["_sequence"] = np.nan
    kept = rules.mark_repeats(frame, out)
    assert kept.loc[kept["_nth"] == 0, ROW].tolist() == [2]


def test_trained_rater_without_judgments_is_an_error():
    out = Collector()
    rules.check_trained({"a", "b"}, ("a", "z"), out)
    assert messages(out) == ["[phases] trained names rater 'z', who has no judgments; check the id"]


# ----------------------------------------------------------------------------- too few cases


def test_rater_with_fewer_usable_cases_than_terms_plus_two_is_kept_out():
    out = Collector()
    first = pd.DataFrame({"rater": ["r10"] * 5 + ["r2"] * 4, "case": list("abcde") + list("abcd")})
    complete = pd.Series({"a": True, "b": True, "c": True, "d": False, "e": True})
    fit, too_few = rules.too_few_cases(first, complete, 2, None, out)
    assert fit == ("r10",) and too_few == {"r2": 3}
    assert messages(out, "warning") == [
        "rater 'r2' has 3 usable case(s), fewer than the 4 a policy fit needs "
        "(cue terms + 2); kept out of policy fits"]
    named = Collector()
    rules.too_few_cases(first, complete, 2, "before", named)
    assert "in phase 'before'" in messages(named, "warning")[0]


# ----------------------------------------------------------------------------- README points here


def test_every_test_readme_cites_for_an_input_rule_exists():
    import re

    here = Path(__file__).resolve()
    readme = (here.parents[2] / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## Input"):readme.index("## The study spec")]
    cited = set(re.findall(r"\b(test_[a-z0-9_]+)`", section))
    defined = set()
    for name in ("test_ingest_rules.py", "test_ingest.py"):
        defined |= set(re.findall(r"^def (test_\w+)", (here.parent / name).read_text(encoding="utf-8"),
                                  flags=re.M))
    assert len(cited) >= 9
    assert cited <= defined, cited - defined


# ----------------------------------------------------------------------------- hostile values


def test_missing_words_blank_cells_ignoring_case_and_spaces():
    cells = pd.Series(["NA", " n/a ", "None", "none", "", "  ", "NAN", "Nancy", "0"])
    kept = rules.blank_missing_words(cells, ("NA", "N/A", "None", "NaN"))
    assert kept.isna().tolist() == [True, True, True, True, True, True, True, False, False]


def test_numbers_read_the_missing_words_and_keep_infinities_for_refusal():
    values, bad = rules.to_numbers(pd.Series(["1.5", "NA", "inf", "1e400", "-Infinity", "x"]),
                                   ("NA",))
    assert bad.tolist() == [False, False, False, False, False, True]
    assert rules.non_finite(values).tolist() == [False, False, True, True, True, False]


def test_non_finite_judgment_is_an_error_naming_its_row():
    out = Collector()
    spec = make_spec(judgment={"scale": "continuous"})
    frame = rows(rater=["a", "a"], case=["c1", "c2"], score=["1e400", "3"])
    rules.check_judgments(frame, spec, out)
    (problem,) = out.errors
    assert problem.row == 2 and "judgment '1e400' is not a finite number" in problem.message


def test_judgment_label_wins_over_a_missing_word_of_the_same_spelling():
    values, present = rules.judgment_values(pd.Series(["none", "NA", "some"]),
                                            {"none": 0, "some": 1}, ("NA", "None"))
    assert values.tolist()[0] == 0 and present.tolist() == [True, False, True]


def test_only_min_scale_message_reads_as_an_open_range():
    out = Collector()
    spec = make_spec(judgment={"scale": "continuous", "min": 2})
    rules.check_judgments(rows(rater=["a"], case=["c1"], score=["1"]), spec, out)
    assert "lies outside the scale 2..;" in out.errors[0].message


def test_non_finite_cue_and_criterion_are_errors_naming_the_case():
    out = Collector()
    cases = pd.DataFrame({"gpa": ["3.5", "inf"], "outcome": ["-inf", "2"]}, index=["c1", "c2"])
    kept = rules.check_numeric_cues(cases, (CueRule("gpa", "numeric"),), pd.Series({"c1": 2, "c2": 3}),
                                    "cases.csv", out)
    rules.check_criterion(kept, "outcome", "cases.csv", out, row_of_case=pd.Series({"c1": 2, "c2": 3}))
    assert [(p.row, p.column) for p in out.errors] == [(3, "gpa"), (2, "outcome")]
    assert all("is not a finite number" in p.message for p in out.errors)


def test_categorical_levels_lose_only_the_specs_own_missing_words():
    cases = pd.DataFrame({"kind": ["None", "NA", "alpha", None]}, index=list("abcd"))
    assert rules.blank_categorical_missing(cases, ["kind"], ())["kind"].isna().tolist() == [
        False, False, False, True]
    assert rules.blank_categorical_missing(cases, ["kind"], ("NA",))["kind"].isna().tolist() == [
        False, True, False, True]


@pytest.mark.parametrize("rater, says", [("NA", None), ("None", None),
                                         ("a\nb", "control character"),
                                         ("x" * 101, "longer than 100 characters")])
def test_ids_are_text_never_missing_words(rater, says):
    out = Collector()
    kept = rules.check_ids(rows(rater=[rater], case=["c1"]), {"rater": "rater", "case": "case"}, out)
    if says is None:
        assert not out.items and kept["rater"].tolist() == [rater]
    else:
        assert says in out.errors[0].message


def test_empty_cue_is_named_as_empty_not_constant():
    out = Collector()
    rules.check_constant_cue(pd.Series([np.nan, np.nan]), CueRule("essay", "numeric"), out)
    assert messages(out) == ["cue 'essay' has no value in any judged case; fill it in or remove "
                             "it from [cues]"]


def test_zoned_date_times_are_put_on_one_clock_and_mixed_zones_are_refused():
    out = Collector()
    frame = rows(rater=["a", "a"], case=["c1", "c2"], seq=["2024-05-01T10:00Z", "2024-05-01T12:01+02:00"])
    kept = rules.check_sequence(frame, {"sequence": "seq"}, out)
    assert kept["_sequence"].diff().iloc[1] == 60.0 and not out.items
    frame = rows(rater=["a", "a"], case=["c1", "c2"], seq=["2024-05-01 10:00", "2024-05-01 10:01+02:00"])
    rules.check_sequence(frame, {"sequence": "seq"}, out)
    assert "the sequence date-times mix time zones" in messages(out)[0]
