"""The input rules computed on integer codes equal the pandas versions they replaced.

Each reference below is the code as it was (string sort and groupby over every row); the
new path is compared on small random tables with missing phases, ties and missing
sequence values, non-ASCII ids, and cases shown up to four times.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibrate.data.rules import (CONTROL_CHARACTERS, FILE, MAX_ID_CHARS, PHASE, ROW, Collector,
                                  _warn_many_presentations, as_id, check_ids, map_distinct,
                                  mark_repeats, natural_key, repeat_mode, rows_text,
                                  too_few_cases)


def reference_mark_repeats(data, out, mode="first-two"):
    data = data.copy()
    data["_order"] = np.arange(len(data))
    data = data.sort_values([PHASE, "_rater", "_sequence", "_order"], kind="mergesort", na_position="last")
    showings = data.groupby([PHASE, "_rater", "_case"], dropna=False, sort=False)
    data["_nth"] = showings.cumcount()
    group = showings.ngroup().to_numpy()
    data["_shown"] = np.bincount(group)[group] if group.size else np.zeros(0, dtype=np.intp)
    mode = repeat_mode(int(data["_shown"].max()) if len(data) else 0, mode)
    third = data["_nth"] >= 2
    if third.any():
        _warn_many_presentations(data, third, mode, out)
    if mode == "first-two":
        data = data.loc[~third].copy()
    data["_position"] = data.groupby([PHASE, "_rater"], dropna=False).cumcount()
    data.attrs["repeats"] = mode
    return data


def judgments(seed: int, *, phases: bool, sequence: bool) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 300))
    raters = np.array(["b", "a", "Ä", "a2", "10", "9", "王"], dtype=object)
    cases = np.array([f"c{i}" for i in range(12)], dtype=object)
    frame = pd.DataFrame({
        "_rater": pd.array(raters[rng.integers(0, len(raters), n)], dtype="str"),
        "_case": pd.array(cases[rng.integers(0, len(cases), n)], dtype="str"),
        "score": rng.integers(1, 8, n).astype(float),
        FILE: "judgments.csv",
        ROW: np.arange(n) + 2,
    })
    if phases:
        frame[PHASE] = pd.array(rng.choice(np.array(["before", "after", None], dtype=object), n), dtype="str")
    else:
        frame[PHASE] = None
    seq = rng.integers(0, 20, n).astype(float)            # ties on purpose
    seq[rng.random(n) < 0.2] = np.nan
    frame["_sequence"] = seq if sequence else np.nan
    return frame


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize("mode", ["first-two", "all", None])
def test_mark_repeats_equals_the_pandas_version(seed, mode):
    frame = judgments(seed, phases=seed % 2 == 0, sequence=seed % 3 != 0)
    new_out, old_out = Collector(), Collector()
    new = mark_repeats(frame, new_out, mode)
    old = reference_mark_repeats(frame, old_out, mode)
    pd.testing.assert_frame_equal(new, old)
    assert new.attrs == old.attrs
    assert new_out.items == old_out.items


def test_mark_repeats_of_an_empty_table():
    frame = judgments(0, phases=True, sequence=True).iloc[:0]
    pd.testing.assert_frame_equal(mark_repeats(frame, Collector()), reference_mark_repeats(frame, Collector()))


def reference_check_ids(data, columns, out):
    data = data.copy()
    for role in ("rater", "case"):
        col = columns[role]
        ids = map_distinct(data[col], as_id)
        missing = ids.isna()
        for fname, rows in data.loc[missing].groupby(FILE)[ROW]:
            out.error(f"the {role} id is empty in rows {rows_text(rows.tolist())}; every judgment "
                      f"needs a {role}", file=fname, column=col)
        odd = ids.notna() & ids.str.contains(CONTROL_CHARACTERS, na=False)
        for fname, rows in data.loc[odd].groupby(FILE)[ROW]:
            out.error(f"the {role} id in rows {rows_text(rows.tolist())} holds a line break, tab or "
                      "other control character; ids must be printable text on one line",
                      file=fname, column=col)
        too_long = ids.notna() & (ids.str.len() > MAX_ID_CHARS)
        for fname, rows in data.loc[too_long].groupby(FILE)[ROW]:
            out.error(f"the {role} id in rows {rows_text(rows.tolist())} is longer than "
                      f"{MAX_ID_CHARS} characters; ids title the reports, so shorten them (a "
                      "code, with the long names kept elsewhere)", file=fname, column=col)
        data[col] = ids
    return data


ODD_IDS = [" r1 ", "r1", "", "   ", None, np.nan, "a\tb", "line\nbreak", "x" * (MAX_ID_CHARS + 1), "NA",
           "王小明", "r\x1b[31m"]


@pytest.mark.parametrize("seed", range(8))
def test_check_ids_equals_the_row_by_row_version(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 200))
    pick = np.array(ODD_IDS + [f"r{i}" for i in range(20)], dtype=object)
    frame = pd.DataFrame({"rater": pick[rng.integers(0, len(pick), n)],
                          "case": pick[rng.integers(0, len(pick), n)],
                          FILE: rng.choice(["a.csv", "b.csv"], n), ROW: np.arange(n) + 2})
    if seed % 2:
        frame["rater"] = frame["rater"].astype("str")
    if seed % 4 == 3:   # a caller's DataFrame: numbers and an unhashable cell among the ids
        frame["case"] = pd.Series([1.0, 2, "c", [1]] * (n // 4) + ["c"] * (n % 4), dtype=object)
    columns = {"rater": "rater", "case": "case"}
    new_out, old_out = Collector(), Collector()
    pd.testing.assert_frame_equal(check_ids(frame, columns, new_out), reference_check_ids(frame, columns, old_out))
    assert new_out.items == old_out.items


def test_check_ids_of_only_empty_ids():
    frame = pd.DataFrame({"rater": [None, np.nan], "case": ["", " "], FILE: "a.csv", ROW: [2, 3]})
    new_out, old_out = Collector(), Collector()
    columns = {"rater": "rater", "case": "case"}
    pd.testing.assert_frame_equal(check_ids(frame, columns, new_out), reference_check_ids(frame, columns, old_out))
    assert new_out.items == old_out.items and len(new_out.items) == 2


def reference_too_few_cases(first, complete, n_terms, phase_name, out):
    usable = first.loc[first["case"].map(complete).to_numpy(dtype=bool)].groupby("rater").size()
    usable = usable.reindex(sorted(first["rater"].unique(), key=natural_key), fill_value=0)
    too_few = {r: int(n) for r, n in usable.items() if n < n_terms + 2}
    for rater, n in too_few.items():
        where = f" in phase '{phase_name}'" if phase_name is not None else ""
        out.warn(f"rater '{rater}' has {n} usable case(s){where}, fewer than the "
                 f"{n_terms + 2} a policy fit needs (cue terms + 2); kept out of policy fits",
                 kind="too_few_cases", rater=str(rater), phase=phase_name)
    return tuple(r for r in usable.index if r not in too_few), too_few


@pytest.mark.parametrize("seed", range(6))
def test_too_few_cases_equals_the_groupby_version(seed):
    rng = np.random.default_rng(seed)
    raters = [f"r{i}" for i in range(1, 12)] + ["r10a", "王"]
    cases = [f"c{i}" for i in range(15)]
    pairs = [(r, c) for r in raters for c in cases if rng.random() < rng.uniform(0.1, 0.9)]
    first = pd.DataFrame(pairs, columns=["rater", "case"]).astype("str")
    complete = pd.Series(rng.random(len(cases)) < 0.8, index=cases)
    new_out, old_out = Collector(), Collector()
    phase = None if seed % 2 else "before"
    assert too_few_cases(first, complete, 4, phase, new_out) == reference_too_few_cases(
        first, complete, 4, phase, old_out)
    assert new_out.items == old_out.items


@pytest.mark.parametrize("seed", range(8))
def test_repeat_pairs_equal_the_merge(seed):
    from calibrate.data.ingest import _repeat_pairs

    marked = mark_repeats(judgments(seed, phases=False, sequence=True), Collector(), "all")
    marked["_judgment"] = marked["score"]
    firsts = marked.loc[marked["_nth"] == 0]
    seconds = marked.loc[marked["_nth"] == 1, ["_rater", "_case", "_judgment"]]
    pairs = firsts[["_rater", "_case", "_judgment"]].merge(seconds, on=["_rater", "_case"],
                                                           suffixes=("_first", "_second"))
    expected = pd.DataFrame({"rater": pairs["_rater"].array, "case": pairs["_case"].array,
                             "first": pairs["_judgment_first"].to_numpy(dtype=float),
                             "second": pairs["_judgment_second"].to_numpy(dtype=float)})
    pd.testing.assert_frame_equal(_repeat_pairs(marked, firsts), expected)
    none = marked.loc[marked["_nth"] == 0]
    assert _repeat_pairs(none, none).empty


def _with_codes(frame: pd.DataFrame) -> pd.DataFrame:
    """The rows as the door carries them: the id check's integer codes added."""
    ids = {"rater": "rater", "case": "case"}
    named = frame.rename(columns={"_rater": "rater", "_case": "case"})
    return check_ids(named, ids, Collector(), with_codes=True).rename(columns={"rater": "_rater", "case": "_case"})


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize("mode", ["first-two", "all", None])
def test_rules_on_carried_codes_equal_the_rules_without(seed, mode):
    """The door's rows carry RATER_CODE, CASE_CODE and PAIR_CODE from the id check; the
    repeats, the repeat pairs and the usable-case count made from them equal the ones the
    rules compute from the ids themselves."""
    from calibrate.data.ingest import _repeat_pairs
    from calibrate.data.rules import CASE_CODE, PAIR_CODE, RATER_CODE, natural_sorted, positions_in

    frame = judgments(seed, phases=seed % 2 == 0, sequence=seed % 3 != 0)
    plain_out, coded_out = Collector(), Collector()
    plain = mark_repeats(frame, plain_out, mode)
    carried = mark_repeats(_with_codes(frame), coded_out, mode)
    pd.testing.assert_frame_equal(carried.drop(columns=[RATER_CODE, CASE_CODE, PAIR_CODE]), plain)
    assert carried.attrs == plain.attrs and coded_out.items == plain_out.items
    for marked in (plain, carried):
        marked["_judgment"] = marked["score"]
    # each phase alone, as the door splits them (a phase column needs [phases] order)
    for name in (["before", "after"] if seed % 2 == 0 else [None]):
        rows = {k: m if name is None else m.loc[m[PHASE] == name] for k, m in (("plain", plain), ("coded", carried))}
        pd.testing.assert_frame_equal(_repeat_pairs(rows["coded"], rows["coded"].loc[rows["coded"]["_nth"] == 0]),
                                      _repeat_pairs(rows["plain"], rows["plain"].loc[rows["plain"]["_nth"] == 0]))
    firsts = carried.loc[carried["_nth"] == 0]
    first = pd.DataFrame({"rater": firsts["_rater"].array, "case": firsts["_case"].array})
    cases = natural_sorted(first["case"].unique())
    complete = pd.Series(np.random.default_rng(seed).random(len(cases)) < 0.7, index=pd.Index(cases))
    plain_out, coded_out = Collector(), Collector()
    expected = too_few_cases(first, complete, 1, None, plain_out)
    got = too_few_cases(first, complete, 1, None, coded_out, positions_in(complete.index, first["case"]),
                        firsts[RATER_CODE].to_numpy())
    assert got == expected and coded_out.items == plain_out.items


@pytest.mark.parametrize("seed", range(12))
def test_duplicates_found_within_pairs_equal_every_row_compared(seed):
    from calibrate.data.rules import CASE_CODE, PAIR_CODE, RATER_CODE, drop_duplicates

    frame = judgments(seed, phases=seed % 2 == 0, sequence=True)
    frame["score"] = frame["score"].map(lambda v: f"{v:g}").astype("str")   # compared as written
    frame = frame.drop(columns=["_sequence"]).rename(columns={"_rater": "rater", "_case": "case"})
    ids = {"rater": "rater", "case": "case"}
    plain_out, coded_out = Collector(), Collector()
    plain = drop_duplicates(check_ids(frame, ids, Collector()), plain_out)
    coded = drop_duplicates(check_ids(frame, ids, Collector(), with_codes=True), coded_out, ("rater", "case"))
    pd.testing.assert_frame_equal(coded.drop(columns=[RATER_CODE, CASE_CODE, PAIR_CODE]), plain)
    assert coded_out.items == plain_out.items
