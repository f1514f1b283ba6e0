"""Read the judgment tables, check them against the spec, build the JudgmentTable.

Every problem is collected (file, row, column named) before anything stops, so
a user fixes their data in one pass. Errors stop the run; warnings travel into
the results. Inputs are only read, never changed. The rules themselves live one
per function in :mod:`calibrate.data.rules`; :func:`_build` is the pipeline that
applies them in order.

Row numbers are the ones a person sees: in a CSV or a worksheet the header is
row 1 and the first data row is row 2.
"""

from __future__ import annotations

import csv
import hashlib
import io
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, DataProblem
from ..safe_files import sha256_of
from .cues import CueDesign, build_cue_design
from .frames import GivenTables, given_tables, grid_sha256, study_spec
from .rules import (
    FILE,
    PHASE,
    ROW,
    Collector,
    blank_categorical_missing,
    blank_missing_words,
    case_level_columns,
    case_value_from_rows,
    check_columns_exist,
    check_constant_cue,
    check_criterion,
    check_ids,
    check_judgments,
    check_numeric_cues,
    check_phases,
    check_sequence,
    check_trained,
    drop_duplicates,
    excluded_types,
    CASE_CODE,
    RATER_CODE,
    cases_by_id,
    check_judged_listed,
    mark_repeats,
    natural_order,
    natural_sorted,
    TextNeeded,
    positions_in,
    report_missing_cue,
    too_few_cases,
)
from .spec import DEFAULT_MISSING_WORDS, StudySpec


# The results key of the one phase of a study that declares none. Reports print no
# phase for it; the key itself stays so that every result sits under a phase.
UNNAMED_PHASE = "all"


@dataclass(frozen=True)
class PhaseData:
    """The judgments of one phase, split by what feeds which analysis.

    first:    one row per (rater, case): rater, case, judgment, sequence, file, row, shown
              (how many times the case was presented to the rater, dropped ones included).
              Feeds policy fits, lens model, agreement, severity and grouping.
    repeats:  test-retest pairs: rater, case, first, second.
    ordered:  every kept judgment in each rater's reading order: rater, case,
              judgment, position (0-based), sequence. Feeds drift.
    presentations: with ``repeat_mode`` "all", every presentation of every case shown
              more than once: rater, case, nth (0-based), judgment. Feeds the consistency
              over presentations. Empty with "first-two".
    repeat_mode: "first-two" or "all" ([judgment] repeats, or decided by the data). With
              "all", ``first`` also holds ``case_mean``, the mean over every presentation,
              which the policy fits use; with "first-two" ``case_mean`` is the first judgment.
    fit_raters: raters with enough usable cases for a policy fit (cues + 2 or more).
    too_few:  raters kept out of policy fits, with their usable case counts.
    """

    name: str | None
    first: pd.DataFrame
    repeats: pd.DataFrame
    ordered: pd.DataFrame
    fit_raters: tuple[str, ...]
    too_few: dict[str, int]
    presentations: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(
        {"rater": [], "case": [], "nth": [], "judgment": []}))
    repeat_mode: str = "first-two"

    @property
    def raters(self) -> tuple[str, ...]:
        return tuple(natural_sorted(self.first["rater"].unique()))

    @property
    def label(self) -> str:
        return UNNAMED_PHASE if self.name is None else self.name


@dataclass(frozen=True)
class JudgmentTable:
    """Validated, typed study data. Build it with :func:`load_study`."""

    spec: StudySpec
    cases: pd.DataFrame  # index: case id; cue columns, criterion, excluded attributes
    design: CueDesign  # coding and fill values over every case of the study
    phases: tuple[PhaseData, ...]
    warnings: tuple[DataProblem, ...] = ()
    inputs: tuple[dict, ...] = ()
    counts: dict = field(default_factory=dict)

    def phase(self, name: str | None) -> PhaseData:
        for p in self.phases:
            if p.name == name:
                return p
        raise KeyError(name)

    def phase_design(self, ph: PhaseData) -> CueDesign:
        """The design on the cases judged in phase ``ph`` only: the study's coding, the
        phase's own fill values (:meth:`CueDesign.for_cases`). Every per-phase analysis
        fits on this, so a phase gives the same numbers as that phase audited alone."""
        return self.design.for_cases(ph.first["case"].unique())

    @property
    def criterion(self) -> pd.Series | None:
        col = self.spec.role("criterion")
        return None if col is None else self.cases["__criterion__"]


# ----------------------------------------------------------------------------- reading


TABLE_KINDS = "CSV (UTF-8), XLSX or Parquet"


#: The one warning of an agreement-only study (no [cues]), shown by check and kept in results.json.
NO_CUES_NOTE = ("the study lists no cues: test-retest, agreement, severity, readers per file and "
                "the files view run; the policy fits, lens model, rubric alignment, cut-off rules, "
                "drift, rater pairs, homogeneity and groups need cues in [cues] and are left out")


def _unreadable(path: Path, why: str) -> DataError:
    return DataError([DataProblem(f"the table cannot be read: {why}", file=path.name)])


def _csv_text(path: Path) -> tuple[bytes, str]:
    """The whole file as bytes and as text (UTF-8, with or without a byte-order mark), or a
    DataError naming the line of the first byte that is not UTF-8."""
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise _unreadable(path, f"it is not UTF-8 text (byte 0x{raw[exc.start]:02x} on line {line}, "
                                "perhaps Latin-1 or Windows-1252); save it as CSV UTF-8") from None
    if "\x00" in text:
        raise _unreadable(path, f"it holds binary data, not text; give a {TABLE_KINDS} table")
    return raw, text


def _blank(text: str) -> bool:
    """``not text.strip()`` without copying the text (11 MB for 460,000 rows)."""
    return not text or text.isspace()


def _read_csv(path: Path) -> pd.DataFrame:
    """Every cell as text with the header as the first row; only empty cells are missing."""
    raw, text = _csv_text(path)
    if _blank(text):
        raise _unreadable(path, "the file is empty; it needs a header row and rows of data")
    try:
        # parsed from the bytes (checked as UTF-8 above): the parser reads them directly,
        # where text would be encoded again on the way in
        return pd.read_csv(io.BytesIO(raw), dtype=str, header=None, **_csv_options(text, raw))
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error, ValueError) as exc:
        raise _unreadable(path, str(exc).strip()) from None


def _csv_options(text: str, raw: bytes) -> dict:
    """The parser's options for this file: the delimiter sniffed from its first 64 KB (a comma
    when the sniffer cannot tell); only empty cells missing; spaces after a delimiter skipped."""
    try:
        sep = csv.Sniffer().sniff(text[:64 * 1024], delimiters=",;\t|").delimiter
    except csv.Error:
        sep = ","
    return {"encoding": "utf-8-sig", "sep": sep, "keep_default_na": False, "na_values": [""],
            "skipinitialspace": _space_opens_a_field(raw, sep), "skip_blank_lines": True}


def _space_opens_a_field(raw: bytes, sep: str) -> bool:
    """Whether a space opens a cell (first in the file, or after a delimiter or a line break):
    only then has the parser a space to skip (it skips spaces, not tabs: checked). Asking it
    to skip took 0.04 s of a 0.09 s parse of 460,000 rows (measured); a file without such a
    space reads the same cells either way."""
    if b" " not in raw:
        return False
    body = np.frombuffer(raw, dtype=np.uint8)[len(UTF8_BOM) if raw.startswith(UTF8_BOM) else 0:]
    spaces = np.flatnonzero(body == ord(" "))
    if spaces.size and spaces[0] == 0:
        return True
    before = body[spaces[spaces > 0] - 1]
    return bool(np.isin(before, np.frombuffer((sep + "\n\r").encode(), dtype=np.uint8)).any())


UTF8_BOM = b"\xef\xbb\xbf"


# An integer column is taken as numbers only below 2**53, where every integer is a float
# exactly; a larger one is read as text and converted by the rules, as before.
EXACT_INTEGERS = 2 ** 53
# A smaller file is read as text: its two or three parses cost more than its conversions
TYPED_FROM_BYTES = 256 * 1024


def _read_csv_typed(path: Path, numbers: tuple[str, ...]) -> pd.DataFrame | None:
    """The table with header names and the columns of ``numbers`` as floats, read in one pass
    with the parser's own type guess; None when the text reader must decide (a damaged or
    odd file, whose problem it names).

    A column of ``numbers`` whose every cell is a number (or empty) comes back as float64:
    those cells convert to the floats :func:`rules.to_numbers` gives their text. Any other
    column, and a numbers column holding a word, comes back as the text reader's text: the
    parser's guess is kept for a column guessed as text; a column the first rows show to be
    numbers is read as text in the same pass, and any other the guess got wrong is read again
    as text. Nothing here records a problem: the rules see the same cells either way.
    """
    raw, text = _csv_text(path)
    if _blank(text) or len(raw) < TYPED_FROM_BYTES:
        return None
    options = _csv_options(text, raw)
    try:
        header = pd.read_csv(io.BytesIO(raw), dtype=str, header=None, nrows=1, **options)
        names = _header_names(path, header)
        # header=0: the first row read as the header and replaced by the names just checked
        first_rows = pd.read_csv(io.BytesIO(raw), header=0, nrows=GUESSED_FROM_ROWS, **options)
        as_text = _text_in_one_pass(first_rows, names, numbers)
        guessed = pd.read_csv(io.BytesIO(raw), header=0, dtype=dict.fromkeys(as_text, str), **options)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error, ValueError, DataError):
        return None
    if not isinstance(guessed.index, pd.RangeIndex) or guessed.shape[1] != len(names):
        return None   # a first data row longer than the header: the text reader names it
    guessed.columns = names
    again = [i for i, name in enumerate(names) if not _typed_as_wanted(guessed[name], name in numbers)]
    if again and not _read_again_as_text(raw, options, guessed, again):
        return None
    for name in numbers:
        if name in guessed.columns and guessed[name].dtype.kind == "i":
            guessed[name] = guessed[name].astype(float)
    guessed.attrs["sha256"] = hashlib.sha256(raw).hexdigest()
    return guessed


# The rows whose guessed types say which columns to read as text in the one pass. Asking
# for text costs the parser more than its own guess of text (about 0.17 us a cell against
# next to nothing for the ids of the bench panels, measured), so only columns the first
# rows show to be numbers are asked for.
GUESSED_FROM_ROWS = 100


def _text_in_one_pass(first_rows: pd.DataFrame, names: list[str], numbers: tuple[str, ...]) -> list[int]:
    """The places of the columns outside ``numbers`` that the parser guesses as numbers in
    the first rows: read as text in the main pass instead of being read twice."""
    if first_rows.shape[1] != len(names):
        return []
    return [i for i, name in enumerate(names) if name not in numbers
            and not isinstance(first_rows.iloc[:, i].dtype, pd.StringDtype)]


def _read_again_as_text(raw: bytes, options: dict, guessed: pd.DataFrame, places: list[int]) -> bool:
    """Put the text reader's text in the columns at ``places`` of ``guessed``; False when the
    second read does not line up with the first."""
    try:
        again = pd.read_csv(io.BytesIO(raw), dtype=str, header=None, usecols=places, **options)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error, ValueError):
        return False
    if len(again) != len(guessed) + 1:
        return False
    for i in places:
        guessed[guessed.columns[i]] = again[i].iloc[1:].reset_index(drop=True)
    return True


def _typed_as_wanted(column: pd.Series, number: bool) -> bool:
    """Whether the parser's guess for a column is what the rules would make of its text:
    floats, or integers a float holds exactly, for a numbers column; text for any other."""
    kind = column.dtype.kind
    if not number:
        return isinstance(column.dtype, pd.StringDtype)
    if kind == "f":
        return True
    return kind == "i" and (column.empty or int(column.abs().max()) < EXACT_INTEGERS)


def _read_excel(path: Path) -> pd.DataFrame:
    try:
        return pd.read_excel(path, dtype=object, header=None, engine="openpyxl",
                             keep_default_na=False, na_values=[""])
    except Exception as exc:  # noqa: BLE001 -- openpyxl and zipfile raise many kinds for a damaged file
        raise _unreadable(path, f"it is not a readable XLSX workbook ({type(exc).__name__}: "
                                f"{str(exc).strip() or 'damaged'}); save it again from the "
                                "spreadsheet, or as CSV UTF-8") from None


def _read_parquet(path: Path) -> pd.DataFrame:
    try:
        df = pd.read_parquet(path)
    except ImportError:
        raise DataError([DataProblem(
            "reading Parquet needs pyarrow; install it with pip install 'rater-calibrate[parquet]'",
            file=path.name)]) from None
    except Exception as exc:  # noqa: BLE001 -- pyarrow raises its own kinds for a damaged file
        raise _unreadable(path, f"it is not a readable Parquet file ({type(exc).__name__}: "
                                f"{str(exc).strip() or 'damaged'})") from None
    header = pd.DataFrame([list(df.columns)], columns=range(df.shape[1]))
    df.columns = range(df.shape[1])
    return pd.concat([header, df.astype(object)], ignore_index=True)


def _with_header(path: Path, grid: pd.DataFrame) -> pd.DataFrame:
    """The first row as column names; a header cell left empty is named by its place, and a
    name given twice is an error (pandas would otherwise rename it silently)."""
    if grid.empty:
        raise _unreadable(path, "the file is empty; it needs a header row and rows of data")
    df = grid.iloc[1:].reset_index(drop=True)
    df.columns = _header_names(path, grid)
    return df


def _header_names(path: Path, grid: pd.DataFrame) -> list[str]:
    """The column names of a grid's first row, checked as :func:`_with_header` says."""
    names = []
    for i, cell in enumerate(grid.iloc[0].tolist()):
        empty = cell is None or (isinstance(cell, float) and np.isnan(cell)) or not str(cell).strip()
        names.append(f"(column {i + 1})" if empty else str(cell).strip())
    seen: dict[str, int] = {}
    for i, name in enumerate(names):
        if name in seen:
            raise DataError([DataProblem(
                f"the header names column '{name}' twice (columns {seen[name] + 1} and {i + 1}); "
                "give each column its own name", file=path.name, row=1, column=name)])
        seen[name] = i
    return names


def read_table(path: Path, *, missing_words: tuple[str, ...] | None = DEFAULT_MISSING_WORDS,
               id_columns: tuple[str, ...] = (), numbers: tuple[str, ...] = ()) -> pd.DataFrame:
    """Read a CSV (delimiter sniffed, UTF-8 with or without BOM), XLSX or Parquet file.

    Values are kept as read (text for CSV) so that conversion problems can be
    reported row by row. Only empty cells are missing, plus the cells holding one of
    ``missing_words`` (ignoring case and spaces; ``()`` keeps every word as written,
    which is how the study's own rules read tables, applying the words per column).
    ``id_columns`` are never touched by the missing words: an id "NA" is an id.
    A damaged or unreadable file is a DataError naming it. Adds the spreadsheet row
    number as ``_row``.

    ``numbers`` (CSV only, with ``missing_words=()``): columns that come back as floats
    when every cell is a number or empty (:func:`_read_csv_typed`); text otherwise.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if path.is_dir():
        raise _unreadable(path, f"{path} is a folder; give a {TABLE_KINDS} file")
    typed = (_read_csv_typed(path, numbers) if numbers and not missing_words
             and suffix not in (".xlsx", ".xlsm", ".parquet", ".xls", ".ods", ".numbers") else None)
    if typed is not None:
        typed[ROW] = np.arange(len(typed)) + 2
        return typed
    if suffix in (".xlsx", ".xlsm"):
        grid = _read_excel(path)
    elif suffix == ".parquet":
        grid = _read_parquet(path)
    elif suffix in (".xls", ".ods", ".numbers"):
        raise _unreadable(path, f"'{suffix}' files are not read; save it as XLSX or CSV UTF-8")
    else:
        grid = _read_csv(path)
    df = _with_header(path, grid)
    if missing_words:
        df = df.apply(lambda col: col if col.name in id_columns
                      else blank_missing_words(col, missing_words))
    df[ROW] = np.arange(len(df)) + 2
    return df


# ----------------------------------------------------------------------------- main


def load_study(spec: StudySpec | str | Path | Mapping, *, data=None, cases=None) -> JudgmentTable:
    """Read and validate a study: the spec (a path, a dict of its tables or a StudySpec) and its tables.

    ``data`` (a DataFrame, or {phase: DataFrame}) and ``cases`` (a DataFrame) take the place
    of the spec's files and pass the same rules; the caller's DataFrames are not changed.

    Raises
    ------
    SpecError
        the spec is malformed.
    DataError
        listing every data problem (file, row, column); warnings are not raised
        but kept in ``JudgmentTable.warnings``.
    """
    table, problems = inspect_study(spec, data=data, cases=cases)
    if table is None:
        raise DataError([p for p in problems if p.severity == "error"])
    return table


def inspect_study(spec: StudySpec | str | Path | Mapping, *, data=None,
                  cases=None) -> tuple[JudgmentTable | None, list[DataProblem]]:
    """Like :func:`load_study` but returns ``(table or None, every problem)`` for ``check``."""
    given = given_tables(data, cases)
    spec = study_spec(spec, given)
    out = Collector()
    try:
        table = _build(spec, out, given, typed=True)
    except TextNeeded:
        table = None
    if table is None:
        # a problem to name (or rows whose text must be compared): the cells as text, so that
        # every message quotes them as written
        out = Collector()
        table = _build(spec, out, given, typed=False)
    if out.errors:
        return None, out.items
    return table, out.items


def _typed_columns(spec: StudySpec) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The columns read as numbers when every cell is one: (in the judgments tables, in the
    cases table). Only columns the rules convert cell by cell: the judgment (without labels,
    whose words are text) and the sequence; the numeric cues of a cases table. A value
    repeated on judgment rows, the criterion (kept as written in ``cases``) and the excluded
    attributes stay text."""
    cols = spec.columns
    judged = tuple(cols[role] for role in ("judgment", "sequence")
                   if role in cols and not (role == "judgment" and spec.judgment.labels))
    cues = tuple(c.name for c in spec.cues if c.kind == "numeric"
                 and c.name != cols.get("criterion") and c.name not in spec.excluded)
    return judged, cues


def _read_one(path: Path, what: str, key: str, out: Collector,
              numbers: tuple[str, ...] = ()) -> pd.DataFrame | None:
    """One input table, or None with its problem recorded (absent, a folder, unreadable)."""
    if path.is_dir():
        out.error(f"the {what} {path} is a folder, not a table; fix [study] {key} in the spec",
                  file=path.name)
        return None
    if not path.is_file():
        out.error(f"the {what} {path} does not exist; fix [study] {key} in the spec", file=path.name)
        return None
    try:
        return read_table(path, missing_words=(), numbers=numbers)
    except DataError as exc:
        out.items.extend(exc.problems)
        return None


def _given_table(name: str, grid: pd.DataFrame, out: Collector) -> pd.DataFrame | None:
    """A caller's DataFrame (as a grid) read like a file: header checked, row numbers added."""
    try:
        df = _with_header(Path(name), grid)
    except DataError as exc:
        out.items.extend(exc.problems)
        return None
    df[ROW] = np.arange(len(df)) + 2
    return df


def _read_sources(spec: StudySpec, out: Collector, given: GivenTables | None = None,
                  typed: bool = False) -> tuple[list[pd.DataFrame], pd.DataFrame | None, list[dict]]:
    """Read every judgments table (tagged with its file and phase) and the cases table; tables
    the caller passed (``given``) stand in for the spec's files. ``typed``: CSV columns of
    :func:`_typed_columns` read as numbers where every cell is one."""
    given = given or GivenTables()
    judged_numbers, case_numbers = _typed_columns(spec) if typed else ((), ())
    frames = []
    inputs = []
    grids = {name: grid for name, _, grid in given.data}
    for source in spec.data:
        grid = grids.get(str(source.path))   # None: a file named in the spec
        df = (_given_table(str(source.path), grid, out) if grid is not None
              else _read_one(source.path, "judgments table", "data", out, judged_numbers))
        if df is None:
            continue
        inputs.append({"path": source.path.name,
                       "sha256": grid_sha256(grid) if grid is not None else _file_sha256(df, source.path)})
        df[FILE] = source.path.name
        df.attrs["file"] = source.path.name
        if source.phase is not None:
            df[PHASE] = source.phase
        frames.append(df)
    cases_df = None
    if given.cases is not None:
        cases_df = _given_table(spec.cases.name, given.cases, out)
        if cases_df is not None:
            inputs.append({"path": spec.cases.name, "sha256": grid_sha256(given.cases)})
    elif spec.cases is not None:
        cases_df = _read_one(spec.cases, "cases table", "cases", out, case_numbers)
        if cases_df is not None:
            inputs.append({"path": spec.cases.name, "sha256": _file_sha256(cases_df, spec.cases)})
    return frames, cases_df, inputs


def _file_sha256(df: pd.DataFrame, path: Path) -> str:
    """The file's fingerprint: the one its reader took of the bytes it parsed, else read again."""
    return df.attrs.pop("sha256", None) or sha256_of(path)


def _stack(frames: list[pd.DataFrame], columns: dict[str, str]) -> pd.DataFrame:
    """One long table of judgments; ``_phase`` from the phase column, the table, or None."""
    data = pd.concat(frames, ignore_index=True, sort=False)
    if "phase" in columns:
        data[PHASE] = data[columns["phase"]]
    if PHASE not in data.columns:
        data[PHASE] = None
    return data


def _case_table(spec: StudySpec, data: pd.DataFrame, cases_df: pd.DataFrame | None,
                out: Collector) -> tuple[pd.DataFrame, pd.Series, str | None, np.ndarray | None]:
    """The per-case values, from the cases table, else from the judgment rows.

    Returns (cases indexed by the judged case ids, spreadsheet row of each case, the
    cases table's file name, or the judgments file of each case's first row, and for
    each CASE_CODE its case's row of the cases returned: None when the rows carry no codes).
    """
    ccol = spec.columns["case"]
    judged, judged_codes = _judged_cases(data, ccol)   # in order of appearance, missing ids included
    cases_index = None if cases_df is None else cases_by_id(cases_df, spec, out)
    judged_place = None if cases_index is None else check_judged_listed(cases_index, judged, spec, out)
    present = judged.notna().to_numpy()
    order = natural_order(judged[present])
    used_cases = _case_index(judged[present].iloc[order])
    row_of_code = None
    if judged_codes is not None:
        row_of_code = np.full(int(judged_codes.max(initial=-1)) + 1, -1, dtype=np.intp)
        row_of_code[judged_codes[present][order]] = np.arange(len(used_cases))
    # the cases table's row of each judged case, found once (not one reindex per column)
    place = None if cases_index is None else judged_place[present][order]
    cases = pd.DataFrame(index=used_cases)
    for col in case_level_columns(spec):
        if place is not None and col in cases_index.columns:
            cases[col] = _taken(cases_index[col], place, used_cases)
        else:
            values = case_value_from_rows(data, col, ccol, out)
            cases[col] = _taken(values, positions_in(values.index, used_cases), used_cases)
    if place is not None:
        return cases, _taken(cases_index[ROW], place, used_cases), spec.cases.name, row_of_code
    first_rows = data.drop_duplicates(ccol).set_index(ccol)
    return cases, first_rows[ROW].reindex(used_cases), first_rows[FILE], row_of_code


def _judged_cases(data: pd.DataFrame, ccol: str) -> tuple[pd.Series, np.ndarray | None]:
    """The distinct case ids of the judgments in order of appearance (a missing id once, as
    ``unique`` gives it) and their CASE_CODE (None when the rows carry no codes): the codes,
    integers, are what is hashed."""
    if CASE_CODE not in data.columns:
        return pd.Series(data[ccol].unique()), None
    codes = data[CASE_CODE].to_numpy()
    first_rows = np.flatnonzero(~pd.Series(codes).duplicated().to_numpy())
    return data[ccol].iloc[first_rows].reset_index(drop=True).rename(None), codes[first_rows]


_DEFAULT_TEXT = pd.Index(["text"]).dtype   # the dtype pandas gives a list of text


def _case_index(ids: pd.Series) -> pd.Index:
    """The cases' index: as ``pd.Index(list of ids)`` makes it, the ids' text taken as it is
    when they are text already."""
    if ids.dtype == _DEFAULT_TEXT:
        return pd.Index(ids.array, name="case")
    return pd.Index(ids.tolist(), name="case")


def _taken(series: pd.Series, place: np.ndarray, index: pd.Index) -> pd.Series:
    """``series`` at the rows ``place`` (missing where -1), on ``index``: a reindex whose
    lookup is already done."""
    return pd.Series(series.array.take(place, allow_fill=True), index=index, name=series.name)


def _phase_data(name: str | None, sub: pd.DataFrame, complete: pd.Series, n_terms: int,
                out: Collector, mode: str = "first-two", row_of_code: np.ndarray | None = None) -> PhaseData:
    """Split one phase's judgments into first judgments, repeat pairs and reading order
    (and, with ``mode`` "all", every presentation of the repeated cases). ``row_of_code``:
    the row of ``complete`` of each CASE_CODE, when the rows carry the codes. Each frame is
    built from the columns it needs, taken at the rows it needs (selecting the columns
    first copied all of them, and taking the first judgments' rows took every column)."""
    if sub.empty:
        out.warn(f"phase '{name}' has no judgments", kind="empty_phase", phase=name)
    # ids as text once: the frames below share these arrays instead of each converting
    # the same object arrays again
    rater, case = _text_array(sub["_rater"]), _text_array(sub["_case"])
    is_first = sub["_nth"].to_numpy() == 0
    at_first = np.flatnonzero(is_first)   # numbers are taken by place, text by mask (quicker each)
    judgment = sub["_judgment"].to_numpy(dtype=float)
    sequence = sub["_sequence"].to_numpy(dtype=float)
    case_mean = judgment[at_first]
    presentations = PhaseData.__dataclass_fields__["presentations"].default_factory()
    if mode == "all":
        case_mean, presentations = _every_presentation(sub, rater, case, judgment, at_first)
    first = pd.DataFrame({
        "rater": rater[is_first],
        "case": case[is_first],
        "judgment": judgment[at_first],
        "sequence": sequence[at_first],
        "file": _as_built_from_objects(sub[FILE])[is_first],
        "row": sub[ROW].to_numpy(dtype=int)[at_first],
        "shown": sub["_shown"].to_numpy(dtype=int)[at_first],
        "case_mean": case_mean,
    })
    firsts = pd.DataFrame({"_rater": first["rater"].array, "_case": first["case"].array,
                           "_judgment": first["judgment"].to_numpy()})
    repeats = _repeat_pairs(sub, firsts)
    ordered = pd.DataFrame({
        "rater": rater,
        "case": case,
        "judgment": judgment,
        "position": sub["_position"].to_numpy(dtype=int),
        "sequence": sequence,
    })
    coded = RATER_CODE in sub.columns and row_of_code is not None
    case_rows = row_of_code[sub[CASE_CODE].to_numpy()[at_first]] if coded else None
    rater_codes = sub[RATER_CODE].to_numpy()[at_first] if coded else None
    fit_raters, too_few = too_few_cases(first, complete, n_terms, name, out, case_rows, rater_codes)
    return PhaseData(name=name, first=first, repeats=repeats, ordered=ordered,
                     fit_raters=fit_raters, too_few=too_few, presentations=presentations,
                     repeat_mode=mode)


def _text_array(ids: pd.Series):
    """The ids as pandas' text array (``astype("str")``, which leaves text as it is)."""
    return (ids if ids.dtype == _DEFAULT_TEXT else ids.astype("str")).array


def _every_presentation(sub: pd.DataFrame, rater, case, judgment: np.ndarray,
                        at_first: np.ndarray) -> tuple[np.ndarray, pd.DataFrame]:
    """With ``[judgment] repeats = "all"``: each first judgment's mean over every presentation
    of its case (in the first judgments' order), and every presentation of the cases shown
    more than once."""
    ids = pd.DataFrame({"_rater": rater, "_case": case, "_judgment": judgment})
    keys = ["_rater", "_case"]
    means = ids.groupby(keys, sort=False)["_judgment"].mean()
    case_mean = means.reindex(pd.MultiIndex.from_frame(ids.iloc[at_first][keys])).to_numpy(dtype=float)
    many = np.flatnonzero(sub["_shown"].to_numpy() >= 2)
    return case_mean, pd.DataFrame({
        "rater": rater[many],
        "case": case[many],
        "nth": sub["_nth"].to_numpy(dtype=int)[many],
        "judgment": judgment[many],
    })


def _as_built_from_objects(column: pd.Series):
    """What a frame built from ``column.to_numpy()`` holds: the text array itself when it is
    the text pandas would make of those objects (converting 400,000 file names to objects
    and back cost 0.05 s)."""
    return column.array if column.dtype == _DEFAULT_TEXT else column.to_numpy()


def _repeat_pairs(sub: pd.DataFrame, firsts: pd.DataFrame) -> pd.DataFrame:
    """Each first judgment (``firsts``, the rows of ``sub`` with ``_nth`` 0) that has a second
    (``_nth`` 1) beside it, in the first judgments' order: the inner join on rater and case,
    found on integer codes (each pair is unique)."""
    nth = sub["_nth"].to_numpy()
    judgment = sub["_judgment"].to_numpy(dtype=float)
    if RATER_CODE in sub.columns and CASE_CODE in sub.columns:
        matched, second = _seconds_of_shown_again(sub)
    else:
        rater = pd.factorize(sub["_rater"], use_na_sentinel=False)[0].astype(np.int64)
        case = pd.factorize(sub["_case"], use_na_sentinel=False)[0].astype(np.int64)
        key = rater * (int(case.max(initial=0)) + 1) + case
        first_keys, second_keys = key[nth == 0], key[nth == 1]
        by_key = np.argsort(second_keys, kind="stable")
        place = np.minimum(np.searchsorted(second_keys[by_key], first_keys), max(len(second_keys) - 1, 0))
        matched = (second_keys[by_key][place] == first_keys) if len(second_keys) else np.zeros(len(first_keys), bool)
        second = judgment[nth == 1][by_key[place[matched]]]
    return pd.DataFrame({
        "rater": firsts["_rater"].array[matched],
        "case": firsts["_case"].array[matched],
        "first": firsts["_judgment"].to_numpy(dtype=float)[matched],
        "second": second,
    })


def _seconds_of_shown_again(sub: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """For rows marked by :func:`mark_repeats` and carrying the id codes: which first
    judgments have a second (their case was shown the rater twice or more, ``_shown``), and
    those seconds' judgments in the firsts' order. Only the repeated cases' two first rows
    are sorted, by rater and case; each such pair then lies side by side, first before second
    (the rows are in reading order)."""
    nth, shown = sub["_nth"].to_numpy(), sub["_shown"].to_numpy()
    rater, case = sub[RATER_CODE].to_numpy(), sub[CASE_CODE].to_numpy()
    rows = np.flatnonzero((shown >= 2) & (nth <= 1))
    key = rater[rows] * (int(case.max(initial=0)) + 1) + case[rows]
    paired = rows[np.argsort(key, kind="stable")]
    first_rows, second_rows = paired[0::2], paired[1::2]
    second = sub["_judgment"].to_numpy(dtype=float)[second_rows[np.argsort(first_rows)]]
    return shown[nth == 0] >= 2, second


def _build(spec: StudySpec, out: Collector, given: GivenTables | None = None,
           typed: bool = False) -> JudgmentTable | None:
    """The door: read, apply the input rules in order, split by phase.

    Returns None as soon as a step has found an error (every error of that step
    is collected first). ``typed`` reads numeric columns as numbers (:func:`_read_sources`);
    the caller then reads again as text when this finds an error (raises TextNeeded on
    rows the rules compare as text).
    """
    cols = spec.columns
    frames, cases_df, inputs = _read_sources(spec, out, given, typed)
    if not frames or out.errors:
        return None
    cases_df = check_columns_exist(spec, frames, cases_df, out)
    if out.errors:
        return None

    data = _stack(frames, cols)
    data = check_ids(data, cols, out, with_codes=True)
    data = check_phases(data, spec, out)
    data = drop_duplicates(data, out, (cols["rater"], cols["case"]))
    data = check_judgments(data, spec, out)
    if data.empty and not out.errors:
        out.error("no row has a judgment; fill in the judgment column "
                  f"'{cols['judgment']}'", column=cols["judgment"])
        return None
    data = check_sequence(data, cols, out, spec.numeric_missing_words)

    if not spec.cues:
        out.warn(NO_CUES_NOTE, kind="no_cues")
    cases, row_of_case, case_file, row_of_code = _case_table(spec, data, cases_df, out)
    cases = check_numeric_cues(cases, spec.cues, row_of_case, case_file, out,
                               spec.numeric_missing_words)
    cases = blank_categorical_missing(cases, [c.name for c in spec.cues if c.kind == "categorical"],
                                      spec.categorical_missing_words)
    if "criterion" in cols:
        cases = check_criterion(cases, cols["criterion"], case_file, out,
                                spec.numeric_missing_words, row_of_case)
    if out.errors:
        return None
    for rule in spec.cues:
        check_constant_cue(cases[rule.name], rule, out)
        report_missing_cue(cases[rule.name], rule, out)
    if out.errors:
        return None
    design = build_cue_design(cases, list(spec.cues))
    complete = pd.Series(design.complete_rows(), index=cases.index)   # the design's rows are the cases

    data = data.rename(columns={cols["rater"]: "_rater", cols["case"]: "_case"})
    data = mark_repeats(data, out, spec.judgment.repeats)
    mode = data.attrs.get("repeats", "first-two")
    if spec.trained is not None:   # the raters' distinct ids are only needed then
        check_trained(set(data["_rater"].unique()), spec.trained, out)
    if out.errors:
        return None

    phase_names: list[str | None] = list(spec.phase_order) if spec.phase_order else [None]
    phases = tuple(_phase_data(name, data if name is None else data.loc[data[PHASE] == name],
                               complete, design.n_columns, out, mode, row_of_code) for name in phase_names)
    cases, types = excluded_types(cases, spec.excluded, spec.numeric_missing_words,
                                  spec.categorical_missing_words)
    return JudgmentTable(spec=spec, cases=cases, design=design, phases=phases,
                         warnings=tuple(out.warnings), inputs=tuple(inputs),
                         counts={"excluded_types": types})
