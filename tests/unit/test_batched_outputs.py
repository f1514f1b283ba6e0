"""The workbook written part by part equals the one the general-purpose writer built.

The reference below is the openpyxl path the workbook used before it was written here
(one object per cell, 11 s CPU for a 2,000-rater audit's tables against 0.7 s); every
sheet of both files is read back with openpyxl and pandas and compared cell by cell:
value, type, number format, quote prefix, bold, wrapping, column widths, frozen header,
filter range and size.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

# the value of a cell is decided as before (one function); what the reference re-does is the writing
from calibrate.output.workbook import (README_SHEET, _cell_value, _column_note,
                                       _number_format, leave_out_long_tables, sheet_names,
                                       split_long_tables, workbook_bytes)
from calibrate.safe_files import FORMULA_START, reproducible_xlsx_bytes


def _reference_as_text(cell) -> None:
    cell.data_type = "s"
    if cell.value.startswith(FORMULA_START):
        cell.quotePrefix = True


def _reference_finish(ws, widths) -> None:
    from openpyxl.styles import Font
    from openpyxl.utils import get_column_letter

    for cell in ws[1]:
        cell.font = Font(bold=True)
        if isinstance(cell.value, str):
            _reference_as_text(cell)
    for j, width in enumerate(widths, start=1):
        ws.column_dimensions[get_column_letter(j)].width = width
    ws.freeze_panes = "A2"


def reference_workbook_bytes(tables, descriptions, *, column_notes=None, max_rows=1_048_575,
                             row_limit=50_000) -> bytes:
    """The workbook as openpyxl wrote it, cell by cell (the code before it was re-written)."""
    from openpyxl import Workbook
    from openpyxl.styles import Alignment, Font
    from openpyxl.utils import get_column_letter

    notes = dict(column_notes or {})
    tables, descriptions, left_out = leave_out_long_tables(tables, descriptions, row_limit=row_limit)
    tables, descriptions = split_long_tables(tables, descriptions, max_rows=max_rows)
    names = sheet_names(tables)
    wb = Workbook()
    readme = wb.active
    readme.title = README_SHEET
    readme.append(["sheet", "column", "what it holds"])
    for name, frame in tables.items():
        readme.append([names[name], "", _cell_value(descriptions.get(name, ""))])
        readme.cell(row=readme.max_row, column=1).font = Font(bold=True)
        for col in frame.columns:
            readme.append([names[name], _cell_value(str(col)), _column_note(name, str(col), notes)])
    for name, note in left_out.items():
        readme.append([_cell_value(name), "", _cell_value(note)])
        readme.cell(row=readme.max_row, column=1).font = Font(bold=True)
    _reference_finish(readme, [12, 24, 90])
    for cell in readme["C"]:
        cell.alignment = Alignment(wrap_text=True, vertical="top")
    for name, frame in tables.items():
        ws = wb.create_sheet(title=names[name])
        ws.append([_cell_value(str(c)) for c in frame.columns])
        formats = [_number_format(str(c), frame[c]) for c in frame.columns]
        for row in frame.itertuples(index=False, name=None):
            ws.append([_cell_value(v) for v in row])
        widths = []
        for j, col in enumerate(ws.iter_cols(min_row=1), start=1):
            longest = len(str(frame.columns[j - 1]))
            for cell in col[1:]:
                if isinstance(cell.value, str):
                    _reference_as_text(cell)
                    longest = max(longest, len(cell.value))
                elif isinstance(cell.value, float) and formats[j - 1]:
                    cell.number_format = formats[j - 1]
                    longest = max(longest, 9)
                elif isinstance(cell.value, int) and not isinstance(cell.value, bool):
                    cell.number_format = "0"
                    longest = max(longest, len(str(cell.value)))
            widths.append(min(max(longest + 2, 8), 60))
        _reference_finish(ws, widths)
        if ws.max_row > 1:
            ws.auto_filter.ref = f"A1:{get_column_letter(max(ws.max_column, 1))}{ws.max_row}"
    return reproducible_xlsx_bytes(wb)


def _cells(data: bytes):
    """Every sheet as read back: layout, then each cell's value, type and look."""
    wb = load_workbook(io.BytesIO(data))
    out = {}
    for ws in wb.worksheets:
        layout = (ws.max_row, ws.max_column, ws.freeze_panes, ws.auto_filter.ref,
                  {k: d.width for k, d in ws.column_dimensions.items()})
        cells = {}
        for row in ws.iter_rows():
            for c in row:
                if c.value is None:   # an empty cell: absent here, an empty text cell before
                    continue
                cells[c.coordinate] = (c.value, type(c.value), c.number_format, bool(c.quotePrefix),
                                       bool(c.font.b), bool(c.alignment.wrap_text), c.alignment.vertical)
        out[ws.title] = (layout, cells)
    return out


def hostile_tables():
    n = 7
    return {
        "raters": pd.DataFrame({
            "rater": ["=HYPERLINK(\"x\")", "-3", "+1", "@sum", " padded ", "a&b<c>\"d\"", "王小明"],
            "n_cases": np.arange(n, dtype=np.int64) * 10 - 20,
            "n_usable": [1.0, 2.0, np.nan, 4.0, 5.0, 6.0, 7.0],
            "estimate": [-0.5, np.nan, 2.25, -1e-9, 3.0, np.inf, 1 / 3],
            "p_value": [0.01, 0.2, 1.0, 0.0004, np.nan, 1e-300, 0.5],
            "flagged": [True, False, True, False, False, True, True],
            "count": pd.array([1, None, 3, 4, None, 6, 7], dtype="Int64"),
            "text": pd.array(["x", None, "=1+1", "y", "\tlead", "z", "x"], dtype="string"),
        }),
        "mixed": pd.DataFrame({
            "value": pd.Series([True, 3, 2.5, "word", None, [1, 2], {"a": 1}], dtype=object),
            "odd": ["a\x01b", "line\nbreak", "", "tab\tin", "x" * 80, "e\u0301", np.nan],
            "=formula header": [1.5] * n,
            "decision": pd.array([True, None, False, True, True, None, False], dtype="boolean"),
        }),
        "odd/name:with*chars?and-a-very-long-tail": pd.DataFrame({"case": ["a"], "weights": [[1, 2]]}),
        "empty": pd.DataFrame({"rater": pd.Series([], dtype=object), "x": pd.Series([], dtype=float)}),
        "long": pd.DataFrame({"rater": [f"r{i % 3}" for i in range(9)], "position": np.arange(9)}),
    }


@pytest.mark.parametrize("options", [{}, {"max_rows": 4}, {"row_limit": 5},
                                     {"column_notes": {"flagged": "Flag set.", "value": "=x"}}])
def test_workbook_equals_the_general_purpose_writers(options):
    tables = hostile_tables()
    descriptions = {"raters": "One row per rater.", "long": "Long table."}
    new = workbook_bytes(tables, descriptions, **options)
    old = reference_workbook_bytes(tables, descriptions, **options)
    expected = _cells(old)
    # one change: the general-purpose writer stored formula-like text of the read-me sheet
    # (a column named "=...") as a formula; it is text with a quote prefix now
    readme = expected[README_SHEET][1]
    for ref, (value, *look) in readme.items():
        if isinstance(value, str) and value.startswith(FORMULA_START):
            readme[ref] = (value, look[0], look[1], True, *look[3:])
    assert _cells(new) == expected
    for sheet in load_workbook(io.BytesIO(old)).sheetnames[1:]:   # the read-me: its formula read as empty
        pd.testing.assert_frame_equal(pd.read_excel(io.BytesIO(new), sheet_name=sheet),
                                      pd.read_excel(io.BytesIO(old), sheet_name=sheet))


def test_no_sheet_holds_a_formula():
    import zipfile

    with zipfile.ZipFile(io.BytesIO(workbook_bytes(hostile_tables(), {}, column_notes={"x": "=1"}))) as z:
        for name in z.namelist():
            assert b"<f>" not in z.read(name) and b"<f " not in z.read(name), name


def test_a_carriage_return_is_kept():
    # openpyxl wrote it raw, so a reader took it for a line feed; a reference keeps it
    frame = pd.DataFrame({"note": ["one\rtwo", "\rlead"]})
    back = load_workbook(io.BytesIO(workbook_bytes({"t": frame}, {})))["t"]
    assert [c.value for c in back["A"][1:]] == ["one\rtwo", "\rlead"]
    assert back["A3"].quotePrefix


def test_same_tables_same_bytes_and_a_valid_package():
    import zipfile

    data = workbook_bytes(hostile_tables(), {})
    assert data == workbook_bytes(hostile_tables(), {})
    with zipfile.ZipFile(io.BytesIO(data)) as package:
        assert package.testzip() is None
        assert package.namelist()[0] == "[Content_Types].xml"
        assert {i.date_time for i in package.infolist()} == {(2000, 1, 1, 0, 0, 0)}


def test_a_table_without_columns_gets_an_empty_sheet():
    # the general-purpose path failed on it (no column to measure)
    back = load_workbook(io.BytesIO(workbook_bytes({"t": pd.DataFrame(index=range(3))}, {})))["t"]
    assert back.freeze_panes == "A2" and back["A1"].value is None


def test_csv_bytes_equal_escaping_every_text_cell():
    # text columns without formula-like cells are written as they are (one vectorised test);
    # the bytes equal escaping every text cell, as before
    from calibrate.data.rules import map_distinct
    from calibrate.output.tables import csv_bytes
    from calibrate.safe_files import escape_formula

    rng = np.random.default_rng(3)
    n = 5000
    scale = rng.integers(1, 8, n).astype(float)
    scale[:6] = [-0.0, 0.0, np.nan, np.inf, -np.inf, 0.1 + 0.2]
    long = pd.DataFrame({"rater": [f"r{i % 7}" for i in range(n)], "judgment": scale,
                         "tiny": np.where(rng.random(n) < 0.5, 1e-20, 123456789.123456789),
                         "spread": rng.normal(size=n), "position": np.arange(n)})
    for frame in [*hostile_tables().values(), long, long.iloc[::2]]:
        every = frame.copy()
        for col in every.columns:
            if pd.api.types.is_object_dtype(every[col]) or pd.api.types.is_string_dtype(every[col]):
                present = every[col].notna()
                every[col] = map_distinct(every[col], escape_formula).where(present, every[col])
        assert csv_bytes(frame) == every.to_csv(index=False, lineterminator="\n",
                                                float_format="%.10g").encode("utf-8")


def _hostile_texts(rng, n):
    pieces = ["a", "b,c", 'q"q', "line\nbreak", "cr\rhere", " pad ", "=1+1", "-2", "+x", "@s", "\tt",
              "王小明", "", "e\u0301", "x" * 40, "'quoted'"]
    return [pieces[i] for i in rng.integers(0, len(pieces), n)]


@pytest.mark.parametrize("seed", range(6))
def test_csv_written_here_equals_pandas_to_csv(seed):
    # the plain-column path writes the bytes pandas' to_csv writes (the general-purpose
    # writer, kept as pandas_csv_bytes): quoting, missing cells, float text, escaping
    from calibrate.output.tables import _column_texts, csv_bytes, pandas_csv_bytes

    rng = np.random.default_rng(seed)
    n = int(rng.choice([0, 1, 7, 1500, 4000]))
    floats = rng.normal(size=n) * 10.0 ** rng.integers(-12, 12, n)
    floats[rng.random(n) < 0.1] = np.nan
    special = np.array([-0.0, 0.0, np.inf, -np.inf, 5e-324, 1e300, 0.1 + 0.2, 123456789012.0])
    floats[: min(n, len(special))] = special[: min(n, len(special))]
    scale = rng.integers(1, 8, n).astype(float)
    scale[rng.random(n) < 0.05] = np.nan
    texts = _hostile_texts(rng, n)
    with_missing = pd.Series(texts, dtype="str").where(rng.random(n) > 0.2)
    objects = pd.Series(texts, dtype=object).where(rng.random(n) > 0.2, None)
    frame = pd.DataFrame({"rater": [f"r{i % 13}" for i in range(n)], "spread": floats, "judgment": scale,
                          "position": rng.integers(-5, 10 ** 6, n), "flagged": rng.random(n) < 0.5,
                          "note": with_missing, "object note": objects,
                          'odd, "header"': np.arange(n, dtype=np.int32)})
    for part in (frame, frame.iloc[::3], frame[["rater", "note"]], frame[["spread", "judgment"]]):
        assert _column_texts(part) is not None
        assert csv_bytes(part) == pandas_csv_bytes(part)
    for name, other in hostile_tables().items():   # nullable and mixed columns go through pandas
        assert csv_bytes(other) == pandas_csv_bytes(other), name


def test_rows_by_template_and_cell_by_cell_equal_the_general_purpose_writer(monkeypatch):
    # rows are made from one template per pattern of empty cells, or cell by cell when the
    # patterns are many: the same bytes either way, and the sheets read back as the
    # openpyxl reference wrote them (the read-me apart: see the test above; and a carriage
    # return, which the reference wrote raw, so that it read back as a line feed)
    import calibrate.output.workbook as workbook

    rng = np.random.default_rng(11)
    n = 60
    frame = pd.DataFrame({f"x{j}": np.where(rng.random(n) < 0.3, np.nan, rng.normal(size=n) * 10.0 ** j)
                          for j in range(-3, 4)})
    frame["p_value"] = rng.random(n)
    frame["n_cases"] = rng.integers(-3, 300, n)
    texts = [t.replace("\r", "") for t in _hostile_texts(rng, n)]
    frame["text"] = pd.Series(texts, dtype="str").where(rng.random(n) > 0.3)
    frame["flagged"] = rng.random(n) < 0.5
    frame["mixed"] = pd.Series([None, 1, 2.5, "w", True] * (n // 5), dtype=object)
    tables = {"t": frame, **hostile_tables()}
    written = {}
    for rows_per_pattern in (0, 10 ** 9):
        monkeypatch.setattr(workbook, "_ROWS_PER_PATTERN", rows_per_pattern)
        written[rows_per_pattern] = workbook_bytes(tables, {})
    assert written[0] == written[10 ** 9]
    new, old = _cells(written[0]), _cells(reference_workbook_bytes(tables, {}))
    assert new.keys() == old.keys()
    for sheet in new:
        if sheet != README_SHEET:
            assert new[sheet] == old[sheet], sheet
