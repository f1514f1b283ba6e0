"""Every input rule of the design, each on a small hand-made table."""

import numpy as np
import pandas as pd
import pytest

from calibrate.data.ingest import inspect_study, load_study
from calibrate.errors import DataError
from tests.helpers import simple_judgments, write_study


def _messages(problems, severity=None):
    return [str(p) for p in problems if severity is None or p.severity == severity]


def test_clean_table_loads(tmp_path):
    table = load_study(write_study(tmp_path, simple_judgments()))
    (phase,) = table.phases
    assert phase.name is None and phase.label == "all"
    assert len(phase.first) == 36 and len(phase.repeats) == 0
    assert table.design.columns == ("x1", "x2")
    assert phase.fit_raters == ("r1", "r2", "r3")


def test_non_numeric_judgment_names_row_and_column(tmp_path):
    df = simple_judgments()
    df["score"] = df["score"].astype(object)
    df.loc[4, "score"] = "high"
    _, problems = inspect_study(write_study(tmp_path, df))
    (msg,) = _messages(problems, "error")
    assert "judgments.csv, row 6, column 'score'" in msg  # header is row 1, df row 4 is line 6
    assert "'high' is not a number" in msg and "labels" in msg


def test_judgment_words_with_labels_are_mapped(tmp_path):
    df = simple_judgments()
    df["score"] = np.where(df["score"] >= 4, "admit", "decline")
    path = write_study(tmp_path, df, scale="binary", jmin=0, jmax=1,
                       extra_judgment='labels = { admit = 1, decline = 0 }')
    first = load_study(path).phases[0].first
    assert set(first["judgment"]) == {0.0, 1.0}


def test_judgment_outside_scale(tmp_path):
    df = simple_judgments()
    df.loc[0, "score"] = 9
    _, problems = inspect_study(write_study(tmp_path, df))
    assert any("outside the scale 1..7" in m and "row 2" in m for m in _messages(problems, "error"))


def test_cues_belong_to_the_case(tmp_path):
    df = simple_judgments()
    df.loc[(df["case"] == "c3") & (df["rater"] == "r2"), "x1"] = 99.0
    _, problems = inspect_study(write_study(tmp_path, df))
    (msg,) = _messages(problems, "error")
    assert "case 'c3' has different values of 'x1'" in msg and "cues belong to the case" in msg


def test_repeat_second_judgment_is_a_retest_pair_and_third_is_dropped(tmp_path):
    df = simple_judgments()
    df["seq"] = df.groupby("rater").cumcount() + 1
    extra = df.loc[(df["rater"] == "r1") & (df["case"] == "c2")].copy()
    second = extra.assign(seq=100, score=1)
    third = extra.assign(seq=101, score=7)
    df = pd.concat([df, second, third], ignore_index=True)
    path = write_study(tmp_path, df, extra_columns='sequence = "seq"', extra_judgment='repeats = "first-two"')
    table, problems = inspect_study(path)
    phase = table.phases[0]
    (pair,) = phase.repeats.itertuples()
    assert (pair.rater, pair.case, pair.second) == ("r1", "c2", 1.0)
    assert any("more than twice" in m for m in _messages(problems, "warning"))
    assert len(phase.ordered.query("rater == 'r1'")) == 13  # 12 firsts + 1 repeat, third dropped
    assert phase.repeat_mode == "first-two" and phase.presentations.empty
    assert (phase.first["case_mean"] == phase.first["judgment"]).all()


def test_every_presentation_is_used_by_default_when_a_case_is_shown_three_times(tmp_path):
    df = simple_judgments()
    df["seq"] = df.groupby("rater").cumcount() + 1
    extra = df.loc[(df["rater"] == "r1") & (df["case"] == "c2")].copy()
    first_score = float(extra["score"].iloc[0])
    df = pd.concat([df, extra.assign(seq=100, score=1), extra.assign(seq=101, score=7)], ignore_index=True)
    table, problems = inspect_study(write_study(tmp_path, df, extra_columns='sequence = "seq"'))
    phase = table.phases[0]
    assert phase.repeat_mode == "all"
    assert len(phase.ordered.query("rater == 'r1'")) == 14  # every judgment in reading order
    shown = phase.presentations.query("rater == 'r1' and case == 'c2'")
    assert shown["nth"].tolist() == [0, 1, 2] and shown["judgment"].tolist() == [first_score, 1.0, 7.0]
    row = phase.first.query("rater == 'r1' and case == 'c2'").iloc[0]
    assert row["judgment"] == first_score and row["case_mean"] == pytest.approx((first_score + 8.0) / 3)
    assert sum("more than twice" in m for m in _messages(problems, "warning")) == 1


def test_first_judgment_is_decided_by_sequence_not_row_order(tmp_path):
    df = simple_judgments()
    df["seq"] = df.groupby("rater").cumcount() + 10
    later_first = df.loc[(df["rater"] == "r1") & (df["case"] == "c1")].assign(seq=1, score=7)
    df = pd.concat([df, later_first], ignore_index=True)  # appears last, but read first
    table = load_study(write_study(tmp_path, df, extra_columns='sequence = "seq"'))
    first = table.phases[0].first.set_index(["rater", "case"])
    assert first.loc[("r1", "c1"), "judgment"] == 7.0
    assert table.phases[0].repeats["case"].tolist() == ["c1"]


def test_identical_rows_are_duplicates_not_repeats(tmp_path):
    df = simple_judgments()
    df = pd.concat([df, df.iloc[[0]]], ignore_index=True)
    table, problems = inspect_study(write_study(tmp_path, df))
    assert len(table.phases[0].repeats) == 0
    assert any("duplicates" in m and "rows 38" in m for m in _messages(problems, "warning"))


def test_missing_judgment_is_dropped_and_counted(tmp_path):
    df = simple_judgments()
    df["score"] = df["score"].astype(object)
    df.loc[[3, 5], "score"] = None
    table, problems = inspect_study(write_study(tmp_path, df))
    assert len(table.phases[0].first) == 34
    assert any("2 row(s) without a judgment were dropped" in m for m in _messages(problems))


def test_missing_cue_drop_rule_leaves_fits(tmp_path):
    df = simple_judgments()
    df.loc[df["case"] == "c4", "x2"] = np.nan
    table, problems = inspect_study(write_study(tmp_path, df))
    assert not table.design.complete_rows()[table.design.case_ids.index("c4")]
    assert any("those cases leave the policy fits" in m for m in _messages(problems, "warning"))


def test_missing_cue_indicator_rule_adds_a_term(tmp_path):
    df = simple_judgments()
    df.loc[df["case"].isin(["c4", "c5"]), "x2"] = np.nan
    path = write_study(tmp_path, df,
                       cues='x1 = "numeric"\nx2 = { type = "numeric", missing = "indicator" }')
    table = load_study(path)
    assert table.design.columns == ("x1", "x2", "x2:missing")
    frame = table.design.to_frame()
    assert frame.loc["c4", "x2:missing"] == 1.0
    assert frame.loc["c4", "x2"] == pytest.approx(frame.loc[~frame.index.isin(["c4", "c5"]), "x2"].mean())


def test_categorical_cue_gets_dummies_against_the_most_frequent_level(tmp_path):
    df = simple_judgments(n_cases=12)
    levels = ["north"] * 6 + ["south"] * 4 + ["east"] * 2
    df["region"] = df["case"].map({f"c{i + 1}": lv for i, lv in enumerate(levels)})
    path = write_study(tmp_path, df, cues='x1 = "numeric"\nregion = "categorical"')
    design = load_study(path).design
    assert design.reference_levels == {"region": "north"}
    assert design.columns == ("x1", "region=east", "region=south")
    assert design.cue_groups() == [[0], [1, 2]]


def test_cases_table_joined_on_case_id(tmp_path):
    df = simple_judgments()
    cases = df.drop_duplicates("case")[["case", "x1", "x2"]]
    path = write_study(tmp_path, df[["rater", "case", "score"]], cases=cases)
    assert load_study(path).design.n_columns == 2


def test_case_missing_from_cases_table(tmp_path):
    df = simple_judgments()
    cases = df.drop_duplicates("case")[["case", "x1", "x2"]].iloc[1:]
    _, problems = inspect_study(write_study(tmp_path, df[["rater", "case", "score"]], cases=cases))
    assert any("missing from the cases table: c1" in m for m in _messages(problems, "error"))


def test_phase_column_splits_the_analysis(tmp_path):
    df = simple_judgments()
    df["when"] = np.where(df["rater"] == "r3", "after", "before")
    path = write_study(tmp_path, df, extra_columns='phase = "when"',
                       extra='[phases]\norder = ["before", "after"]')
    table = load_study(path)
    assert [p.name for p in table.phases] == ["before", "after"]
    assert table.phases[1].raters == ("r3",)


def test_unknown_phase_value_is_an_error(tmp_path):
    df = simple_judgments()
    df["when"] = "during"
    path = write_study(tmp_path, df, extra_columns='phase = "when"',
                       extra='[phases]\norder = ["before", "after"]')
    _, problems = inspect_study(path)
    assert any("phase 'during'" in m for m in _messages(problems, "error"))


def test_rater_with_too_few_cases_is_kept_out_of_fits(tmp_path):
    df = simple_judgments()
    df = df.loc[~((df["rater"] == "r2") & (df["case"].isin([f"c{i}" for i in range(4, 13)])))]
    table, problems = inspect_study(write_study(tmp_path, df))
    assert table.phases[0].too_few == {"r2": 3}
    assert "r2" not in table.phases[0].fit_raters


def test_constant_cue_is_an_error(tmp_path):
    df = simple_judgments()
    df["x2"] = 1.0
    _, problems = inspect_study(write_study(tmp_path, df))
    assert any("cue 'x2' is constant" in m for m in _messages(problems, "error"))


def test_semicolon_csv_with_bom(tmp_path):
    df = simple_judgments()
    text = df.to_csv(index=False, sep=";")
    (tmp_path / "judgments.csv").write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    path = write_study(tmp_path, text)
    (tmp_path / "judgments.csv").write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    assert len(load_study(path).phases[0].first) == 36


def test_xlsx_and_parquet_inputs(tmp_path):
    df = simple_judgments()
    for suffix in ("xlsx", "parquet"):
        folder = tmp_path / suffix
        path = write_study(folder, df)
        target = folder / f"judgments.{suffix}"
        getattr(df, "to_excel" if suffix == "xlsx" else "to_parquet")(target, index=False)
        path.write_text(path.read_text().replace("judgments.csv", target.name))
        assert len(load_study(path).phases[0].first) == 36


def test_missing_column_lists_the_available_ones(tmp_path):
    df = simple_judgments().rename(columns={"score": "rating"})
    with pytest.raises(DataError, match="column 'score' \\(judgment\\) not found; available: rater, case, "
                                        "rating"):
        load_study(write_study(tmp_path, df))


def test_inputs_are_not_modified(tmp_path):
    path = write_study(tmp_path, simple_judgments())
    before = (tmp_path / "judgments.csv").read_bytes()
    load_study(path)
    assert (tmp_path / "judgments.csv").read_bytes() == before


def test_read_table_reads_missing_words_only_when_asked(tmp_path):
    from calibrate.data.ingest import read_table

    path = tmp_path / "t.csv"
    path.write_text("rater,case,kind\nNA,c1,None\nr2,c2,\n", encoding="utf-8")
    raw = read_table(path, missing_words=())  # how the door reads: words kept, empty is missing
    assert raw["rater"].tolist() == ["NA", "r2"] and raw["kind"].isna().tolist() == [False, True]
    plain = read_table(path)  # other commands: the documented list applies to every column
    assert plain["rater"].isna().tolist() == [True, False]
    assert plain["kind"].isna().tolist() == [True, True]


def test_na_rater_and_none_level_survive_the_door(tmp_path):
    df = simple_judgments()
    df["rater"] = df["rater"].replace("r1", "NA")
    df["x2"] = np.where(df["case"].isin(["c1", "c2", "c3", "c4"]), "None",
                        np.where(df["case"].isin(["c5", "c6", "c7", "c8"]), "Some", "Many"))
    table = load_study(write_study(tmp_path, df, cues='x1 = "numeric"\nx2 = "categorical"'))
    assert "NA" in table.phases[0].raters
    assert "x2=None" in table.design.columns or table.design.reference_levels["x2"] == "None"
    assert table.design.complete_rows().all()  # no case lost to a level read as missing


def test_read_table_never_blanks_an_id_column(tmp_path):
    # plan, score and collect read their tables with the documented missing words; the
    # file or display-code column they name is an id, so "NA" or "None" stays as written.
    from calibrate.data.ingest import read_table

    path = tmp_path / "pool.csv"
    path.write_text("file,grade\nNA,3\nNone,NA\nf3,4\n", encoding="utf-8")
    table = read_table(path, id_columns=("file",))
    assert table["file"].tolist() == ["NA", "None", "f3"]
    assert table["grade"].isna().tolist() == [False, True, False]
