"""The tables as one spreadsheet workbook (audit.xlsx).

One sheet per table, the header row frozen and filterable, numbers stored as
numbers with a format that suits the column (whole numbers, three decimals,
four for p-values), and a read-me sheet that describes every sheet and every
column. Text that a spreadsheet would run as a formula (starting with = + - @,
a tab or a carriage return) is stored as text and shown with a quote prefix, so
it is displayed and never run; numbers, negative ones included, stay numbers.
The same tables always give the same bytes (fixed document and member dates).
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping

import numpy as np
import pandas as pd

from ..safe_files import reproducible_xlsx_bytes
from .columns import column_description

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_SHEET_FORBIDDEN = re.compile(r"[\[\]:*?/\\]")
README_SHEET = "read-me"
# A worksheet holds at most 1,048,576 rows (the header takes one): the limit of the
# Office Open XML spreadsheet format. A longer table continues on further sheets.
SHEET_DATA_ROWS = 1_048_575
# A table longer than this is left out of the workbook (the read-me sheet says so and
# points to its CSV): a spreadsheet of hundreds of thousands of rows is slow to write
# (openpyxl: about 40 s a million cells here) and slower to open, and the CSV holds it.
WORKBOOK_TABLE_ROWS = 50_000

# A sheet holding rows of a long table beyond the first sheet: "name (part 2)".
_PART_SUFFIX = re.compile(r" \(part \d+\)$")
# Printed for a column that has no sentence in calibrate.output.columns (a test keeps the
# audit's own tables free of it).
NO_DESCRIPTION = "No description of this column yet."


def _column_note(table: str, column: str, notes: Mapping[str, str]) -> str:
    """The read-me sentence of a column: the caller's note, else the one of calibrate.output.columns."""
    if column in notes:
        return notes[column]
    return column_description(_PART_SUFFIX.sub("", table), column) or NO_DESCRIPTION


def sheet_names(names) -> dict[str, str]:
    """Table name -> a valid, unique sheet name (31 characters, no []:*?/\\)."""
    used = {README_SHEET}
    out = {}
    for name in names:
        base = _SHEET_FORBIDDEN.sub("_", str(name)).strip("'")[:31] or "table"
        candidate, i = base, 2
        while candidate.lower() in used:
            suffix = f"_{i}"
            candidate = base[: 31 - len(suffix)] + suffix
            i += 1
        used.add(candidate.lower())
        out[name] = candidate
    return out


def _cell_value(value):
    """A value as openpyxl should store it: numbers as numbers, missing as empty, text as text."""
    from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(float(value)) else None
    if isinstance(value, (dict, list, tuple)):
        value = json.dumps(value, ensure_ascii=False, default=str)
    return ILLEGAL_CHARACTERS_RE.sub("", str(value))


def _number_format(column: str, values: pd.Series) -> str | None:
    if pd.api.types.is_bool_dtype(values):
        return None
    if pd.api.types.is_integer_dtype(values):
        return "0"
    if pd.api.types.is_float_dtype(values):
        finite = values[np.isfinite(values.to_numpy(dtype=float))]
        if len(finite) and np.all(np.equal(np.mod(finite, 1), 0)) and column.startswith(("n", "n_")):
            return "0"
        if column.startswith("p_") or column in {"p", "p_value", "p_adjusted"}:
            return "0.0000"
        return "0.000"
    return None


def split_long_tables(tables: Mapping[str, pd.DataFrame], descriptions: Mapping[str, str], *,
                      max_rows: int = SHEET_DATA_ROWS) -> tuple[dict, dict]:
    """Tables longer than a sheet holds, cut into parts ``name``, ``name (part 2)``, ...

    Each part keeps the header; its description says which rows it holds, so no row
    is lost silently (the CSV table stays whole).
    """
    parts: dict[str, pd.DataFrame] = {}
    notes: dict[str, str] = {}
    for name, frame in tables.items():
        if len(frame) <= max_rows:
            parts[name], notes[name] = frame, descriptions.get(name, "")
            continue
        n_parts = -(-len(frame) // max_rows)
        for k in range(n_parts):
            part = name if k == 0 else f"{name} (part {k + 1})"
            start, stop = k * max_rows, min((k + 1) * max_rows, len(frame))
            parts[part] = frame.iloc[start:stop]
            notes[part] = (f"{descriptions.get(name, '')} Rows {start + 1:,}-{stop:,} of "
                           f"{len(frame):,}: a sheet holds at most {max_rows:,} rows, so this "
                           f"table continues over {n_parts} sheets (tables/{name}.csv holds "
                           "it whole).").strip()
    return parts, notes


def leave_out_long_tables(tables: Mapping[str, pd.DataFrame], descriptions: Mapping[str, str], *,
                          row_limit: int | None) -> tuple[dict, dict, dict]:
    """Tables of at most ``row_limit`` rows, their descriptions, and a note for each left out."""
    kept = {n: f for n, f in tables.items() if row_limit is None or len(f) <= row_limit}
    left_out = {n: (f"{descriptions.get(n, '')} Left out of this workbook: {len(f):,} rows, more "
                    f"than the {row_limit:,} a sheet here holds; tables/{n}.csv holds it whole.").strip()
                for n, f in tables.items() if n not in kept}
    return kept, {n: descriptions.get(n, "") for n in kept}, left_out


def workbook_bytes(tables: Mapping[str, pd.DataFrame], descriptions: Mapping[str, str], *,
                   column_notes: Mapping[str, str] | None = None,
                   max_rows: int = SHEET_DATA_ROWS,
                   row_limit: int | None = WORKBOOK_TABLE_ROWS) -> bytes:
    """The tables as an .xlsx file (bytes).

    Parameters
    ----------
    tables : table name -> tidy DataFrame; one sheet each, in this order.
    descriptions : table name -> one sentence on what the table holds (read-me sheet).
    column_notes : column name -> what it holds; takes precedence over the sentences of
        :mod:`calibrate.output.columns` (the audit's own tables need none).
    max_rows : data rows per sheet; a longer table continues on further sheets.
    row_limit : a table with more rows is left out (listed on the read-me sheet with a
        pointer to its CSV); None keeps every table.
    """
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
    _finish_sheet(readme, [12, 24, 90])
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
                    _as_text(cell)
                    longest = max(longest, len(cell.value))
                elif isinstance(cell.value, float) and formats[j - 1]:
                    cell.number_format = formats[j - 1]
                    longest = max(longest, 9)
                elif isinstance(cell.value, int) and not isinstance(cell.value, bool):
                    cell.number_format = "0"
                    longest = max(longest, len(str(cell.value)))
            widths.append(min(max(longest + 2, 8), 60))
        _finish_sheet(ws, widths)
        if ws.max_row > 1:
            ws.auto_filter.ref = f"A1:{get_column_letter(max(ws.max_column, 1))}{ws.max_row}"
    return reproducible_xlsx_bytes(wb)


def _as_text(cell) -> None:
    """Store a string as text, never as a formula; show formula-like text with a quote prefix."""
    cell.data_type = "s"
    if cell.value.startswith(_FORMULA_START):
        cell.quotePrefix = True


def _finish_sheet(ws, widths) -> None:
    from openpyxl.styles import Font
    from openpyxl.utils import get_column_letter

    for cell in ws[1]:
        cell.font = Font(bold=True)
        if isinstance(cell.value, str):
            _as_text(cell)
    for j, width in enumerate(widths, start=1):
        ws.column_dimensions[get_column_letter(j)].width = width
    ws.freeze_panes = "A2"
