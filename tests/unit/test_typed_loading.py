"""Reading numeric columns as numbers, and the column-wise shortcuts of the rules, give what
the text path gives.

The references are the text path itself (every cell read as text, then converted by the
rules' cell-by-cell conversion) and plain pandas/Python: ``sorted(key=natural_key)``,
``DataFrame.duplicated``, ``Index.get_indexer``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibrate.data.ingest import load_study, read_table
from calibrate.data.rules import (_cells_to_numbers, _plain_decimals, duplicated_rows, natural_key, natural_sorted,
                                  positions_in, to_numbers)

TRICKY_NUMBERS = ["3", " 3", "3 ", "+4", "-0", ".5", "5.", "1e5", "1E-5", "2.50", "", "nan", "NaN",
                  "inf", "-Infinity", "1e400", "1e-400", "1_000", "0x10", "seven", "NA", "-", ".",
                  "12345678901234567891", "9007199254740993", "TRUE"]


def test_natural_sorted_equals_sorted_by_natural_key():
    rng = np.random.default_rng(3)
    pieces = ["a", "A", "r", "R", "x-", "_", "", "é", "1", "01", "10", "2", "007", "9" * 19, " ", "Z"]
    simple = 0
    for _ in range(400):
        ids = ["".join(rng.choice(pieces, size=int(rng.integers(1, 4))))
               for _ in range(int(rng.integers(0, 40)))]
        assert natural_sorted(ids) == sorted(ids, key=natural_key)
    for _ in range(20):   # the column-wise route: text, one digit run, text (ASCII)
        ids = [f"{rng.choice(['r', 'R', 'case-', ''])}{rng.choice(['', '0', '00'])}{rng.integers(0, 30)}"
               f"{rng.choice(['', 'b', 'B'])}" for _ in range(int(rng.integers(5000, 6000)))]
        simple += 1
        assert natural_sorted(pd.array(ids, dtype="str")) == sorted(ids, key=natural_key)
    assert simple


def test_ids_of_one_layout_sort_as_sorted_by_natural_key():
    """ASCII ids of one length with digits at the same places are ranked on their bytes
    (``rules._same_layout_order``); mixed case, several digit runs and long runs included."""
    rng = np.random.default_rng(11)
    for _ in range(200):
        width = int(rng.integers(1, 25))
        layout = rng.random(width) < 0.5
        letters = rng.choice(["ab", "aB", "Zz_-", "x", "q. "])
        ids = ["".join(str(rng.integers(0, 10)) if digit else rng.choice(list(letters)) for digit in layout)
               for _ in range(int(rng.integers(1, 300)))]
        assert natural_sorted(pd.array(ids, dtype="str")) == sorted(ids, key=natural_key)


@pytest.mark.parametrize("words", [(), ("NA", "-", "."), ("-99",)])
def test_numbers_of_a_text_column_equal_the_cell_by_cell_conversion(words):
    rng = np.random.default_rng(5)
    plain = [f"{x:.{k}g}" for x, k in zip(rng.standard_normal(300) * 10.0 ** rng.integers(-30, 30, 300),
                                           rng.integers(1, 18, 300))] + ["-99", None]
    # the whole-column route takes the plain column unless a missing word is a number
    assert (_plain_decimals(pd.Series(plain, dtype="str"), words) is None) == ("-99" in words)
    for cells in (plain, plain + TRICKY_NUMBERS):
        series = pd.Series(cells, dtype="str", name="x")
        got, expected = to_numbers(series, words), _cells_to_numbers(series, words)
        pd.testing.assert_series_equal(got[0], expected[0], check_names=False)
        assert got[1].tolist() == expected[1].tolist()


@pytest.fixture(autouse=True)
def typed_small_files(monkeypatch):
    """The typed reading and the column-wise routes are kept for large tables; these small
    ones take them too."""
    from calibrate.data import ingest, rules
    monkeypatch.setattr(ingest, "TYPED_FROM_BYTES", 0)
    monkeypatch.setattr(rules, "COLUMNWISE_FROM", 0)
    monkeypatch.setattr(rules, "DECIMALS_CAST_FROM", 0)
    monkeypatch.setattr(rules, "SAME_LAYOUT_FROM", 0)


@pytest.mark.parametrize("seed", range(6))
def test_plain_ids_are_checked_as_row_by_row(seed):
    from calibrate.data.rules import FILE, ROW, Collector, check_ids
    from tests.unit.test_batched_loading import reference_check_ids

    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 300))
    pick = np.array([f"r{i}" for i in range(30)] + ["A-7", "x" * 100, "~!"] + ([None, "x" * 101, " r1"]
                                                                              if seed % 2 else []), dtype=object)
    frame = pd.DataFrame({"rater": pd.array(pick[rng.integers(0, len(pick), n)], dtype="str"),
                          "case": pd.array(pick[rng.integers(0, len(pick), n)], dtype="str"),
                          FILE: rng.choice(["a.csv", "b.csv"], n), ROW: np.arange(n) + 2})
    columns = {"rater": "rater", "case": "case"}
    new_out, old_out = Collector(), Collector()
    pd.testing.assert_frame_equal(check_ids(frame, columns, new_out), reference_check_ids(frame, columns, old_out))
    assert new_out.items == old_out.items


def _write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("cell", TRICKY_NUMBERS)
def test_a_column_read_as_numbers_converts_as_its_text_does(tmp_path, cell):
    path = _write(tmp_path, "t.csv", f"id,score,label\nr1,{cell},x\nr2,2,{cell}\nr3,,7\n")
    typed = read_table(path, missing_words=(), numbers=("score", "label"))
    text = read_table(path, missing_words=())
    if cell in ("3", "+4", "1e5"):   # read by the typed route: the text route has no numbers
        assert typed["score"].dtype.kind == "f" and text["score"].dtype == "str"
    assert list(typed.columns) == list(text.columns)
    for col in ("id", "_row"):
        pd.testing.assert_series_equal(typed[col], text[col])
    for col in ("score", "label"):
        if typed[col].dtype.kind == "f":   # taken as numbers: the text path's numbers exactly
            values, bad = to_numbers(text[col])
            assert not bad.any()
            assert np.array_equal(typed[col].to_numpy(), values.to_numpy(), equal_nan=True)
        else:                              # anything else is the text, as read
            pd.testing.assert_series_equal(typed[col], text[col])


@pytest.mark.parametrize("text", ["id,score\nr1, 2\nr2,3\n", " id,score\nr1,2\n", "id,score\n r1,2\n",
                                  "id;score\nr1; 2\n", "id,score\nr 1,2\nr2,\t3\n", "id,score\r\n r1,2\r\n",
                                  "\ufeff id,score\nr1,2\n", "id,score\nr1,2\n"])
def test_spaces_opening_a_cell_are_skipped_as_before(tmp_path, text):
    """The parser is asked to skip spaces only when some cell opens with one; the cells read
    are those of a reading that always skips them."""
    import io

    from calibrate.data.ingest import _csv_options
    path = _write(tmp_path, "s.csv", text)
    raw = path.read_bytes()
    options = _csv_options(raw.decode("utf-8-sig"), raw)
    always = {**options, "skipinitialspace": True}
    expected = pd.read_csv(io.BytesIO(raw), dtype=str, header=None, **always)
    pd.testing.assert_frame_equal(pd.read_csv(io.BytesIO(raw), dtype=str, header=None, **options), expected)
    for numbers in ((), ("score",)):
        read_table(path, missing_words=(), numbers=numbers)


def test_an_odd_file_is_left_to_the_text_reader(tmp_path):
    for text in ("id,score\nr1,2,3\nr2,4\n", "id,id\nr1,2\n", "id,score\n", "", "id,score\nr1,\"2\nr2,3\n"):
        path = _write(tmp_path, "odd.csv", text)
        try:
            expected = read_table(path, missing_words=())
        except Exception as exc:   # noqa: BLE001 -- the same refusal either way
            with pytest.raises(type(exc)) as got:
                read_table(path, missing_words=(), numbers=("score",))
            assert str(got.value) == str(exc)
            continue
        pd.testing.assert_frame_equal(read_table(path, missing_words=(), numbers=("score",)), expected)


def test_duplicated_rows_equal_pandas():
    rng = np.random.default_rng(2)
    for _ in range(30):
        n = int(rng.integers(0, 300))
        frame = pd.DataFrame({"a": rng.choice(["x", "y", None], n), "b": rng.integers(0, 3, n),
                              "c": rng.choice([1.0, np.nan, 2.5], n),
                              "d": pd.array(rng.choice(["p", "q"], n), dtype="str")},
                             index=rng.permutation(n) * 2)
        cols = list(frame.columns[: int(rng.integers(1, 5))])
        pd.testing.assert_series_equal(duplicated_rows(frame, cols), frame.duplicated(subset=cols))


def test_positions_equal_the_index_lookup():
    keys = pd.Index(pd.array(["c1", "c2", "c10", "x"], dtype="str"))
    wanted = pd.Series(["c10", "zz", None, "c1", "x", "c10"], dtype="str")
    assert positions_in(keys, wanted).tolist() == keys.get_indexer(wanted).tolist()


def test_a_study_reads_as_its_text_would(tmp_path):
    """Numbers written in many ways (one file with a word in the score, one clean), a
    duplicate row, a cue written '4' and '4.0' on a case listed twice: the typed reading
    falls back where text decides, and the table equals the text reading's."""
    _write(tmp_path, "a.csv", "rater,case,score,seq\nr1,c1,3,1\nr1,c2,4.0,2\nr2,c1,5,1\nr2,c2, 6,2\n"
                              "r1,c1,3,3\nr2,c2,6,2\n")
    _write(tmp_path, "cases.csv", "case,q1,q2\nc1,1.5,2\nc2,2.5,3\nc1,1.50,2\n")
    _write(tmp_path, "study.toml", '[study]\nname = "t"\ndata = "a.csv"\ncases = "cases.csv"\n[columns]\n'
                                   'rater = "rater"\ncase = "case"\njudgment = "score"\nsequence = "seq"\n'
                                   '[judgment]\nscale = "ordinal"\nmin = 1\nmax = 7\n[cues]\nq1 = "numeric"\n'
                                   'q2 = "numeric"\n')
    from calibrate.data import ingest
    from calibrate.data.frames import GivenTables, study_spec
    from calibrate.data.rules import Collector, TextNeeded

    spec = study_spec(tmp_path / "study.toml", GivenTables())
    with pytest.raises(TextNeeded):
        ingest._build(spec, Collector(), None, typed=True)
    text_out = Collector()
    ingest._build(spec, text_out, None, typed=False)
    from calibrate.errors import DataError
    with pytest.raises(DataError) as got:
        load_study(tmp_path / "study.toml")
    assert got.value.problems == text_out.errors
