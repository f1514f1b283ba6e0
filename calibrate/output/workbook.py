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

import io
import json
import math
import re
import zipfile
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..safe_files import FORMULA_START
from .columns import column_description

_SHEET_FORBIDDEN = re.compile(r"[\[\]:*?/\\]")
README_SHEET = "read-me"
# A worksheet holds at most 1,048,576 rows (the header takes one): the limit of the
# Office Open XML spreadsheet format. A longer table continues on further sheets.
SHEET_DATA_ROWS = 1_048_575
# A table longer than this is left out of the workbook (the read-me sheet says so and
# points to its CSV): a spreadsheet of hundreds of thousands of rows is slow to open
# (openpyxl reads about 50,000 cells a second here), and the CSV holds it.
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


# Characters XML 1.0 cannot hold (C0 controls but tab, line feed and carriage return; lone
# surrogates; U+FFFE and U+FFFF): removed from text cells, as a spreadsheet cannot store them.
_ILLEGAL_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def _cell_value(value):
    """A value as the workbook stores it: numbers as numbers, missing as empty, text as text."""
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
    return _ILLEGAL_XML.sub("", str(value))


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

    The file is written here, part by part (an .xlsx is a zip of XML parts), each row from
    a template its columns make: a general-purpose writer builds an object per cell, 11 s
    for the 800,000 cells of a 2,000-rater audit against well under a second here.
    """
    notes = dict(column_notes or {})
    tables, descriptions, left_out = leave_out_long_tables(tables, descriptions, row_limit=row_limit)
    tables, descriptions = split_long_tables(tables, descriptions, max_rows=max_rows)
    names = sheet_names(tables)
    styles = _Styles()
    sheets = [(README_SHEET, _readme_sheet_xml(tables, descriptions, notes, left_out, names, styles), None)]
    for name, frame in tables.items():
        filtered = (len(frame) + 1, len(frame.columns)) if len(frame) else None
        sheets.append((names[name], _table_sheet_xml(frame, styles), filtered))
    return _package(sheets, styles)


# -- the parts of the package ------------------------------------------------------------

_MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_REL_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_PKG_REL_NS = "http://schemas.openxmlformats.org/package/2006/relationships"
_XML_HEAD = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
# Zip members carry this date, the document its created/modified stamps: same tables, same bytes.
_FIXED_DATE = (2000, 1, 1, 0, 0, 0)
_FIXED_STAMP = "2000-01-01T00:00:00Z"
# zlib level 1: on a 2,000-rater audit's tables level 6 made the file 18% smaller (5.6 MB
# against 6.9 MB) for 0.37 s more CPU, half again the whole workbook's time.
_COMPRESS_LEVEL = 1
_ALIGN_WRAP = '<alignment vertical="top" wrapText="1"/>'
# Number formats beyond the built-in ones (id 1 is "0"); custom ids start at 164.
_NUMBER_FORMAT_IDS = {None: 0, "0": 1, "0.000": 164, "0.0000": 165}


def _escape(text: str) -> str:
    """Text for an XML element or a double-quoted attribute; a carriage return is kept as a
    character reference (a raw one would be read back as a line feed)."""
    return (text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
            .replace('"', "&quot;").replace("\r", "&#13;"))


class _Styles:
    """The cell formats the sheets use, numbered in the order they are first asked for."""

    def __init__(self):
        self.index: dict[tuple, int] = {(False, False, None, False): 0}
        self._text_ends: dict = {}

    def text_end(self, raw) -> tuple[str, str]:
        """A text cell's value (as :func:`_cell_value` makes it) and what follows its
        reference's row number ('' for an empty cell), made once per distinct text."""
        found = self._text_ends.get(raw)
        if found is None:
            text = _cell_value(raw)
            end = _text_end(text, self)
            found = self._text_ends[raw] = (text, f'"{end}' if end else "")
        return found

    def of(self, *, bold: bool = False, quote: bool = False, number_format: str | None = None,
           wrap: bool = False) -> int:
        return self.index.setdefault((bold, quote, number_format, wrap), len(self.index))

    def xml(self) -> str:
        xfs = []
        for bold, quote, fmt, wrap in self.index:
            attrs = (f'numFmtId="{_NUMBER_FORMAT_IDS[fmt]}" fontId="{int(bold)}" fillId="0" '
                     f'borderId="0" xfId="0"')
            attrs += ' applyNumberFormat="1"' if fmt else ""
            attrs += ' applyFont="1"' if bold else ""
            attrs += ' quotePrefix="1"' if quote else ""
            if wrap:
                xfs.append(f'<xf {attrs} applyAlignment="1">{_ALIGN_WRAP}</xf>')
            else:
                xfs.append(f"<xf {attrs}/>")
        custom = [(f, i) for f, i in _NUMBER_FORMAT_IDS.items() if i >= 164]
        font = '<sz val="11"/><color theme="1"/><name val="Calibri"/><family val="2"/>'
        return (f'{_XML_HEAD}<styleSheet xmlns="{_MAIN_NS}">'
                f'<numFmts count="{len(custom)}">'
                + "".join(f'<numFmt numFmtId="{i}" formatCode="{f}"/>' for f, i in custom)
                + f'</numFmts><fonts count="2"><font>{font}</font><font><b/>{font}</font></fonts>'
                '<fills count="2"><fill><patternFill patternType="none"/></fill>'
                '<fill><patternFill patternType="gray125"/></fill></fills>'
                '<borders count="1"><border><left/><right/><top/><bottom/><diagonal/></border></borders>'
                '<cellStyleXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0"/></cellStyleXfs>'
                f'<cellXfs count="{len(xfs)}">' + "".join(xfs) + "</cellXfs>"
                '<cellStyles count="1"><cellStyle name="Normal" xfId="0" builtinId="0"/></cellStyles>'
                "</styleSheet>")


def _column_letter(j: int) -> str:
    """1 -> A, 27 -> AA."""
    letters = ""
    while j:
        j, rest = divmod(j - 1, 26)
        letters = chr(65 + rest) + letters
    return letters


def _text_cell(ref: str, text: str, style: int) -> str:
    return f'<c r="{ref}"{_text_tail(text, style)}'


def _text_tail(text: str, style: int) -> str:
    """A text cell after its reference: inline text (never a formula), in ``style``."""
    space = ' xml:space="preserve"' if text != text.strip() else ""
    s = f' s="{style}"' if style else ""
    return f'{s} t="inlineStr"><is><t{space}>{_escape(text)}</t></is></c>'


def _sheet_xml(rows: list[str], n_rows: int, n_cols: int, widths, *, autofilter: bool) -> str:
    last = f"{_column_letter(max(n_cols, 1))}{max(n_rows, 1)}"
    cols = "".join(f'<col min="{j}" max="{j}" width="{w}" customWidth="1"/>'
                   for j, w in enumerate(widths, start=1))
    return "".join([
        f'{_XML_HEAD}<worksheet xmlns="{_MAIN_NS}" xmlns:r="{_REL_NS}">',
        f'<dimension ref="A1:{last}"/>',
        '<sheetViews><sheetView workbookViewId="0"><pane ySplit="1" topLeftCell="A2" '
        'activePane="bottomLeft" state="frozen"/><selection pane="bottomLeft" activeCell="A2" '
        'sqref="A2"/></sheetView></sheetViews><sheetFormatPr defaultRowHeight="15"/>',
        f"<cols>{cols}</cols>" if cols else "",
        "<sheetData>", *rows, "</sheetData>",
        f'<autoFilter ref="A1:{last}"/>' if autofilter else "",
        '<pageMargins left="0.75" right="0.75" top="1" bottom="1" header="0.5" footer="0.5"/>',
        "</worksheet>"])


def _readme_sheet_xml(tables, descriptions, notes, left_out, names, styles: _Styles) -> str:
    """The read-me sheet: one bold row per sheet (its description), one row per column."""
    bold, wrap, bold_wrap = styles.of(bold=True), styles.of(wrap=True), styles.of(bold=True, wrap=True)
    lines: list[tuple[str, str, str, bool]] = [("sheet", "column", "what it holds", True)]
    for name, frame in tables.items():
        lines.append((names[name], "", descriptions.get(name, ""), True))
        lines += [(names[name], str(col), _column_note(name, str(col), notes), False)
                  for col in frame.columns]
    lines += [(name, "", note, True) for name, note in left_out.items()]
    rows = []
    for r, (sheet, column, what, is_title) in enumerate(lines, start=1):
        cells = []
        for letter, value in (("A", sheet), ("B", column), ("C", what)):
            text = _cell_value(value)
            if text is None or text == "":
                continue
            quote = text.startswith(FORMULA_START)
            if letter == "C":
                style = bold_wrap if r == 1 else styles.of(wrap=True, quote=quote) if quote else wrap
            elif is_title and (letter == "A" or r == 1):
                style = styles.of(bold=True, quote=quote) if quote else bold
            else:
                style = styles.of(quote=quote)
            cells.append(_text_cell(f"{letter}{r}", text, style))
        rows.append(f'<row r="{r}">{"".join(cells)}</row>')
    return _sheet_xml(rows, len(lines), 3, [12, 24, 90], autofilter=False)


def _table_sheet_xml(frame: pd.DataFrame, styles: _Styles) -> str:
    """One table's sheet: a bold header, then the data rows (see :func:`_data_rows`)."""
    n = len(frame)
    row_numbers = list(map(str, range(2, n + 2)))   # formatted once for every column
    header, parts, widths = [], [], []
    for j, col in enumerate(frame.columns, start=1):
        letter = _column_letter(j)
        title = _cell_value(str(col))
        quote = title.startswith(FORMULA_START)
        header.append(_text_cell(f"{letter}1", title, styles.of(bold=True, quote=quote)) if title else "")
        part = _column_part(letter, frame[col], _number_format(str(col), frame[col]), styles, row_numbers)
        parts.append(part)
        widths.append(min(max(max(len(str(col)), part.longest) + 2, 8), 60))
    rows = [f'<row r="1">{"".join(header)}</row>']
    if n and parts:
        rows += _data_rows(parts, row_numbers)
    elif n:
        rows += [f'<row r="{r}"></row>' for r in row_numbers]
    return _sheet_xml(rows, n + 1, len(frame.columns), widths, autofilter=n > 0)


@dataclass(frozen=True)
class _ColumnPart:
    """One column of a sheet: ``cell`` is its cell as a ``str.format`` template (field 0 the
    row number, field 1 the value), ``values`` the values in row order, ``present`` which
    rows have a cell (None: every row)."""

    cell: str
    values: list
    present: np.ndarray | None
    longest: int

    def piece(self, index: int) -> str:
        """The cell as field ``index`` of a row template (no other brace is in a cell)."""
        return self.cell.replace("{1", f"{{{index}", 1)


# A table whose rows fall into more patterns of empty cells than one in this many rows is
# written cell by cell: a template per pattern would be made for a few rows each.
_ROWS_PER_PATTERN = 8


def _data_rows(parts: list[_ColumnPart], row_numbers: list[str]) -> list[str]:
    """The data rows, each made by one ``str.format`` of a row template holding every
    cell's reference and value (a number is formatted there, in C, not one string per
    cell first: DEVELOPERS.md, "Speed at scale"). Rows with the same cells empty share a
    template."""
    values = [part.values for part in parts]
    pieces = [part.piece(index) for index, part in enumerate(parts, start=1)]
    if all(part.present is None for part in parts):
        template = "".join(['<row r="{0}">', *pieces, "</row>"]).format
        return list(map(template, row_numbers, *values))
    present = np.ones((len(row_numbers), len(parts)), dtype=bool)
    for j, part in enumerate(parts):
        if part.present is not None:
            present[:, j] = part.present
    patterns, pattern_of_row = np.unique(np.packbits(present, axis=1), axis=0, return_inverse=True)
    if len(patterns) * _ROWS_PER_PATTERN > len(row_numbers):
        return _rows_cell_by_cell(parts, present, row_numbers)
    templates = ["".join(['<row r="{0}">', *(p for p, kept in zip(pieces, row) if kept), "</row>"]).format
                 for row in np.unpackbits(patterns, axis=1, count=len(parts)).astype(bool).tolist()]
    return [templates[p](r, *cells) for p, r, cells in
            zip(pattern_of_row.ravel().tolist(), row_numbers, zip(*values))]


def _rows_cell_by_cell(parts: list[_ColumnPart], present: np.ndarray, row_numbers: list[str]) -> list[str]:
    """The data rows with each cell formatted alone (for tables of many empty-cell patterns)."""
    columns = []
    for j, part in enumerate(parts):
        cell = part.cell.format
        columns.append([cell(r, v) if kept else "" for r, v, kept in
                        zip(row_numbers, part.values, present[:, j].tolist())])
    return [f'<row r="{r}">{"".join(cells)}</row>' for r, cells in zip(row_numbers, zip(*columns))]


def _column_part(letter: str, values: pd.Series, number_format: str | None,
                 styles: _Styles, row_numbers: list[str]) -> _ColumnPart:
    """One column of a sheet, with its longest entry.

    Plain numeric and true/false columns give their values as they are (the template
    formats them); text columns a cell ending made once per distinct value (kept in
    ``styles`` for the other sheets: the rater ids recur in every table); anything else
    (mixed object columns) a whole cell per row, made as the value says.
    """
    start = f'<c r="{letter}{{0}}'
    dtype = values.dtype
    if isinstance(dtype, np.dtype) and dtype.kind == "b":
        return _ColumnPart(f'{start}" t="b"><v>{{1:d}}</v></c>', values.tolist(), None, 0)
    if isinstance(dtype, np.dtype) and dtype.kind in "iu":
        data = values.to_numpy()
        longest = max(len(str(data.max())), len(str(data.min()))) if len(data) else 0
        return _ColumnPart(f'{start}" s="{styles.of(number_format="0")}"><v>{{1}}</v></c>',
                           data.tolist(), None, longest)
    if isinstance(dtype, np.dtype) and dtype.kind == "f":
        data = values.to_numpy(dtype=float)
        finite = np.isfinite(data)
        style = styles.of(number_format=number_format) if number_format else 0
        s = f' s="{style}"' if style else ""
        # ".16g" is how numbers have always been written here (a whole number reads back as one)
        return _ColumnPart(f'{start}"{s}><v>{{1:.16g}}</v></c>', data.tolist(),
                           None if finite.all() else finite, 9 if number_format and finite.any() else 0)
    objects = values.to_numpy(dtype=object)
    if pd.api.types.infer_dtype(objects, skipna=True) in ("string", "empty"):
        codes, uniques = pd.factorize(objects, use_na_sentinel=True)
        texts_ends = [styles.text_end(u) for u in uniques.tolist()]
        ends = np.array([end for _text, end in texts_ends] + [""], dtype=object)
        row_ends = ends[codes]
        used = np.zeros(len(uniques), dtype=bool)
        used[codes[codes >= 0]] = True
        longest = max((len(t) for (t, _end), u in zip(texts_ends, used) if u), default=0)
        present = row_ends != ""
        return _ColumnPart(f"{start}{{1}}", row_ends.tolist(), None if present.all() else present,
                           longest)
    cells, longest = [], 0
    ref_start = f'<c r="{letter}'
    for r, raw in zip(row_numbers, objects.tolist()):
        ref = f"{ref_start}{r}"
        value = _cell_value(raw)
        if value is None or value == "":
            cells.append("")
        elif isinstance(value, bool):
            cells.append(f'{ref}" t="b"><v>{int(value)}</v></c>')
        elif isinstance(value, int):
            cells.append(f'{ref}" s="{styles.of(number_format="0")}"><v>{value}</v></c>')
            longest = max(longest, len(str(value)))
        elif isinstance(value, float):
            cells.append(f'{ref}"><v>{value:.16g}</v></c>')
        else:
            cells.append(f'{ref}"{_text_end(value, styles)}')
            longest = max(longest, len(value))
    return _ColumnPart("{1}", cells, None, longest)


def _text_end(text: str, styles: _Styles) -> str:
    """A data cell's text after its reference ('' for none); formula-like text is shown with
    a quote prefix."""
    if text == "":
        return ""
    return _text_tail(text, styles.of(quote=True) if text.startswith(FORMULA_START) else 0)


def _filter_range(sheet: str, n_rows: int, n_cols: int) -> str:
    """The absolute range of a sheet's filter, as the workbook's hidden filter name holds it."""
    quoted = sheet.replace("'", "''")
    return f"'{quoted}'!$A$1:${_column_letter(max(n_cols, 1))}${max(n_rows, 1)}"


def _package(sheets: list[tuple[str, str, tuple | None]], styles: _Styles) -> bytes:
    """The zip of the workbook's parts, in a fixed order with fixed dates. ``sheets`` holds
    (name, XML, (rows, columns) of its filter or None)."""
    sheet_entries, rels, overrides, filters = [], [], [], []
    for i, (sheet, xml, filtered) in enumerate(sheets, start=1):
        sheet_entries.append(f'<sheet name="{_escape(sheet)}" sheetId="{i}" r:id="rId{i}"/>')
        rels.append(f'<Relationship Id="rId{i}" Type="{_REL_NS}/worksheet" '
                    f'Target="worksheets/sheet{i}.xml"/>')
        overrides.append(f'<Override PartName="/xl/worksheets/sheet{i}.xml" ContentType="application/'
                         'vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"/>')
        if filtered:
            filters.append(f'<definedName name="_xlnm._FilterDatabase" localSheetId="{i - 1}" '
                           f'hidden="1">{_escape(_filter_range(sheet, *filtered))}</definedName>')
    rels.append(f'<Relationship Id="rId{len(sheets) + 1}" Type="{_REL_NS}/styles" Target="styles.xml"/>')
    ooxml = "application/vnd.openxmlformats-officedocument"
    parts = {
        "[Content_Types].xml": (
            f'{_XML_HEAD}<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
            '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
            'relationships+xml"/>'
            '<Default Extension="xml" ContentType="application/xml"/>'
            f'<Override PartName="/xl/workbook.xml" ContentType="{ooxml}.spreadsheetml.sheet.main+xml"/>'
            f'<Override PartName="/xl/styles.xml" ContentType="{ooxml}.spreadsheetml.styles+xml"/>'
            + "".join(overrides)
            + '<Override PartName="/docProps/core.xml" ContentType="application/vnd.openxmlformats-'
              'package.core-properties+xml"/>'
            f'<Override PartName="/docProps/app.xml" ContentType="{ooxml}.extended-properties+xml"/>'
            "</Types>"),
        "_rels/.rels": (
            f'{_XML_HEAD}<Relationships xmlns="{_PKG_REL_NS}">'
            f'<Relationship Id="rId1" Type="{_REL_NS}/officeDocument" Target="xl/workbook.xml"/>'
            '<Relationship Id="rId2" Type="http://schemas.openxmlformats.org/package/2006/relationships/'
            'metadata/core-properties" Target="docProps/core.xml"/>'
            f'<Relationship Id="rId3" Type="{_REL_NS}/extended-properties" Target="docProps/app.xml"/>'
            "</Relationships>"),
        "docProps/app.xml": (
            f'{_XML_HEAD}<Properties xmlns="http://schemas.openxmlformats.org/officeDocument/2006/'
            'extended-properties"><Application>calibrate</Application></Properties>'),
        "docProps/core.xml": (
            f'{_XML_HEAD}<cp:coreProperties xmlns:cp="http://schemas.openxmlformats.org/package/2006/'
            'metadata/core-properties" xmlns:dc="http://purl.org/dc/elements/1.1/" '
            'xmlns:dcterms="http://purl.org/dc/terms/" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">'
            "<dc:creator>calibrate</dc:creator>"
            f'<dcterms:created xsi:type="dcterms:W3CDTF">{_FIXED_STAMP}</dcterms:created>'
            f'<dcterms:modified xsi:type="dcterms:W3CDTF">{_FIXED_STAMP}</dcterms:modified>'
            "</cp:coreProperties>"),
        "xl/workbook.xml": (
            f'{_XML_HEAD}<workbook xmlns="{_MAIN_NS}" xmlns:r="{_REL_NS}"><workbookPr/>'
            '<bookViews><workbookView activeTab="0"/></bookViews>'
            f'<sheets>{"".join(sheet_entries)}</sheets>'
            + (f'<definedNames>{"".join(filters)}</definedNames>' if filters else "")
            + '<calcPr calcId="124519" fullCalcOnLoad="1"/></workbook>'),
        "xl/_rels/workbook.xml.rels": (f'{_XML_HEAD}<Relationships xmlns="{_PKG_REL_NS}">'
                                       f'{"".join(rels)}</Relationships>'),
        "xl/styles.xml": styles.xml(),
    }
    parts.update({f"xl/worksheets/sheet{i}.xml": xml for i, (_, xml, _) in enumerate(sheets, start=1)})
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as package:
        for name, text in parts.items():
            member = zipfile.ZipInfo(name, date_time=_FIXED_DATE)
            member.compress_type = zipfile.ZIP_DEFLATED
            member.external_attr = 0o644 << 16
            package.writestr(member, text.encode("utf-8"), compresslevel=_COMPRESS_LEVEL)
    return out.getvalue()
