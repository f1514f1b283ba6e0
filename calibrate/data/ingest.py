"""Read the judgment tables, check them against the spec, build the JudgmentTable.

Every problem is collected (file, row, column named) before anything stops, so
a user fixes their data in one pass. Errors stop the run; warnings travel into
the results. Inputs are only read, never changed.

Row numbers are the ones a person sees: in a CSV or a worksheet the header is
row 1 and the first data row is row 2.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, DataProblem
from ..safe_files import sha256_of
from .cues import CueDesign, build_cue_design
from .spec import StudySpec, read_spec

_FILE = "_file"
_ROW = "_row"
_PHASE = "_phase"
_MAX_LISTED = 8  # rows listed in one message before "and N more"


@dataclass(frozen=True)
class PhaseData:
    """The judgments of one phase, split by what feeds which analysis.

    first:    one row per (rater, case): rater, case, judgment, sequence, file, row.
              Feeds policy fits, lens model, agreement, severity and grouping.
    repeats:  test-retest pairs: rater, case, first, second.
    ordered:  every kept judgment in each rater's reading order: rater, case,
              judgment, position (0-based), sequence. Feeds drift.
    fit_raters: raters with enough usable cases for a policy fit (cues + 2 or more).
    too_few:  raters kept out of policy fits, with their usable case counts.
    """

    name: str | None
    first: pd.DataFrame
    repeats: pd.DataFrame
    ordered: pd.DataFrame
    fit_raters: tuple[str, ...]
    too_few: dict[str, int]

    @property
    def raters(self) -> tuple[str, ...]:
        return tuple(sorted(self.first["rater"].unique(), key=_natural_key))

    @property
    def label(self) -> str:
        return "null" if self.name is None else self.name


@dataclass(frozen=True)
class JudgmentTable:
    """Validated, typed study data. Build it with :func:`load_study`."""

    spec: StudySpec
    cases: pd.DataFrame  # index: case id; cue columns, criterion, excluded attributes
    design: CueDesign
    phases: tuple[PhaseData, ...]
    warnings: tuple[DataProblem, ...] = ()
    inputs: tuple[dict, ...] = ()
    counts: dict = field(default_factory=dict)

    def phase(self, name: str | None) -> PhaseData:
        for p in self.phases:
            if p.name == name:
                return p
        raise KeyError(name)

    @property
    def criterion(self) -> pd.Series | None:
        col = self.spec.role("criterion")
        return None if col is None else self.cases["__criterion__"]


def _natural_key(text: str):
    """Sort 'r2' before 'r10'."""
    import re

    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", str(text))]


# ----------------------------------------------------------------------------- reading


def read_table(path: Path) -> pd.DataFrame:
    """Read a CSV (delimiter sniffed, UTF-8 with or without BOM), XLSX or Parquet file.

    Values are kept as read (text for CSV) so that conversion problems can be
    reported row by row. Adds the spreadsheet row number as ``_row``.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix in (".xlsx", ".xlsm"):
        df = pd.read_excel(path, dtype=object, engine="openpyxl")
    elif suffix == ".parquet":
        try:
            df = pd.read_parquet(path)
        except ImportError:
            raise DataError([DataProblem(
                "reading Parquet needs pyarrow; install it with pip install 'rater-calibrate[parquet]'",
                file=path.name)]) from None
    else:
        try:
            with open(path, encoding="utf-8-sig", newline="") as fh:
                sample = fh.read(64 * 1024)
        except UnicodeDecodeError:
            raise DataError([DataProblem("the file is not UTF-8 text; save it as UTF-8 CSV",
                                         file=path.name)]) from None
        try:
            dialect = csv.Sniffer().sniff(sample, delimiters=",;\t|")
            sep = dialect.delimiter
        except csv.Error:
            sep = ","
        try:
            df = pd.read_csv(path, sep=sep, dtype=str, encoding="utf-8-sig",
                             keep_default_na=True, skipinitialspace=True)
        except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
            raise DataError([DataProblem(f"the table cannot be read: {exc}", file=path.name)]) from None
    df.columns = [str(c).strip() for c in df.columns]
    df[_ROW] = np.arange(len(df)) + 2
    return df


def _as_id(value) -> str | None:
    """Ids as text; a float that is a whole number (from a spreadsheet) loses its '.0'."""
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return None
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    text = str(value).strip()
    return text or None


def _rows_text(rows: list[int]) -> str:
    rows = sorted(rows)
    shown = ", ".join(str(r) for r in rows[:_MAX_LISTED])
    return shown + (f" and {len(rows) - _MAX_LISTED} more" if len(rows) > _MAX_LISTED else "")


class _Collector:
    def __init__(self) -> None:
        self.items: list[DataProblem] = []

    def error(self, message: str, *, file=None, row=None, column=None) -> None:
        self.items.append(DataProblem(message, file=file, row=row, column=column))

    def warn(self, message: str, *, file=None, row=None, column=None) -> None:
        self.items.append(DataProblem(message, file=file, row=row, column=column, severity="warning"))

    @property
    def errors(self) -> list[DataProblem]:
        return [p for p in self.items if p.severity == "error"]

    @property
    def warnings(self) -> list[DataProblem]:
        return [p for p in self.items if p.severity == "warning"]


def _numeric(series: pd.Series) -> tuple[pd.Series, pd.Series]:
    """Convert to float; return (values, mask of present-but-not-numeric)."""
    present = series.notna() & (series.astype(str).str.strip() != "")
    values = pd.to_numeric(series.where(present), errors="coerce")
    return values.astype(float), present & values.isna()


# ----------------------------------------------------------------------------- main


def load_study(spec: StudySpec | str | Path) -> JudgmentTable:
    """Read and validate a study: the spec (a path or a StudySpec) and its tables.

    Raises
    ------
    SpecError
        the spec is malformed.
    DataError
        listing every data problem (file, row, column); warnings are not raised
        but kept in ``JudgmentTable.warnings``.
    """
    table, problems = inspect_study(spec)
    if table is None:
        raise DataError([p for p in problems if p.severity == "error"])
    return table


def inspect_study(spec: StudySpec | str | Path) -> tuple[JudgmentTable | None, list[DataProblem]]:
    """Like :func:`load_study` but returns ``(table or None, every problem)`` for ``check``."""
    if not isinstance(spec, StudySpec):
        spec = read_spec(spec)
    out = _Collector()
    table = _build(spec, out)
    if out.errors:
        return None, out.items
    return table, out.items


def _build(spec: StudySpec, out: _Collector) -> JudgmentTable | None:
    cols = spec.columns
    cue_names = list(spec.cue_names)
    case_level = cue_names + list(spec.excluded) + ([cols["criterion"]] if "criterion" in cols else [])

    # --- read every judgments table
    frames = []
    inputs = []
    for source in spec.data:
        if not source.path.is_file():
            out.error(f"the judgments table {source.path} does not exist; fix [study] data in the spec",
                      file=source.path.name)
            continue
        df = read_table(source.path)
        inputs.append({"path": source.path.name, "sha256": sha256_of(source.path)})
        df[_FILE] = source.path.name
        if source.phase is not None:
            df[_PHASE] = source.phase
        frames.append(df)
    cases_df = None
    if spec.cases is not None:
        if not spec.cases.is_file():
            out.error(f"the cases table {spec.cases} does not exist; fix [study] cases in the spec",
                      file=spec.cases.name)
        else:
            cases_df = read_table(spec.cases)
            inputs.append({"path": spec.cases.name, "sha256": sha256_of(spec.cases)})
    if not frames:
        return None

    # --- every role column must exist
    for df in frames:
        fname = df[_FILE].iat[0] if len(df) else "the judgments table"
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
    for col in case_level:
        in_cases = cases_df is not None and col in cases_df.columns
        in_judg = all(col in df.columns for df in frames)
        if not in_cases and not in_judg:
            where = "the judgments table" + (" or the cases table" if cases_df is not None else "")
            role = ("cue" if col in cue_names else "excluded attribute" if col in spec.excluded
                    else "criterion")
            out.error(f"column '{col}' ({role}) not found in {where}; add it or fix the spec",
                      file=frames[0][_FILE].iat[0], column=col)
    if out.errors:
        return None

    data = pd.concat(frames, ignore_index=True, sort=False)
    if "phase" in cols:
        data[_PHASE] = data[cols["phase"]]
    if _PHASE not in data.columns:
        data[_PHASE] = None

    # --- ids
    for role in ("rater", "case"):
        col = cols[role]
        ids = data[col].map(_as_id)
        missing = ids.isna()
        for fname, rows in data.loc[missing].groupby(_FILE)[_ROW]:
            out.error(f"the {role} id is empty in rows {_rows_text(rows.tolist())}; every judgment "
                      f"needs a {role}", file=fname, column=col)
        data[col] = ids

    # --- phases
    if spec.phase_order is not None:
        ph = data[_PHASE].map(_as_id)
        bad = ph.isna() | ~ph.isin(spec.phase_order)
        for (fname, value), rows in data.loc[bad].assign(_v=ph[bad].fillna("(empty)")).groupby(
                [_FILE, "_v"])[_ROW]:
            out.error(f"phase '{value}' in rows {_rows_text(rows.tolist())} is not one of "
                      f"[phases] order ({', '.join(spec.phase_order)})", file=fname,
                      column=cols.get("phase"))
        data[_PHASE] = ph

    # --- exact duplicates (every original column, sequence included): dropped, never repeats
    original = [c for c in data.columns if not c.startswith("_")] + [_PHASE]
    dup = data.duplicated(subset=original, keep="first")
    if dup.any():
        for fname, rows in data.loc[dup].groupby(_FILE)[_ROW]:
            out.warn(f"{len(rows)} row(s) identical in every column to an earlier row were dropped as "
                     f"duplicates (rows {_rows_text(rows.tolist())})", file=fname)
        data = data.loc[~dup].copy()

    # --- judgments
    jcol = cols["judgment"]
    scale = spec.judgment
    raw = data[jcol]
    present = raw.notna() & (raw.astype(str).str.strip() != "")
    if scale.labels:
        lookup = {k.strip().lower(): v for k, v in scale.labels.items()}
        words = raw.astype(str).str.strip().str.lower()
        mapped = words.map(lookup)
        numeric = pd.to_numeric(raw.where(present & mapped.isna()), errors="coerce")
        values = mapped.astype(float).fillna(numeric)
    else:
        values = pd.to_numeric(raw.where(present), errors="coerce").astype(float)
    not_numeric = present & values.isna()
    if not_numeric.any():
        some_words = raw[not_numeric].astype(str).str.strip().unique()[:3]
        if scale.labels:
            fix = f"use a number or one of the labels ({', '.join(scale.labels)})"
        else:
            fix = ("use numbers, or map the words to numbers with [judgment] labels, e.g. labels = "
                   "{ " + ", ".join(f'{w} = ?' for w in some_words) + " }")
        for _, r in data.loc[not_numeric].head(50).iterrows():
            out.error(f"judgment '{r[jcol]}' is not a number; {fix}", file=r[_FILE], row=int(r[_ROW]),
                      column=jcol)
        extra = int(not_numeric.sum()) - 50
        if extra > 0:
            out.error(f"... and {extra} more rows with a judgment that is not a number", column=jcol)
    lo = scale.min if scale.min is not None else -np.inf
    hi = scale.max if scale.max is not None else np.inf
    outside = values.notna() & ((values < lo) | (values > hi))
    for _, r in data.loc[outside].head(50).iterrows():
        out.error(f"judgment {r[jcol]} lies outside the scale {scale.min:g}..{scale.max:g}; fix the "
                  "value or the [judgment] min and max", file=r[_FILE], row=int(r[_ROW]), column=jcol)
    if scale.kind == "binary":
        notbin = values.notna() & ~values.isin([0.0, 1.0])
        for _, r in data.loc[notbin].head(50).iterrows():
            out.error(f"judgment {r[jcol]} is not 0 or 1 on a binary scale", file=r[_FILE],
                      row=int(r[_ROW]), column=jcol)
    no_judgment = ~present
    if no_judgment.any():
        for fname, rows in data.loc[no_judgment].groupby(_FILE)[_ROW]:
            out.warn(f"{len(rows)} row(s) without a judgment were dropped (rows "
                     f"{_rows_text(rows.tolist())})", file=fname, column=jcol)
    data["_judgment"] = values
    data = data.loc[present].copy()

    # --- sequence
    if "sequence" in cols:
        scol = cols["sequence"]
        seq, bad = _numeric(data[scol])
        if bad.any():
            as_time = pd.to_datetime(data.loc[bad, scol], errors="coerce", format="mixed")
            if as_time.notna().all() and not seq.notna().any():
                all_time = pd.to_datetime(data[scol], errors="coerce", format="mixed")
                seq = (all_time - pd.Timestamp("1970-01-01")).dt.total_seconds()
                bad = data[scol].notna() & seq.isna()
        for _, r in data.loc[bad].head(50).iterrows():
            out.error(f"sequence '{r[scol]}' is neither a number nor a date-time", file=r[_FILE],
                      row=int(r[_ROW]), column=scol)
        data["_sequence"] = seq
    else:
        data["_sequence"] = np.nan

    # --- case-level values: from the cases table, else from the judgments (must agree per case)
    ccol = cols["case"]
    case_values: dict[str, pd.Series] = {}
    cases_index = None
    if cases_df is not None:
        cases_df = cases_df.copy()
        cases_df[ccol] = cases_df[ccol].map(_as_id)
        empty = cases_df[ccol].isna()
        if empty.any():
            out.error(f"the case id is empty in rows {_rows_text(cases_df.loc[empty, _ROW].tolist())}",
                      file=spec.cases.name, column=ccol)
        cases_df = cases_df.loc[~empty]
        dup_ids = cases_df[ccol].duplicated(keep=False)
        if dup_ids.any():
            keep_cols = [c for c in cases_df.columns if c in case_level]
            for cid, grp in cases_df.loc[dup_ids].groupby(ccol):
                if len(grp[keep_cols].drop_duplicates()) > 1:
                    out.error(f"case '{cid}' appears in rows {_rows_text(grp[_ROW].tolist())} with "
                              "different values; cues belong to the case, so keep one row per case",
                              file=spec.cases.name, column=ccol)
            cases_df = cases_df.drop_duplicates(subset=[ccol], keep="first")
        cases_index = cases_df.set_index(ccol)
        unknown = ~data[ccol].isin(cases_index.index)
        if unknown.any():
            ids = data.loc[unknown, ccol].unique()
            out.error(f"{len(ids)} case id(s) in the judgments are missing from the cases table: "
                      + ", ".join(map(str, ids[:_MAX_LISTED])) + (" ..." if len(ids) > _MAX_LISTED else ""),
                      file=spec.cases.name, column=ccol)
    for col in case_level:
        if cases_index is not None and col in cases_index.columns:
            case_values[col] = cases_index[col]
            continue
        # values repeated on every judgment row must agree within a case
        sub = data[[ccol, col, _FILE, _ROW]]
        norm = sub[col].map(lambda v: None if v is None or (isinstance(v, float) and np.isnan(v))
                            else str(v).strip())
        n_distinct = norm.groupby(sub[ccol]).nunique(dropna=False)
        for cid in n_distinct.index[n_distinct > 1][:50]:
            rows = sub.loc[sub[ccol] == cid]
            out.error(f"case '{cid}' has different values of '{col}' in rows "
                      f"{_rows_text(rows[_ROW].tolist())}; cues belong to the case, so a case's value "
                      "must be the same on every row", file=rows[_FILE].iat[0], column=col)
        first_rows = sub.drop_duplicates(subset=[ccol], keep="first").set_index(ccol)
        case_values[col] = first_rows[col]
    used_cases = pd.Index(sorted(data[ccol].dropna().unique(), key=_natural_key), name="case")
    cases = pd.DataFrame(index=used_cases)
    for col, series in case_values.items():
        cases[col] = series.reindex(used_cases)
    row_of_case = (cases_index[_ROW] if cases_index is not None
                   else data.drop_duplicates(ccol).set_index(ccol)[_ROW]).reindex(used_cases)
    case_file = spec.cases.name if cases_index is not None else None

    # --- numeric cues, criterion: numbers or nothing
    for rule in spec.cues:
        if rule.kind != "numeric":
            continue
        vals, bad = _numeric(cases[rule.name])
        for cid in cases.index[bad][:50]:
            out.error(f"cue value '{cases.at[cid, rule.name]}' of case '{cid}' is not a number; fix it "
                      "or declare the cue categorical", file=case_file, row=int(row_of_case[cid])
                      if case_file else None, column=rule.name)
        cases[rule.name] = vals
    if "criterion" in cols:
        crit = cols["criterion"]
        vals, bad = _numeric(cases[crit])
        for cid in cases.index[bad][:50]:
            out.error(f"criterion '{cases.at[cid, crit]}' of case '{cid}' is not a number",
                      file=case_file, column=crit)
        cases["__criterion__"] = vals
        n_missing = int(vals.isna().sum())
        if n_missing:
            out.warn(f"the criterion is missing for {n_missing} of {len(vals)} cases; those cases "
                     "leave the lens model only", column=crit)
    if out.errors:
        return None

    # --- cue checks: constant cues, missing values by rule
    for rule in spec.cues:
        series = cases[rule.name]
        n_missing = int(series.isna().sum())
        if series.dropna().nunique() < 2:
            out.error(f"cue '{rule.name}' is constant over the judged cases; its weight cannot be "
                      "estimated. Remove it from [cues]", column=rule.name)
        if n_missing:
            if rule.missing == "indicator":
                out.warn(f"cue '{rule.name}' is missing for {n_missing} case(s); filled with the mean "
                         "and a 0/1 'missing' term is fitted with it (indicator rule)", column=rule.name)
            else:
                out.warn(f"cue '{rule.name}' is missing for {n_missing} case(s); those cases leave the "
                         "policy fits (drop rule; use missing = \"indicator\" to keep them)",
                         column=rule.name)
    if out.errors:
        return None
    design = build_cue_design(cases, list(spec.cues))
    complete = pd.Series(design.complete_rows(), index=list(design.case_ids))

    # --- order, repeats and third judgments per (phase, rater)
    data["_order"] = np.arange(len(data))
    data = data.rename(columns={cols["rater"]: "_rater", ccol: "_case"})
    sort_cols = [_PHASE, "_rater", "_sequence", "_order"]
    data = data.sort_values(sort_cols, kind="mergesort", na_position="last")
    data["_nth"] = data.groupby([_PHASE, "_rater", "_case"], dropna=False).cumcount()
    third = data["_nth"] >= 2
    for _, grp in data.loc[third].groupby([_PHASE, "_rater", "_case"], dropna=False):
        r = grp.iloc[0]
        phase_txt = f" in phase '{r[_PHASE]}'" if r[_PHASE] is not None else ""
        out.warn(f"rater '{r['_rater']}' judged case '{r['_case']}' more than twice{phase_txt}; "
                 f"the judgments in rows {_rows_text(grp[_ROW].tolist())} were dropped (only the first "
                 "and its repeat are used)", file=r[_FILE])
    data = data.loc[~third].copy()
    data["_position"] = data.groupby([_PHASE, "_rater"], dropna=False).cumcount()

    if spec.trained is not None:
        known = set(data["_rater"])
        for rater in spec.trained:
            if rater not in known:
                out.error(f"[phases] trained names rater '{rater}', who has no judgments; check the id")
    if out.errors:
        return None

    p = design.n_columns
    phase_names: list[str | None] = list(spec.phase_order) if spec.phase_order else [None]
    phases = []
    for name in phase_names:
        sub = data if name is None else data.loc[data[_PHASE] == name]
        if sub.empty:
            out.warn(f"phase '{name}' has no judgments")
        firsts = sub.loc[sub["_nth"] == 0]
        first = pd.DataFrame({
            "rater": firsts["_rater"].to_numpy(),
            "case": firsts["_case"].to_numpy(),
            "judgment": firsts["_judgment"].to_numpy(dtype=float),
            "sequence": firsts["_sequence"].to_numpy(dtype=float),
            "file": firsts[_FILE].to_numpy(),
            "row": firsts[_ROW].to_numpy(dtype=int),
        })
        seconds = sub.loc[sub["_nth"] == 1, ["_rater", "_case", "_judgment"]]
        repeats = firsts[["_rater", "_case", "_judgment"]].merge(
            seconds, on=["_rater", "_case"], suffixes=("_first", "_second"))
        repeats = pd.DataFrame({
            "rater": repeats["_rater"].to_numpy(),
            "case": repeats["_case"].to_numpy(),
            "first": repeats["_judgment_first"].to_numpy(dtype=float),
            "second": repeats["_judgment_second"].to_numpy(dtype=float),
        })
        ordered = pd.DataFrame({
            "rater": sub["_rater"].to_numpy(),
            "case": sub["_case"].to_numpy(),
            "judgment": sub["_judgment"].to_numpy(dtype=float),
            "position": sub["_position"].to_numpy(dtype=int),
            "sequence": sub["_sequence"].to_numpy(dtype=float),
        })
        usable = first.loc[first["case"].map(complete).to_numpy(dtype=bool)].groupby("rater").size()
        usable = usable.reindex(sorted(first["rater"].unique(), key=_natural_key), fill_value=0)
        too_few = {r: int(n) for r, n in usable.items() if n < p + 2}
        label = "null" if name is None else name
        for rater, n in too_few.items():
            out.warn(f"rater '{rater}' has {n} usable case(s) in phase '{label}', fewer than the "
                     f"{p + 2} a policy fit needs (cue terms + 2); kept out of policy fits")
        fit_raters = tuple(r for r in usable.index if r not in too_few)
        phases.append(PhaseData(name=name, first=first, repeats=repeats, ordered=ordered,
                                fit_raters=fit_raters, too_few=too_few))

    excluded_types = {}
    for col in spec.excluded:
        vals, bad = _numeric(cases[col])
        if bad.any():
            excluded_types[col] = "categorical"
        else:
            excluded_types[col] = "numeric"
            cases[col] = vals
    counts = {"excluded_types": excluded_types}
    return JudgmentTable(spec=spec, cases=cases, design=design, phases=tuple(phases),
                         warnings=tuple(out.warnings), inputs=tuple(inputs), counts=counts)
