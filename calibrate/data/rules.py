"""The input rules, one function each, in the order the door applies them.

Each rule takes the rows (or the per-case table) built so far, records every
problem it finds in a :class:`Collector` (file, row and column named, so a user
fixes their data in one pass) and returns the rows it keeps. Errors stop the run
after the step that found them; warnings travel into the results. The rules are
stated as README.md's "Input" section states them.

Row numbers are the ones a person sees: in a CSV or a worksheet the header is
row 1 and the first data row is row 2.

A rule never changes the frame it is given, and copies no column it does not change: it
takes a shallow copy (``copy(deep=False)``) and sets whole columns on it, which replaces
them there only (pandas sets a whole column as a new array; with copy-on-write, pandas 3,
nothing is shared that one side could write into).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from ..errors import DataProblem
from .cues import CueRule
from .spec import StudySpec

FILE = "_file"
ROW = "_row"
PHASE = "_phase"
MAX_LISTED = 8  # rows listed in one message before "and N more"
MAX_ROW_MESSAGES = 50  # one message per row up to this many, then a count


_DIGIT_RUNS = re.compile(r"(\d+)")


def natural_key(text: str):
    """Sort 'r2' before 'r10' (called once per id: the pattern is compiled once)."""
    return [int(t) if t.isdigit() else t.lower() for t in _DIGIT_RUNS.split(str(text))]


# An id of at most three tokens (text, one run of at most 18 digits, text) in ASCII: its
# natural_key is computed column-wise (the digit run fits an int64)
_SIMPLE_ID = r"[^0-9]*[0-9]{0,18}[^0-9]*"
# Below this many cells (ids to sort, distinct ids, numbers to convert) the cell-by-cell
# route is quicker than the column operations' fixed cost
COLUMNWISE_FROM = 5000
# ids of one layout are ranked on their bytes from this many on (2,000 rater ids: 0.5 ms
# against 6 ms one key at a time, measured)
SAME_LAYOUT_FROM = 500


def natural_order(ids: pd.Series) -> np.ndarray:
    """Positions that put ``ids`` in the order of ``sorted(..., key=natural_key)`` (stable).

    Ids of the simple form above are ranked on whole columns: the text before the digits
    (lower case), then whether there are digits (an id without sorts first, as a shorter
    key does), the number, the text after (lower case), then the place (sorted is stable).
    Any other id (missing, non-ASCII, two digit runs) sorts by natural_key itself.
    """
    ids = pd.Series(ids).reset_index(drop=True)
    if ids.empty:
        return np.zeros(0, dtype=np.intp)
    plain = len(ids) >= SAME_LAYOUT_FROM and ids.dtype == "str" and not ids.isna().any() and ids.str.isascii().all()
    same_layout = _same_layout_order(ids) if plain else None
    if same_layout is not None:
        return same_layout
    if len(ids) < COLUMNWISE_FROM or not plain or not ids.str.fullmatch(_SIMPLE_ID).all():
        return _order_of_keys(ids)
    lower = ids.str.lower()
    head = pd.factorize(lower.str.replace(r"[0-9].*$", "", regex=True), sort=True)[0]
    tail = pd.factorize(lower.str.replace(r"^[^0-9]*[0-9]*", "", regex=True), sort=True)[0]
    digits = ids.str.replace(r"^[^0-9]*", "", regex=True).str.replace(r"[^0-9].*$", "", regex=True)
    has_digits = (digits != "").to_numpy(dtype=bool)
    number = digits.where(has_digits, "0").astype("int64").to_numpy()
    return np.lexsort((np.arange(len(ids)), tail, number, has_digits, head))


def _order_of_keys(ids: pd.Series) -> np.ndarray:
    keys = [natural_key(v) for v in ids.tolist()]
    return np.array(sorted(range(len(keys)), key=keys.__getitem__), dtype=np.intp)


def _same_layout_order(ids: pd.Series) -> np.ndarray | None:
    """:func:`natural_order` of ASCII ids of one length with their digits at the same places
    (``f000035``, ``f000128``, ...), None for any other: every key then splits alike, each
    run of text and of digits as long in every id, so comparing keys is comparing the ids'
    lower-cased bytes (equal-width digit runs rank as their numbers do). One stable sort of
    the bytes, position by position, instead of four patterns over the column."""
    lengths = ids.str.len().to_numpy()
    width = int(lengths[0])
    if width == 0 or (lengths != width).any():
        return None
    cells = np.frombuffer("".join(ids.tolist()).encode("ascii"), dtype=np.uint8).reshape(len(ids), width)
    digits = (cells >= ord("0")) & (cells <= ord("9"))
    if not (digits == digits[0]).all():
        return None
    lowered = np.where((cells >= ord("A")) & (cells <= ord("Z")), cells + (ord("a") - ord("A")), cells)
    return np.lexsort(lowered.T[::-1]).astype(np.intp)   # lexsort: last key first, stable


def natural_sorted(ids) -> list:
    """``sorted(ids, key=natural_key)``, on whole columns where :func:`natural_order` can."""
    ids = pd.Series(ids)
    return ids.iloc[natural_order(ids)].tolist()


def as_id(value) -> str | None:
    """Ids as text; a float that is a whole number (from a spreadsheet) loses its '.0'."""
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return None
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    text = str(value).strip()
    return text or None


MAX_SHOWN_CHARS = 40  # a cell value quoted in a message is cut to this length


def shown(value) -> str:
    """A cell value as quoted in a message: one line, cut short when long."""
    text = " ".join(str(value).split())
    return text if len(text) <= MAX_SHOWN_CHARS else text[:MAX_SHOWN_CHARS - 3] + "..."


def rows_text(rows: list[int]) -> str:
    """Row numbers for a message, the first few listed and the rest counted."""
    rows = sorted(rows)
    shown = ", ".join(str(r) for r in rows[:MAX_LISTED])
    return shown + (f" and {len(rows) - MAX_LISTED} more" if len(rows) > MAX_LISTED else "")


def map_distinct(series: pd.Series, func) -> pd.Series:
    """``series.map(func)``, with ``func`` called once per distinct value.

    A long table repeats its ids, scores and positions many times over, so this is one
    Python call per distinct value instead of one per cell. Missing cells (NaN, None)
    are passed to ``func`` one by one, as ``map`` does.
    """
    try:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
    except TypeError:  # unhashable cells (lists in a result table): cell by cell
        return series.map(func)
    mapped = np.empty(len(uniques), dtype=object)
    mapped[:] = [func(u) for u in uniques.tolist()]   # one bulk conversion, not one per value
    out = np.empty(len(series), dtype=object)
    found = codes >= 0
    out[found] = mapped[codes[found]]
    if not found.all():
        out[~found] = [func(v) for v in series.to_numpy(dtype=object)[~found]]
    return pd.Series(out, index=series.index, name=series.name)


def _plain(series: pd.Series) -> pd.Series:
    return map_distinct(series, lambda v: " ".join(str(v).split()).lower() if isinstance(v, str) else v)


def blank_missing_words(series: pd.Series, words: tuple[str, ...]) -> pd.Series:
    """Cells holding one of ``words`` (ignoring case and spaces), or only spaces, become missing."""
    lowered = {" ".join(w.split()).lower() for w in words} | {""}
    plain = _plain(series)
    return series.mask(plain.isin(lowered))


def _distinct_cells(series: pd.Series) -> tuple[np.ndarray, pd.Series] | None:
    """``(codes, distinct)``: the series' distinct present values (same dtype) and each
    cell's place among them (-1 for a missing cell); None for unhashable cells."""
    try:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
    except TypeError:
        return None
    return codes, pd.Series(uniques, name=series.name)


def _spread(per_distinct: pd.Series, codes: np.ndarray, like: pd.Series, missing) -> pd.Series:
    """Values of the distinct cells put back on every cell; ``missing`` where a cell is empty."""
    values = per_distinct.to_numpy()
    out = np.where(codes >= 0, values[np.maximum(codes, 0)] if values.size else missing, missing)
    return pd.Series(out.astype(values.dtype, copy=False), index=like.index, name=per_distinct.name)


def to_numbers(series: pd.Series, missing_words: tuple[str, ...] = ()) -> tuple[pd.Series, pd.Series]:
    """Convert to float; return (values, mask of present-but-not-numeric). A cell holding one
    of ``missing_words`` is missing. Infinite and overflowing values (inf, 1e400) come back
    as +-inf, for :func:`report_non_finite` to refuse. A long table repeats its scores and
    positions, so each distinct cell is converted once."""
    if series.dtype.kind == "f":   # read as numbers already: each cell is its own value
        return (pd.Series(series.to_numpy(dtype=float), index=series.index, name=series.name),
                pd.Series(np.zeros(len(series), dtype=bool), index=series.index, name=series.name))
    plain = _plain_decimals(series, missing_words)
    if plain is not None:
        return plain
    split = _distinct_cells(series)
    if split is None:
        return _cells_to_numbers(series, missing_words)
    codes, distinct = split
    values, bad = _cells_to_numbers(distinct, missing_words)
    return _spread(values, codes, series, np.nan), _spread(bad, codes, series, False)


# A text column of this many cells or more is tried as plain decimals: a pattern and a cast
# of the column cost about 1 ms against 2 ms converting its distinct cells (200 cues of a
# small cases table, measured)
DECIMALS_CAST_FROM = 100
# A number as written in a table: sign, digits with at most one point, exponent. Such text
# converts to the same float by the column's own cast as by to_numeric or float().
_DECIMAL = r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"


def _plain_decimals(series: pd.Series, missing_words: tuple[str, ...]) -> tuple[pd.Series, pd.Series] | None:
    """:func:`to_numbers` of a text column whose every present cell is a plain decimal (and no
    missing word is one), converted by one cast of the column; None for any other column."""
    if (len(series) < DECIMALS_CAST_FROM or series.dtype != "str"
            or any(re.fullmatch(_DECIMAL, " ".join(w.split())) for w in missing_words)):
        return None
    present = series.notna()
    if not series[present].str.fullmatch(_DECIMAL).all():
        return None
    try:
        values = _cast_decimals(series)
    except (TypeError, ValueError, OverflowError):
        return None
    return (pd.Series(values, index=series.index, name=series.name),
            pd.Series(np.zeros(len(series), dtype=bool), index=series.index, name=series.name))


def _cast_decimals(series: pd.Series) -> np.ndarray:
    """Text of plain decimals as floats (missing cells NaN): by the text array's own cast when
    pyarrow holds it, else through Python's float. The two give the same bits (checked on
    500,000 numbers written in seven formats, subnormal, overflowing and 30-digit ones
    among them); the first took 0.024 s where the second took 0.25 s."""
    if getattr(series.dtype, "storage", None) == "pyarrow":
        return series.astype("float64[pyarrow]").to_numpy(dtype=float, na_value=np.nan)
    return series.astype(float).to_numpy(dtype=float)


def _cells_to_numbers(series: pd.Series, missing_words: tuple[str, ...]) -> tuple[pd.Series, pd.Series]:
    series = blank_missing_words(series, missing_words)
    present = series.notna()
    values = pd.to_numeric(series.where(present), errors="coerce").astype(float)
    # pandas before 3 reads an overflowing number ("1e400") as not a number; Python's float
    # reads it as inf, which is then refused as non-finite, as pandas 3 does
    retry = present & values.isna()
    if retry.any():
        values.loc[retry] = series.loc[retry].map(_float_or_nan)
    return values, present & values.isna()


def _float_or_nan(cell) -> float:
    try:
        return float(str(cell).strip())
    except (TypeError, ValueError):
        return float("nan")


def non_finite(values: pd.Series) -> pd.Series:
    """Mask of values that are infinite (written as inf, or too large for a float)."""
    return pd.Series(np.isinf(values.to_numpy(dtype=float)), index=values.index)


NON_FINITE_FIX = ("is not a finite number (infinite, or too large to hold); give an ordinary "
                  "number, or leave the cell empty if the value is missing")
# Ids title the reports and their tables; a longer id cannot be laid out on a page.
MAX_ID_CHARS = 100
CONTROL_CHARACTERS = re.compile(r"[\x00-\x1f\x7f-\x9f]")


class TextNeeded(Exception):
    """Cells read as numbers (:func:`calibrate.data.ingest.read_table`'s ``numbers``) met a
    rule that compares rows as written ("4" and "4.0" are two values there): the study is
    read again as text."""


class Collector:
    """Every problem found, in the order found; errors and warnings kept apart by severity."""

    def __init__(self) -> None:
        self.items: list[DataProblem] = []

    def error(self, message: str, *, file=None, row=None, column=None) -> None:
        self.items.append(DataProblem(message, file=file, row=row, column=column))

    def warn(self, message: str, *, kind: str, file=None, row=None, column=None, rater=None,
             case=None, phase=None) -> None:
        """A warning with its stable ``kind`` (a code of ``calibrate.notes.NOTE_TITLES``)."""
        self.items.append(DataProblem(message, file=file, row=row, column=column, severity="warning",
                                      kind=kind, rater=rater, case=case, phase=phase))

    @property
    def errors(self) -> list[DataProblem]:
        return [p for p in self.items if p.severity == "error"]

    @property
    def warnings(self) -> list[DataProblem]:
        return [p for p in self.items if p.severity == "warning"]


def case_level_columns(spec: StudySpec) -> list[str]:
    """The columns that describe a case, not a judgment: cues, excluded attributes, criterion."""
    cols = spec.columns
    return (list(spec.cue_names) + list(spec.excluded)
            + ([cols["criterion"]] if "criterion" in cols else []))


# ----------------------------------------------------------------------------- columns


def check_columns_exist(spec: StudySpec, frames: list[pd.DataFrame], cases_df: pd.DataFrame | None,
                        out: Collector) -> pd.DataFrame | None:
    """Every role column named in [columns] is in each judgments table; every cue, excluded
    attribute and criterion is in the judgments tables or the cases table. A cases table
    without the case column cannot be joined and is set aside (returns None)."""
    cols = spec.columns
    cue_names = list(spec.cue_names)
    for df in frames:
        fname = df.attrs.get("file", "the judgments table")
        if df.empty:
            out.error("the table has a header but no rows of judgments; add the data or remove "
                      "the table from [study] data", file=fname)
        available = [c for c in df.columns if not c.startswith("_")]
        for role in ("rater", "case", "judgment", "sequence", "phase"):
            col = cols.get(role)
            if col is not None and col not in df.columns:
                out.error(f"column '{col}' ({role}) not found; available: {', '.join(available)}",
                          file=fname, column=col)
    if cases_df is not None and cols["case"] not in cases_df.columns:
        out.error(f"the cases table has no case column '{cols['case']}' to join on; available: "
                  + ", ".join(c for c in cases_df.columns if not c.startswith("_")),
                  file=spec.cases.name, column=cols["case"])
        cases_df = None
    for col in case_level_columns(spec):
        in_cases = cases_df is not None and col in cases_df.columns
        in_judg = all(col in df.columns for df in frames)
        if not in_cases and not in_judg:
            where = "the judgments table" + (" or the cases table" if cases_df is not None else "")
            role = ("cue" if col in cue_names else "excluded attribute" if col in spec.excluded
                    else "criterion")
            out.error(f"column '{col}' ({role}) not found in {where}; add it or fix the spec",
                      file=frames[0].attrs.get("file"), column=col)
    return cases_df


# ----------------------------------------------------------------------------- rows


#: Integer columns :func:`check_ids` adds when asked (``with_codes``), so that the later rules
#: tell ids apart on integers instead of hashing 460,000 strings again each: a rater's code
#: follows the ids' sorted order (code points), a case's the order the ids first appear;
#: a missing id has the largest code. A rule given rows without them computes its own.
RATER_CODE = "_rater_code"
CASE_CODE = "_case_code"
#: ... and one code per (rater, case), below the number of rows
PAIR_CODE = "_pair_code"


def check_ids(data: pd.DataFrame, columns: dict[str, str], out: Collector, *,
              with_codes: bool = False) -> pd.DataFrame:
    """Every judgment needs a rater id and a case id; ids are read as text, one printable
    line of at most MAX_ID_CHARS characters (an id "NA" or "None" is an id). ``with_codes``
    adds the ids' integer codes (RATER_CODE, CASE_CODE)."""
    data = data.copy(deep=False)
    for role, code_column in (("rater", RATER_CODE), ("case", CASE_CODE)):
        col = columns[role]
        ids, missing, odd, too_long, (codes, distinct_ids, own_ids) = _checked_ids(data[col])
        for fname, rows in _rows_by_file(data, missing):
            out.error(f"the {role} id is empty in rows {rows_text(rows.tolist())}; every judgment "
                      f"needs a {role}", file=fname, column=col)
        for fname, rows in _rows_by_file(data, odd):
            out.error(f"the {role} id in rows {rows_text(rows.tolist())} holds a line break, tab or "
                      "other control character; ids must be printable text on one line",
                      file=fname, column=col)
        for fname, rows in _rows_by_file(data, too_long):
            out.error(f"the {role} id in rows {rows_text(rows.tolist())} is longer than "
                      f"{MAX_ID_CHARS} characters; ids title the reports, so shorten them (a "
                      "code, with the long names kept elsewhere)", file=fname, column=col)
        data[col] = ids
        if with_codes:
            data[code_column] = _id_codes(codes, distinct_ids, own_ids, sort=role == "rater")
    if with_codes:
        data[PAIR_CODE] = _dense_codes(data[RATER_CODE].to_numpy() * (int(data[CASE_CODE].max()) + 1)
                                       + data[CASE_CODE].to_numpy()) if len(data) else np.zeros(0, np.int64)
    return data


def _dense_codes(keys: np.ndarray) -> np.ndarray:
    """Non-negative keys renumbered 0, 1, ... (equal keys, equal codes; in the keys' order)."""
    if keys.max() < COUNTED_KEYS_PER_ROW * len(keys):
        seen = np.zeros(int(keys.max()) + 1, dtype=bool)
        seen[keys] = True
        return (np.cumsum(seen) - 1)[keys]
    return np.unique(keys, return_inverse=True)[1].reshape(-1).astype(np.int64)


def _rows_by_file(data: pd.DataFrame, flagged: np.ndarray):
    """(file, its flagged spreadsheet rows) per file, as ``groupby(FILE)[ROW]`` iterates them;
    nothing (and no frame taken) when no row is flagged."""
    return data.loc[flagged].groupby(FILE)[ROW] if flagged.any() else ()


def _id_codes(codes: np.ndarray, distinct_ids: pd.Series, own_ids: bool, sort: bool) -> np.ndarray:
    """Each row's id code (see RATER_CODE): ``codes`` place each row among the distinct cells,
    whose ids (``distinct_ids``, None where empty) two cells may share once stripped, unless
    each cell is its own id (``own_ids``)."""
    if not sort and own_ids:   # every distinct cell its own id: the codes as they are
        return np.where(codes >= 0, codes, len(distinct_ids)).astype(np.int64)
    merged, uniques = pd.factorize(distinct_ids, sort=sort, use_na_sentinel=True)
    merged = np.where(merged >= 0, merged, len(uniques)).astype(np.int64)
    return np.where(codes >= 0, merged[np.maximum(codes, 0)] if merged.size else 0, len(uniques))


def _checked_ids(raw: pd.Series) -> tuple[pd.Series, np.ndarray, np.ndarray, np.ndarray,
                                          tuple[np.ndarray, pd.Series, bool]]:
    """The ids as text, and which cells are empty, hold a control character, or are too long:
    each distinct cell checked once (a long table repeats its ids), then put back on every row.
    Last, ``(codes, distinct ids, own)``: each row's place among the distinct cells (-1 if
    empty), the id of each distinct cell, and whether those ids are distinct themselves."""
    split = _distinct_cells(raw)
    if split is None:   # unhashable cells: row by row
        ids = map_distinct(raw, as_id)
        codes, uniques = pd.factorize(ids, use_na_sentinel=True)
        return (ids, *_id_problems(ids), (codes, pd.Series(uniques), True))
    codes, distinct = split
    if _plain_ids(distinct, len(raw)):   # each id is its own text: nothing to strip, nothing to report
        return (raw, codes < 0, np.zeros(len(raw), dtype=bool), np.zeros(len(raw), dtype=bool),
                (codes, distinct, True))
    distinct_ids = map_distinct(distinct, as_id)
    missing, odd, too_long = (pd.Series(flags) for flags in _id_problems(distinct_ids))
    if isinstance(distinct_ids.dtype, pd.StringDtype):
        # put back by the text array's own take: building text from 460,000 objects again
        # is most of the cost otherwise
        ids = pd.Series(distinct_ids.array.take(codes, allow_fill=True), index=raw.index, name=raw.name)
    else:
        ids = _spread(distinct_ids, codes, raw, None)
    return (ids, _spread(missing, codes, raw, True).to_numpy(),
            _spread(odd, codes, raw, False).to_numpy(), _spread(too_long, codes, raw, False).to_numpy(),
            (codes, distinct_ids, False))


# Printable ASCII, no space at either end, at most MAX_ID_CHARS characters: as_id keeps
# such an id as it is and no id rule reports it
_PLAIN_ID = r"[!-~](?:[ -~]{0,%d}[!-~])?" % (MAX_ID_CHARS - 2)


def _plain_ids(distinct: pd.Series, n_cells: int | None = None) -> bool:
    """Whether every one of these distinct ids (text read from a file) is a plain id. Tried
    from COLUMNWISE_FROM cells on (``n_cells``, the column's length; the distinct ids'
    number when not given): the pattern's fixed cost is small beside putting checked ids
    back on every cell (2,000 rater ids on 460,000 rows)."""
    n_cells = len(distinct) if n_cells is None else n_cells
    return (n_cells >= COLUMNWISE_FROM and distinct.dtype == "str"
            and bool(distinct.str.fullmatch(_PLAIN_ID).all()))


def _id_problems(ids: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(empty, holding a control character, longer than MAX_ID_CHARS) for each id."""
    missing = ids.isna().to_numpy()
    odd = (~missing) & ids.str.contains(CONTROL_CHARACTERS, na=False).to_numpy(dtype=bool)
    too_long = (~missing) & (ids.str.len() > MAX_ID_CHARS).to_numpy(dtype=bool)
    return missing, odd, too_long


def check_phases(data: pd.DataFrame, spec: StudySpec, out: Collector) -> pd.DataFrame:
    """Phases: with [phases] order, a phase value not in the order (or empty) is an error."""
    if spec.phase_order is None:
        return data
    data = data.copy(deep=False)
    ph = map_distinct(data[PHASE], as_id)
    bad = ph.isna() | ~ph.isin(spec.phase_order)
    for (fname, value), rows in data.loc[bad].assign(_v=ph[bad].fillna("(empty)")).groupby(
            [FILE, "_v"])[ROW]:
        out.error(f"phase '{value}' in rows {rows_text(rows.tolist())} is not one of "
                  f"[phases] order ({', '.join(spec.phase_order)})", file=fname,
                  column=spec.columns.get("phase"))
    data[PHASE] = ph
    return data


def drop_duplicates(data: pd.DataFrame, out: Collector, id_columns: tuple[str, str] | None = None) -> pd.DataFrame:
    """Rows identical in every column, sequence included, are duplicates: dropped with a
    warning, never taken as a repeat. ``id_columns``: the rater and case columns, whose
    codes the rows carry (PAIR_CODE) when given."""
    original = [c for c in data.columns if not c.startswith("_")] + [PHASE]
    dup = (duplicated_rows(data, original) if id_columns is None
           else _duplicated_within_pairs(data, original, id_columns))
    if not dup.any():
        return data
    if any(data[c].dtype.kind == "f" for c in original):
        raise TextNeeded("rows equal as numbers may differ as written")
    for fname, rows in data.loc[dup].groupby(FILE)[ROW]:
        out.warn(f"{len(rows)} row(s) identical in every column to an earlier row were dropped as "
                 f"duplicates (rows {rows_text(rows.tolist())})", file=fname, kind="duplicate_rows")
    return data.loc[~dup].copy(deep=False)


def duplicated_rows(data: pd.DataFrame, columns: list[str]) -> pd.Series:
    """``data.duplicated(subset=columns)``: each column factorized (missing cells alike), the
    codes folded into one integer per row; the key is renumbered before it could outgrow an
    int64."""
    key, key_values = np.zeros(len(data), dtype=np.int64), 1
    for col in columns:
        if _only_none(data[col]):
            continue   # one value: tells no row apart
        try:
            codes, uniques = pd.factorize(data[col], use_na_sentinel=False)
        except TypeError:   # unhashable cells: pandas' own
            return data.duplicated(subset=columns, keep="first")
        if key_values * (len(uniques) + 1) >= 2 ** 62:
            key, key_values = pd.factorize(key)[0].astype(np.int64), len(data) + 1
        key = key * (len(uniques) + 1) + codes
        key_values *= len(uniques) + 1
    return pd.Series(pd.Series(key).duplicated(keep="first").to_numpy(), index=data.index)


def _duplicated_within_pairs(data: pd.DataFrame, columns: list[str], id_columns: tuple[str, str]) -> pd.Series:
    """:func:`duplicated_rows`, compared only among the rows whose rater and case (PAIR_CODE)
    come more than once: a duplicate row has both, and the repeats are few. There the two id
    columns are told apart by that one code."""
    pair = data[PAIR_CODE].to_numpy()   # below the number of rows: counted directly
    shared = np.flatnonzero(np.bincount(pair)[pair] > 1)
    others = [c for c in columns if c not in id_columns]
    rows = data[others].iloc[shared]
    rows["_pair"] = pair[shared]   # a column name no table column has: they start with no "_"
    dup = np.zeros(len(data), dtype=bool)
    dup[shared] = duplicated_rows(rows, others + ["_pair"]).to_numpy()
    return pd.Series(dup, index=data.index)


def judgment_values(raw: pd.Series, labels: dict[str, float],
                    missing_words: tuple[str, ...] = ()) -> tuple[pd.Series, pd.Series]:
    """Judgments as numbers; words only through [judgment] labels (case and spaces ignored),
    and a label wins over a missing word of the same spelling. Returns (values, mask of
    present judgments)."""
    if raw.dtype.kind == "f" and not labels:   # read as numbers: present where not empty
        return (pd.Series(raw.to_numpy(dtype=float), index=raw.index, name=raw.name),
                pd.Series(raw.notna().to_numpy(), index=raw.index, name=raw.name))
    split = _distinct_cells(raw)
    if split is None:
        return _cells_judgment_values(raw, labels, missing_words)
    codes, distinct = split
    values, present = _cells_judgment_values(distinct, labels, missing_words)
    return _spread(values, codes, raw, np.nan), _spread(present, codes, raw, False)


def _cells_judgment_values(raw: pd.Series, labels: dict[str, float],
                           missing_words: tuple[str, ...]) -> tuple[pd.Series, pd.Series]:
    lookup = {" ".join(k.split()).lower(): v for k, v in labels.items()}
    words = _plain(raw)
    mapped = words.map(lookup) if lookup else pd.Series(np.nan, index=raw.index)
    unlabelled = blank_missing_words(raw.where(mapped.isna()), missing_words)
    present = mapped.notna() | unlabelled.notna()
    numeric = pd.to_numeric(unlabelled, errors="coerce")
    return mapped.astype(float).fillna(numeric.astype(float)), present


def _report_words(data: pd.DataFrame, not_numeric: pd.Series, jcol: str, labels: dict[str, float],
                  out: Collector) -> None:
    """An unmapped word is an error naming its row, with the fix."""
    some_words = [shown(w) for w in data.loc[not_numeric, jcol].astype(str).str.strip().unique()[:3]]
    if labels:
        fix = f"use a number or one of the labels ({', '.join(labels)})"
    else:
        fix = ("use numbers, or map the words to numbers with [judgment] labels, e.g. labels = "
               "{ " + ", ".join(f'{w} = ?' for w in some_words) + " }")
    for _, r in data.loc[not_numeric].head(MAX_ROW_MESSAGES).iterrows():
        out.error(f"judgment '{shown(r[jcol])}' is not a number; {fix}", file=r[FILE], row=int(r[ROW]),
                  column=jcol)
    extra = int(not_numeric.sum()) - MAX_ROW_MESSAGES
    if extra > 0:
        out.error(f"... and {extra} more rows with a judgment that is not a number", column=jcol)


def _scale_text(lo: float | None, hi: float | None) -> str:
    return f"{'' if lo is None else f'{lo:g}'}..{'' if hi is None else f'{hi:g}'}"


def check_judgments(data: pd.DataFrame, spec: StudySpec, out: Collector) -> pd.DataFrame:
    """Judgments: finite numbers within [judgment] min..max; words only through [judgment]
    labels; a binary scale holds 0 and 1. A row without a judgment (empty, or a missing
    word) is dropped and counted. Adds the numeric judgment as ``_judgment``."""
    jcol = spec.columns["judgment"]
    scale = spec.judgment
    values, present = judgment_values(data[jcol], scale.labels, spec.numeric_missing_words)
    not_numeric = present & values.isna()
    if not_numeric.any():
        _report_words(data, not_numeric, jcol, scale.labels, out)
    infinite = non_finite(values)
    for _, r in data.loc[infinite].head(MAX_ROW_MESSAGES).iterrows():
        out.error(f"judgment '{shown(r[jcol])}' {NON_FINITE_FIX}", file=r[FILE], row=int(r[ROW]),
                  column=jcol)
    lo = scale.min if scale.min is not None else -np.inf
    hi = scale.max if scale.max is not None else np.inf
    outside = values.notna() & ~infinite & ((values < lo) | (values > hi))
    for _, r in data.loc[outside].head(MAX_ROW_MESSAGES).iterrows():
        out.error(f"judgment {shown(r[jcol])} lies outside the scale {_scale_text(scale.min, scale.max)}; "
                  "fix the value or the [judgment] min and max", file=r[FILE], row=int(r[ROW]),
                  column=jcol)
    if scale.kind == "binary":
        notbin = values.notna() & ~values.isin([0.0, 1.0])
        for _, r in data.loc[notbin].head(MAX_ROW_MESSAGES).iterrows():
            out.error(f"judgment {shown(r[jcol])} is not 0 or 1 on a binary scale", file=r[FILE],
                      row=int(r[ROW]), column=jcol)
    no_judgment = ~present
    if no_judgment.any():
        for fname, rows in data.loc[no_judgment].groupby(FILE)[ROW]:
            out.warn(f"{len(rows)} row(s) without a judgment were dropped (rows "
                     f"{rows_text(rows.tolist())})", file=fname, column=jcol, kind="no_judgment")
    data = data.copy(deep=False)
    data["_judgment"] = values
    return data if present.all() else data.loc[present].copy(deep=False)


ZONE_SUFFIX = re.compile(r"(?:Z|[+-]\d{2}(?::?\d{2})?|\s*(?:UTC|GMT))$", re.IGNORECASE)


def seconds_since_1970(values: pd.Series) -> pd.Series | None:
    """Date-times as seconds since 1970 (NaN where not a date-time). Zoned times are put on
    one clock (UTC); None when some carry a zone and others not, which has no one clock."""
    text = values.dropna().astype(str).str.strip()
    zoned = text.str.contains(ZONE_SUFFIX) & text.str.contains(r"\d[:T ]\d|\d:\d", regex=True)
    if zoned.any() and not zoned.all():
        return None
    try:
        times = pd.to_datetime(values, errors="coerce", format="mixed", utc=bool(zoned.any()))
    except (ValueError, TypeError, OverflowError):
        return None
    if getattr(times.dt, "tz", None) is not None:
        times = times.dt.tz_convert("UTC").dt.tz_localize(None)
    return (times - pd.Timestamp("1970-01-01")).dt.total_seconds()


def check_sequence(data: pd.DataFrame, columns: dict[str, str], out: Collector,
                   missing_words: tuple[str, ...] = ()) -> pd.DataFrame:
    """A sequence is a finite number (position in the reading order) or a date-time; anything
    else is an error naming its row. Adds ``_sequence`` (NaN when there is no sequence column)."""
    data = data.copy(deep=False)
    if "sequence" not in columns:
        data["_sequence"] = np.nan
        return data
    scol = columns["sequence"]
    seq, bad = to_numbers(data[scol], missing_words)
    bad = bad | non_finite(seq)
    if bad.any() and not seq.notna().any():
        present = blank_missing_words(data[scol], missing_words)
        seconds = seconds_since_1970(present)
        if seconds is None:
            out.error("the sequence date-times mix time zones (some carry one, some not, or "
                      "zones differ); write them all in one zone, or all without a zone",
                      file=data[FILE].iat[0], column=scol)
            data["_sequence"] = np.nan
            return data
        if seconds.notna().any():  # a column of date-times: name only the cells that are not
            seq, bad = seconds, present.notna() & seconds.isna()
    for _, r in data.loc[bad].head(MAX_ROW_MESSAGES).iterrows():
        out.error(f"sequence '{shown(r[scol])}' is neither a finite number nor a date-time", file=r[FILE],
                  row=int(r[ROW]), column=scol)
    data["_sequence"] = seq
    return data


# ----------------------------------------------------------------------------- cases


def index_cases_table(cases_df: pd.DataFrame, data: pd.DataFrame, spec: StudySpec,
                      out: Collector, judged: pd.Series | None = None) -> pd.DataFrame:
    """Cues belong to the case (cases table): every row needs a case id; a case id listed
    twice with different values is an error; every judged case must be in the table.
    Returns the cases table indexed by case id, one row per case. ``judged``: the judgments'
    distinct case ids in order of appearance, when the caller has them."""
    cases_index = cases_by_id(cases_df, spec, out)
    # each distinct judged id looked up once (in order of appearance, as the message lists them)
    judged = pd.Series(data[spec.columns["case"]].unique()) if judged is None else judged
    check_judged_listed(cases_index, judged, spec, out)
    return cases_index


def cases_by_id(cases_df: pd.DataFrame, spec: StudySpec, out: Collector) -> pd.DataFrame:
    """The cases table indexed by case id, one row per case (the first part of
    :func:`index_cases_table`: empty ids and ids listed twice with different values)."""
    ccol = spec.columns["case"]
    case_level = case_level_columns(spec)
    cases_df = cases_df.copy(deep=False)
    split = _distinct_cells(cases_df[ccol])
    plain = split is not None and _plain_ids(split[1], len(cases_df))
    if not plain:
        cases_df[ccol] = map_distinct(cases_df[ccol], as_id)
    empty = cases_df[ccol].isna()
    if empty.any():
        out.error(f"the case id is empty in rows {rows_text(cases_df.loc[empty, ROW].tolist())}",
                  file=spec.cases.name, column=ccol)
        cases_df = cases_df.loc[~empty]
    # plain ids are their own distinct cells: as many as the rows, none is listed twice
    all_distinct = plain and len(split[1]) == len(cases_df)
    dup_ids = cases_df[ccol].duplicated(keep=False) if not all_distinct else None
    if dup_ids is not None and dup_ids.any():
        keep_cols = [c for c in cases_df.columns if c in case_level]
        if any(cases_df[c].dtype.kind == "f" for c in keep_cols):
            raise TextNeeded("a case listed twice: its values are compared as written")
        for cid, grp in cases_df.loc[dup_ids].groupby(ccol):
            if len(grp[keep_cols].drop_duplicates()) > 1:
                out.error(f"case '{cid}' appears in rows {rows_text(grp[ROW].tolist())} with "
                          "different values; cues belong to the case, so keep one row per case",
                          file=spec.cases.name, column=ccol)
        cases_df = cases_df.drop_duplicates(subset=[ccol], keep="first")
    return cases_df.set_index(ccol)


def check_judged_listed(cases_index: pd.DataFrame, judged: pd.Series, spec: StudySpec,
                        out: Collector) -> np.ndarray:
    """Every judged case (``judged``: distinct ids in order of appearance) must be in the
    cases table (the last part of :func:`index_cases_table`). Returns each judged id's row
    of ``cases_index`` (-1 where absent)."""
    place = positions_in(cases_index.index, judged)
    unknown = place < 0
    if unknown.any():
        ids = judged[unknown].to_numpy()
        out.error(f"{len(ids)} case id(s) in the judgments are missing from the cases table: "
                  + ", ".join(map(str, ids[:MAX_LISTED])) + (" ..." if len(ids) > MAX_LISTED else ""),
                  file=spec.cases.name, column=spec.columns["case"])
    return place


def positions_in(keys: pd.Index, wanted) -> np.ndarray:
    """The place of each of ``wanted`` among the distinct ``keys`` (-1 where absent): both
    factorized together, so each value is hashed once (an index of text looks each value up
    far more slowly)."""
    if not keys.is_unique:
        raise ValueError("positions_in needs distinct keys")
    codes = pd.factorize(pd.concat([pd.Series(keys, dtype=keys.dtype), pd.Series(wanted)],
                                   ignore_index=True), use_na_sentinel=True)[0]
    found = codes[len(keys):]
    return np.where(found < len(keys), found, -1).astype(np.intp)


def case_value_from_rows(data: pd.DataFrame, col: str, case_col: str, out: Collector) -> pd.Series:
    """Cues belong to the case (judgment rows): a value repeated on every judgment row must
    be the same on every row of a case; a case whose values differ is an error naming the
    case and the rows. Returns the value of each case (its first row's)."""
    sub = data[[case_col, col, FILE, ROW]]
    norm = sub[col].map(lambda v: None if v is None or (isinstance(v, float) and np.isnan(v))
                        else str(v).strip())
    n_distinct = norm.groupby(sub[case_col]).nunique(dropna=False)
    for cid in n_distinct.index[n_distinct > 1][:MAX_ROW_MESSAGES]:
        rows = sub.loc[sub[case_col] == cid]
        out.error(f"case '{cid}' has different values of '{col}' in rows "
                  f"{rows_text(rows[ROW].tolist())}; cues belong to the case, so a case's value "
                  "must be the same on every row", file=rows[FILE].iat[0], column=col)
    first_rows = sub.drop_duplicates(subset=[case_col], keep="first").set_index(case_col)
    return first_rows[col]


def _case_row(row_of_case: pd.Series, case_file, cid) -> int | None:
    return int(row_of_case[cid]) if case_file is not None and cid in row_of_case.index else None


def _case_file(case_file, cid) -> str | None:
    """The file a case's values were read from: the cases table, or (a Series of file names
    per case) the judgments table of the case's first row."""
    if isinstance(case_file, pd.Series):
        return case_file.get(cid)
    return case_file


def check_numeric_cues(cases: pd.DataFrame, cues: tuple[CueRule, ...], row_of_case: pd.Series,
                       case_file: str | pd.Series | None, out: Collector,
                       missing_words: tuple[str, ...] = ()) -> pd.DataFrame:
    """A numeric cue holds finite numbers or nothing (an empty cell or one of the missing
    words); a word is an error (or declare it categorical), and so is inf or a number too
    large to hold."""
    cases = cases.copy(deep=False)
    for rule in cues:
        if rule.kind != "numeric":
            continue
        vals, bad = to_numbers(cases[rule.name], missing_words)
        for cid in cases.index[bad][:MAX_ROW_MESSAGES]:
            out.error(f"cue value '{shown(cases.at[cid, rule.name])}' of case '{cid}' is not a number; fix it "
                      "or declare the cue categorical", file=_case_file(case_file, cid),
                      row=_case_row(row_of_case, case_file, cid), column=rule.name)
        for cid in cases.index[non_finite(vals)][:MAX_ROW_MESSAGES]:
            out.error(f"cue value '{shown(cases.at[cid, rule.name])}' of case '{cid}' {NON_FINITE_FIX}",
                      file=_case_file(case_file, cid), row=_case_row(row_of_case, case_file, cid),
                      column=rule.name)
        cases[rule.name] = vals
    return cases


def blank_categorical_missing(cases: pd.DataFrame, columns: list[str],
                              missing_words: tuple[str, ...]) -> pd.DataFrame:
    """Categorical cues: only an empty cell is missing, unless the spec lists missing_words;
    so a level written "None" or "NA" stays a level by default."""
    cases = cases.copy(deep=False)
    for col in columns:
        cases[col] = blank_missing_words(cases[col], missing_words)
    return cases


def check_criterion(cases: pd.DataFrame, crit: str, case_file: str | pd.Series | None,
                    out: Collector, missing_words: tuple[str, ...] = (),
                    row_of_case: pd.Series | None = None) -> pd.DataFrame:
    """The criterion holds finite numbers or nothing. A missing criterion only removes that
    case from the lens model (a warning). Adds the numeric criterion as ``__criterion__``."""
    cases = cases.copy(deep=False)
    rows = pd.Series(dtype=float) if row_of_case is None else row_of_case
    vals, bad = to_numbers(cases[crit], missing_words)
    for cid in cases.index[bad][:MAX_ROW_MESSAGES]:
        out.error(f"criterion '{shown(cases.at[cid, crit])}' of case '{cid}' is not a number",
                  file=_case_file(case_file, cid), row=_case_row(rows, case_file, cid), column=crit)
    for cid in cases.index[non_finite(vals)][:MAX_ROW_MESSAGES]:
        out.error(f"criterion '{shown(cases.at[cid, crit])}' of case '{cid}' {NON_FINITE_FIX}",
                  file=_case_file(case_file, cid), row=_case_row(rows, case_file, cid), column=crit)
    cases["__criterion__"] = vals
    n_missing = int(vals.isna().sum())
    if n_missing:
        out.warn(f"the criterion is missing for {n_missing} of {len(vals)} cases; those cases "
                 "leave the lens model only", column=crit, kind="criterion_missing")
    return cases


def check_constant_cue(values: pd.Series, rule: CueRule, out: Collector) -> None:
    """Constant cues are an error: their weight cannot be estimated (an empty cue too)."""
    if values.notna().sum() == 0:
        out.error(f"cue '{rule.name}' has no value in any judged case; fill it in or remove it "
                  "from [cues]", column=rule.name)
    elif values.dropna().nunique() < 2:
        out.error(f"cue '{rule.name}' is constant over the judged cases; its weight cannot be "
                  "estimated. Remove it from [cues]", column=rule.name)


def report_missing_cue(values: pd.Series, rule: CueRule, out: Collector) -> None:
    """A missing cue follows the cue's rule: ``drop`` (the case leaves the policy fits) or
    ``indicator`` (the mean is filled in and a 0/1 missing term is fitted); either way a
    warning counts the cases."""
    n_missing = int(values.isna().sum())
    if not n_missing:
        return
    if rule.missing == "indicator":
        out.warn(f"cue '{rule.name}' is missing for {n_missing} case(s); filled with the mean "
                 "and a 0/1 'missing' term is fitted with it (indicator rule)", column=rule.name,
                 kind="cue_missing")
    else:
        out.warn(f"cue '{rule.name}' is missing for {n_missing} case(s); those cases leave the "
                 "policy fits (drop rule; use missing = \"indicator\" to keep them)",
                 column=rule.name, kind="cue_missing")


def excluded_types(cases: pd.DataFrame, excluded: tuple[str, ...],
                   numeric_words: tuple[str, ...] = (),
                   categorical_words: tuple[str, ...] = ()) -> tuple[pd.DataFrame, dict[str, str]]:
    """An excluded attribute is numeric when every present value is a finite number (and is
    then converted, the numeric missing words read as missing), else categorical (only the
    spec's own missing words read as missing)."""
    cases = cases.copy(deep=False)
    types = {}
    for col in excluded:
        vals, bad = to_numbers(cases[col], numeric_words)
        if bad.any() or non_finite(vals).any():
            types[col] = "categorical"
            cases[col] = blank_missing_words(cases[col], categorical_words)
        else:
            types[col] = "numeric"
            cases[col] = vals
    return cases, types


# ----------------------------------------------------------------------------- raters


def repeat_mode(shown_most: int, asked: str | None) -> str:
    """Which presentations are used: ``asked`` ([judgment] repeats) when the spec gives it,
    else "all" when some case is shown more than twice and "first-two" otherwise (so a study
    with hidden repeats shown twice reads exactly as before the option existed)."""
    if asked is not None:
        return asked
    return "all" if shown_most > 2 else "first-two"


def mark_repeats(data: pd.DataFrame, out: Collector, mode: str | None = "first-two") -> pd.DataFrame:
    """Repeats: within one rater and phase, the first judgment of a case (by sequence, else
    by row order) is the judgment (``_nth`` 0); the second is its repeat (``_nth`` 1). A
    third or later presentation is kept when ``[judgment] repeats`` is "all" (the default
    when some case is shown more than twice) and dropped with "first-two"; either way one
    grouped warning says so, never one per case. Expects ``_rater`` and ``_case`` columns;
    adds ``_nth``, ``_shown`` (presentations of the case to the rater, dropped ones
    included) and ``_position`` (0-based place in the rater's reading order). ``mode``
    None decides by :func:`repeat_mode`; the mode used is in ``data.attrs["repeats"]``."""
    # Sorted by phase, rater, sequence (missing last) and row, as a stable sort of those
    # columns would; the ids as integer codes that sort as the ids do (carried from the id
    # check when the rows have them), so the sort and the counts below are numpy on
    # integers, not pandas on 460,000 strings.
    n = len(data)
    coded = all(c in data.columns for c in (RATER_CODE, CASE_CODE, PAIR_CODE))
    phase = _sorted_codes(data[PHASE])
    rater = data[RATER_CODE].to_numpy() if coded else _sorted_codes(data["_rater"])
    # cases are only told apart, never ordered; with the codes, a rater's case is its pair
    case = data[PAIR_CODE].to_numpy() if coded else _sorted_codes(data["_case"], sort=False)
    sequence = data["_sequence"].to_numpy(dtype=float)
    # rows often come in reading order already: then nothing is sorted and no column taken anew
    if _in_reading_order(phase, rater, sequence):
        order = np.arange(n)
        data = data.copy(deep=False)
    else:
        order = np.lexsort((np.arange(n), sequence, rater, phase))
        data = data.iloc[order].copy(deep=False)
    data["_order"] = order
    phase, rater, case = phase[order], rater[order], case[order]
    reader = phase * (int(rater.max(initial=0)) + 1) + rater            # one code per phase and rater
    # ... and case (the pair code holds the rater already: fewer keys, counted not sorted)
    showing = (phase if coded else reader) * (int(case.max(initial=0)) + 1) + case
    # how often the case was put before the rater in all, counted before later ones are
    # dropped, so that a report can state the true number of presentations
    data["_nth"], data["_shown"] = _cumcount_and_size(showing)
    mode = repeat_mode(int(data["_shown"].max()) if len(data) else 0, mode)
    third = data["_nth"] >= 2
    if third.any():
        _warn_many_presentations(data, third, mode, out)
    if mode == "first-two":
        keep = ~third.to_numpy()
        if not keep.all():
            data, reader = data.loc[keep].copy(deep=False), reader[keep]
    data["_position"] = _cumcount_of_sorted(reader)   # the rows are in reader order
    data.attrs["repeats"] = mode
    return data


def _in_reading_order(phase: np.ndarray, rater: np.ndarray, sequence: np.ndarray) -> bool:
    """Whether the rows are sorted by phase, rater and sequence (missing last) already, so
    that the stable sort of mark_repeats would leave them where they are."""
    if len(phase) < 2:
        return True
    same_phase = phase[1:] == phase[:-1]
    same_reader = same_phase & (rater[1:] == rater[:-1])
    earlier, later = sequence[:-1], sequence[1:]
    in_sequence = (earlier <= later) | np.isnan(later)   # equal or missing: row order decides
    return bool(((phase[1:] > phase[:-1]) | (same_phase & (rater[1:] > rater[:-1]))
                 | (same_reader & in_sequence)).all())


def _only_none(values: pd.Series) -> bool:
    """Whether every cell is None (the phase of a study without phases): hashing None
    460,000 times tells nothing."""
    return values.dtype == object and len(values) > 0 and values.iat[0] is None and bool(values.isna().all())


def _sorted_codes(values: pd.Series, sort: bool = True) -> np.ndarray:
    """One integer per distinct value, in the values' sorted order (with ``sort``), missing
    values last."""
    if _only_none(values):
        return np.zeros(len(values), dtype=np.int64)
    codes, uniques = pd.factorize(values, sort=sort, use_na_sentinel=True)
    codes = codes.astype(np.int64)
    codes[codes < 0] = len(uniques)
    return codes


def _cumcount_and_size(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each row's place among the rows before it with the same key (0, 1, ...), and how many
    rows share its key: both from one stable sort (hashing 460,000 spread-out keys took
    longer than sorting them, measured)."""
    if len(keys) and keys.min() >= 0 and keys.max() < COUNTED_KEYS_PER_ROW * len(keys):
        # keys few enough to count directly (a shared design's rater x case): only the rows
        # whose key comes again are sorted
        size = np.bincount(keys)[keys]
        place = np.zeros(len(keys), dtype=np.int64)
        again = np.flatnonzero(size > 1)
        place[again] = _cumcount(keys[again])
        return place, size
    order = np.argsort(keys, kind="stable")
    ranked = keys[order]
    starts = np.flatnonzero(np.r_[True, ranked[1:] != ranked[:-1]]) if len(keys) else np.zeros(0, int)
    sizes = np.diff(np.r_[starts, len(keys)])
    place, size = np.empty(len(keys), dtype=np.int64), np.empty(len(keys), dtype=np.intp)
    place[order] = np.arange(len(keys)) - np.repeat(starts, sizes)
    size[order] = np.repeat(sizes, sizes)
    return place, size


# Keys below this many per row are counted by bincount (an array that long) instead of sorted
COUNTED_KEYS_PER_ROW = 8


def _cumcount_of_sorted(keys: np.ndarray) -> np.ndarray:
    """:func:`_cumcount` of keys already in order (equal keys side by side)."""
    if not len(keys):
        return np.zeros(0, dtype=np.int64)
    starts = np.flatnonzero(np.r_[True, keys[1:] != keys[:-1]])
    return np.arange(len(keys)) - np.repeat(starts, np.diff(np.r_[starts, len(keys)]))


def _cumcount(keys: np.ndarray) -> np.ndarray:
    """Each row's place among the rows before it with the same key (0, 1, ...)."""
    order = np.argsort(keys, kind="stable")
    ranked = keys[order]
    starts = np.flatnonzero(np.r_[True, ranked[1:] != ranked[:-1]]) if len(keys) else np.zeros(0, int)
    first = np.repeat(starts, np.diff(np.r_[starts, len(keys)]))
    out = np.empty(len(keys), dtype=np.int64)
    out[order] = np.arange(len(keys)) - first
    return out


def _warn_many_presentations(data: pd.DataFrame, third: pd.Series, mode: str, out: Collector) -> None:
    """One warning for every case shown more than twice: how many raters and cases, the
    most presentations, and what was done with the third and later ones."""
    later = data.loc[third]
    pairs = later[[PHASE, "_rater", "_case"]].drop_duplicates()
    n_raters = later["_rater"].nunique()
    most = int(data["_shown"].max())
    where = f"{len(pairs)} rater-case pair(s) ({n_raters} rater(s))"
    if mode == "all":
        out.warn(f"{where} were shown more than twice, up to {most} times; every presentation is "
                 "used ([judgment] repeats = \"all\": the policy on each case's mean judgment, "
                 "consistency over all presentations)", file=later[FILE].iloc[0],
                 kind="every_presentation_used")
    else:
        out.warn(f"{where} were shown more than twice, up to {most} times; the {len(later)} "
                 f"judgment(s) after the second of a case (rows {rows_text(later[ROW].tolist())}) "
                 "were dropped, as "
                 "[judgment] repeats = \"first-two\" asks (only the first and its repeat are used)",
                 file=later[FILE].iloc[0], kind="later_presentations_dropped")


def check_trained(raters: set[str], trained: tuple[str, ...] | None, out: Collector) -> None:
    """Every rater [phases] trained names must have judgments."""
    if trained is None:
        return
    for rater in trained:
        if rater not in raters:
            out.error(f"[phases] trained names rater '{rater}', who has no judgments; check the id")


def too_few_cases(first: pd.DataFrame, complete: pd.Series, n_terms: int, phase_name: str | None,
                  out: Collector, case_rows: np.ndarray | None = None,
                  rater_codes: np.ndarray | None = None) -> tuple[tuple[str, ...], dict[str, int]]:
    """Too few cases: a rater with fewer usable cases (first judgments of cases with complete
    cues) than model terms + 2 is kept out of the policy fits and listed (a warning).
    ``phase_name`` None (a study without phases) names no phase in the warning.
    ``case_rows``: each row's place in ``complete``, when the caller has it (-1 where absent);
    ``rater_codes``: each row's RATER_CODE, when the caller has them.
    Returns (raters fit, {rater kept out: usable cases})."""
    # counted on integer codes: each distinct case looked up once, usable cases per rater by
    # bincount (a first-judgment table has a row per rater and case)
    rater_codes, raters = _raters_in_order(first, rater_codes)
    # each row's case looked up among the design's cases (a case not there counts as usable,
    # as mapping it did)
    where = positions_in(complete.index, first["case"]) if case_rows is None else case_rows
    usable = np.where(where >= 0, complete.to_numpy(dtype=bool)[np.maximum(where, 0)], True)
    counts = np.bincount(rater_codes[usable], minlength=len(raters))
    count_of = dict(zip(raters, counts.tolist()))
    usable = {r: count_of[r] for r in natural_sorted(list(count_of))}
    too_few = {r: int(n) for r, n in usable.items() if n < n_terms + 2}
    for rater, n in too_few.items():
        where = f" in phase '{phase_name}'" if phase_name is not None else ""
        out.warn(f"rater '{rater}' has {n} usable case(s){where}, fewer than the "
                 f"{n_terms + 2} a policy fit needs (cue terms + 2); kept out of policy fits",
                 kind="too_few_cases", rater=str(rater), phase=phase_name)
    fit_raters = tuple(r for r in usable if r not in too_few)
    return fit_raters, too_few


def _raters_in_order(first: pd.DataFrame, rater_codes: np.ndarray | None) -> tuple[np.ndarray, list]:
    """Each row's place among the distinct raters, and those raters in order of appearance
    (as ``pd.factorize`` gives them); from the RATER_CODEs when given, sorting integers
    instead of hashing the ids."""
    if rater_codes is None:
        codes, raters = pd.factorize(first["rater"], use_na_sentinel=False)
        return codes, raters.tolist()
    if not len(rater_codes):
        return np.zeros(0, dtype=np.intp), []
    order = np.argsort(rater_codes, kind="stable")   # the rows come by rater: next to no work
    ranked = rater_codes[order]
    starts = np.flatnonzero(np.r_[True, ranked[1:] != ranked[:-1]])
    first_rows, values = order[starts], ranked[starts]
    appearance = np.argsort(first_rows)
    place_of_code = np.empty(int(values[-1]) + 1, dtype=np.intp)   # codes are at most the raters' count
    place_of_code[values[appearance]] = np.arange(len(values))
    return place_of_code[rater_codes], first["rater"].iloc[first_rows[appearance]].tolist()
