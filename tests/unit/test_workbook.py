"""The workbook: one sheet per table, numbers as numbers, formula-like text as text,
frozen headers, every column described, same tables -> same bytes."""

from __future__ import annotations

import io
import zipfile

import numpy as np
import pandas as pd
from openpyxl import load_workbook

from calibrate.output.workbook import README_SHEET, sheet_names, workbook_bytes


def tables():
    return {
        "raters": pd.DataFrame({
            "rater": ["=HYPERLINK(\"x\")", "-3", "+1", "@sum", "plain"],
            "n_cases": np.array([10, 20, 30, 40, 50], dtype=np.int64),
            "estimate": [-0.5, np.nan, 2.25, -1e-9, 3.0],
            "p_value": [0.01, 0.2, 1.0, 0.0004, np.nan],
            "flagged": [True, False, True, False, False],
        }),
        "odd/name:with*chars?and-a-very-long-tail": pd.DataFrame({"case": ["a\x01b"], "weights": [[1, 2]]}),
    }


def load(data: bytes):
    return load_workbook(io.BytesIO(data))


def test_numbers_stay_numbers_and_formula_text_stays_text():
    wb = load(workbook_bytes(tables(), {"raters": "One row per rater."}))
    ws = wb["raters"]
    rows = list(ws.iter_rows(min_row=2, values_only=False))
    texts = [r[0] for r in rows]
    assert [c.value for c in texts] == ["=HYPERLINK(\"x\")", "-3", "+1", "@sum", "plain"]
    assert all(c.data_type == "s" for c in texts)
    assert [c.quotePrefix for c in texts] == [True, True, True, True, False]
    estimates = [r[2].value for r in rows]
    assert estimates[0] == -0.5 and estimates[1] is None and estimates[3] == -1e-9
    assert all(r[2].data_type == "n" for r in rows)
    assert rows[0][1].value == 10 and rows[0][1].number_format == "0"
    assert rows[0][3].number_format == "0.0000" and rows[0][2].number_format == "0.000"
    assert rows[0][4].value is True


def test_no_formula_is_written_into_the_file():
    data = workbook_bytes(tables(), {})
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        sheets = [n for n in z.namelist() if n.startswith("xl/worksheets/")]
        assert sheets
        for name in sheets:
            assert b"<f>" not in z.read(name) and b"<f " not in z.read(name)


def test_headers_frozen_and_every_column_described():
    data = workbook_bytes(tables(), {"raters": "One row per rater."}, column_notes={"flagged": "Flag set."})
    wb = load(data)
    names = sheet_names(tables())
    assert wb.sheetnames == [README_SHEET, *names.values()]
    for ws in wb.worksheets:
        assert ws.freeze_panes == "A2"
    described = {(r[0], r[1]): r[2] for r in wb[README_SHEET].iter_rows(min_row=2, values_only=True)}
    for table, frame in tables().items():
        for column in frame.columns:
            assert described.get((names[table], column)), (table, column)
    assert described[(names["raters"], "flagged")] == "Flag set."
    assert described[(names["raters"], None)] == "One row per rater."  # the sheet row: no column


def test_sheet_names_are_valid_and_unique():
    names = sheet_names(["a" * 40, "a" * 40 + "b", "x[1]", "read-me"])
    assert all(len(n) <= 31 for n in names.values())
    assert len(set(n.lower() for n in names.values())) == 4
    assert "[" not in names["x[1]"] and names["read-me"] != "read-me"


def test_cells_hold_what_the_table_holds():
    # pandas reads the workbook back independently of how it was written
    data = workbook_bytes(tables(), {})
    back = pd.read_excel(io.BytesIO(data), sheet_name="raters")
    original = tables()["raters"]
    assert list(back.columns) == list(original.columns)
    np.testing.assert_allclose(back["estimate"].to_numpy(float), original["estimate"].to_numpy(float))
    assert back["n_cases"].tolist() == original["n_cases"].tolist()
    odd = pd.read_excel(io.BytesIO(data), sheet_name=sheet_names(tables())["odd/name:with*chars?and-a-very-long-tail"])
    assert odd["case"].tolist() == ["ab"]            # control character removed
    assert odd["weights"].tolist() == ["[1, 2]"]     # a list is written as JSON text


def test_same_tables_same_bytes():
    assert workbook_bytes(tables(), {"raters": "x"}) == workbook_bytes(tables(), {"raters": "x"})


def test_a_table_longer_than_a_sheet_continues_on_further_sheets():
    # A worksheet holds 1,048,576 rows (ECMA-376 spreadsheet limit); the workbook cuts a
    # longer table into parts, each with its header, and the read-me says which rows.
    frame = pd.DataFrame({"rater": [f"r{i}" for i in range(7)], "x": np.arange(7.0)})
    wb = load_workbook(io.BytesIO(workbook_bytes({"pairs": frame}, {"pairs": "Pairs."}, max_rows=3)))
    assert wb.sheetnames == [README_SHEET, "pairs", "pairs (part 2)", "pairs (part 3)"]
    rows = [r for name in wb.sheetnames[1:] for r in wb[name].iter_rows(min_row=2, values_only=True)]
    assert [r[0] for r in rows] == frame["rater"].tolist()
    assert all(next(wb[n].iter_rows(max_row=1, values_only=True)) == ("rater", "x")
               for n in wb.sheetnames[1:])
    readme = [r[2] for r in wb[README_SHEET].iter_rows(min_row=2, values_only=True) if r[1] in ("", None)]
    assert any("Rows 4-6 of 7" in (t or "") and "tables/pairs.csv" in (t or "") for t in readme)


def test_a_table_over_the_row_limit_is_left_out_with_a_pointer_to_its_csv():
    small = pd.DataFrame({"rater": ["r1", "r2"], "x": [1.0, 2.0]})
    long = pd.DataFrame({"rater": [f"r{i}" for i in range(6)], "x": np.arange(6.0)})
    wb = load_workbook(io.BytesIO(workbook_bytes({"raters": small, "reading_order": long},
                                                 {"raters": "Raters.", "reading_order": "Order."},
                                                 row_limit=5)))
    assert wb.sheetnames == [README_SHEET, "raters"]
    notes = {r[0]: r[2] for r in wb[README_SHEET].iter_rows(min_row=2, values_only=True)
             if r[1] in ("", None)}
    assert notes["reading_order"] == ("Order. Left out of this workbook: 6 rows, more than the 5 "
                                      "a sheet here holds; tables/reading_order.csv holds it whole.")
