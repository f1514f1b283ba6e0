"""Cells converted once per distinct value give what converting every cell gives."""

import numpy as np
import pandas as pd

from calibrate.data import rules
from calibrate.data.rules import (
    _cells_judgment_values,
    _cells_to_numbers,
    judgment_values,
    mark_repeats,
    to_numbers,
)

CELLS = ["3", " 3 ", "3", None, "n/a", "N / A", "", "  ", "inf", "-inf", "1e400", "seven", "2.5",
         "Seven", "3", np.nan, "0x1", "4", "1e400", "good", " Good ", "-0"]
WORDS = ("n/a", "missing")


def _same(a: pd.Series, b: pd.Series) -> None:
    pd.testing.assert_series_equal(a, b, check_names=True)


def test_numbers_by_distinct_cell_equal_numbers_cell_by_cell():
    for dtype in (object, str):   # str: what the reader gives
        series = pd.Series(CELLS, dtype=dtype, index=np.arange(len(CELLS)) * 3, name="score")
        got, expected = to_numbers(series, WORDS), _cells_to_numbers(series, WORDS)
        _same(got[0], expected[0])
        _same(got[1], expected[1])


def test_judgments_by_distinct_cell_equal_judgments_cell_by_cell():
    labels = {"good": 6.0, "Seven": 7.0, "n/a": 0.0}
    for dtype in (object, str):   # str: what the reader gives
        series = pd.Series(CELLS, dtype=dtype, name="score")
        for lab in (labels, {}):
            got, expected = judgment_values(series, lab, WORDS), _cells_judgment_values(series, lab, WORDS)
            _same(got[0], expected[0])
            _same(got[1], expected[1])


def test_empty_column_converts_to_empty_numbers():
    series = pd.Series([None, None], dtype=object)
    values, bad = to_numbers(series)
    assert values.isna().all() and not bad.any()


def test_presentations_counted_per_rater_and_case():
    data = pd.DataFrame({"_phase": "", "_rater": ["a", "a", "a", "b", "a", "b"],
                         "_case": ["x", "y", "x", "x", "x", "y"],
                         "_sequence": [1.0, 2.0, 3.0, 1.0, 4.0, 2.0]})
    data = data.rename(columns={"_phase": rules.PHASE}).assign(**{rules.FILE: "j.csv",
                                                                   rules.ROW: range(2, 8)})
    marked = mark_repeats(data, rules.Collector(), "all").sort_values("_order")
    assert marked["_nth"].tolist() == [0, 0, 1, 0, 2, 0]
    assert marked["_shown"].tolist() == [3, 1, 3, 1, 3, 1]
