"""The notebook's way in: a spec built in Python and tables passed as DataFrames.

A DataFrame goes through the same door as a file: it is turned into the grid a file
reader gives (header row, then every cell as it stands, the caller's index left out),
and from there the same rules of :mod:`calibrate.data.rules` apply, row numbers and all.
The caller's DataFrame is never changed: the grid is a new object built from a copy.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path

import pandas as pd

from ..errors import CalibrateError
from .spec import DataSource, StudySpec, parse_spec, read_spec

#: How a DataFrame is named in messages and in results.json's inputs (where a file's name goes).
DATA_NAME = "data DataFrame"
CASES_NAME = "cases DataFrame"


@dataclass(frozen=True)
class GivenTables:
    """Tables a caller passed in place of the spec's files: (name, phase, grid) per judgments table."""

    data: tuple[tuple[str, str | None, pd.DataFrame], ...] = ()
    cases: pd.DataFrame | None = None

    @property
    def any(self) -> bool:
        return bool(self.data) or self.cases is not None


def _grid(frame, what: str) -> pd.DataFrame:
    """The DataFrame as a file reader's grid: the header as row 0, then the cells as objects."""
    if not isinstance(frame, pd.DataFrame):
        raise CalibrateError(f"{what} must be a pandas DataFrame (one row per judgment for data, one "
                             f"row per case for cases); got {type(frame).__name__}. Read a file with "
                             "pandas.read_csv first, or give its path in the spec instead.")
    if isinstance(frame.columns, pd.MultiIndex):
        raise CalibrateError(f"{what} has columns on several levels (a MultiIndex); flatten them to one "
                             "name a column, for example with frame.columns = ['_'.join(c) for c in "
                             "frame.columns].")
    if frame.shape[0] == 0 or frame.shape[1] == 0:
        raise CalibrateError(f"{what} is empty; it needs named columns and rows of data.")
    header = pd.DataFrame([[str(c) for c in frame.columns]], columns=range(frame.shape[1]))
    cells = pd.DataFrame(frame.to_numpy(dtype=object, copy=True), columns=range(frame.shape[1]))
    cells = cells.where(pd.notna(cells), None)   # NaN, NaT and pd.NA all read as an empty cell
    return pd.concat([header, cells], ignore_index=True)


def given_tables(data=None, cases=None) -> GivenTables:
    """Check what the caller passed: ``data`` a DataFrame or {phase: DataFrame}, ``cases`` a DataFrame."""
    tables: list[tuple[str, str | None, pd.DataFrame]] = []
    if isinstance(data, Mapping):
        if not data:
            raise CalibrateError("data is an empty mapping; give one DataFrame, or {phase: DataFrame} "
                                 "with one table per phase.")
        for phase, frame in data.items():
            name = f"{DATA_NAME} '{phase}'"
            tables.append((name, str(phase), _grid(frame, name)))
    elif data is not None:
        tables.append((DATA_NAME, None, _grid(data, "data")))
    return GivenTables(data=tuple(tables), cases=None if cases is None else _grid(cases, "cases"))


def grid_sha256(grid: pd.DataFrame) -> str:
    """A fingerprint of a DataFrame's cells for results.json's inputs (same cells, same hash)."""
    text = grid.to_csv(index=False, header=False, lineterminator="\n")
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def study_spec(spec, given: GivenTables) -> StudySpec:
    """A StudySpec from a path, a StudySpec or a dict; passed tables take the place of the files.

    A dict is the TOML document as Python (``{"study": {...}, "columns": {...}, ...}``),
    paths in it relative to the working folder; with ``data=`` given it may leave out
    ``[study] data``.
    """
    if isinstance(spec, Mapping):
        doc = {key: dict(value) if isinstance(value, Mapping) else value for key, value in spec.items()}
        if given.data and isinstance(doc.get("study"), dict) and "data" not in doc["study"]:
            # replaced below by the tables themselves; parse_spec wants a source (and its phases)
            doc["study"]["data"] = [{"path": name, "phase": phase} if phase is not None else name
                                    for name, phase, _ in given.data]
        spec = parse_spec(doc, base_dir=Path.cwd())
    elif isinstance(spec, (str, Path)):
        spec = read_spec(spec)
    elif not isinstance(spec, StudySpec):
        raise CalibrateError(f"The study spec must be a path to a study.toml, a dict of its tables or a "
                             f"StudySpec; got {type(spec).__name__}.")
    if not given.any:
        return spec
    changes = {}
    if given.data:
        phased = [phase for _, phase, _ in given.data if phase is not None]
        if phased and spec.phase_order is None:
            raise CalibrateError("data holds one DataFrame per phase, but the spec has no [phases] "
                                 "order; add [phases] order = [...] naming "
                                 + ", ".join(repr(p) for p in phased) + ".")
        if phased and "phase" in spec.columns:
            raise CalibrateError("give phases either as a phase column or as one DataFrame per phase, "
                                 "not both.")
        if not phased and any(d.phase is not None for d in spec.data) and "phase" not in spec.columns:
            raise CalibrateError("the spec gives a phase per data table; pass data as {phase: DataFrame} "
                                 "(one table per phase), or name a phase column in [columns].")
        changes["data"] = tuple(DataSource(path=Path(name), phase=phase) for name, phase, _ in given.data)
    if given.cases is not None:
        changes["cases"] = Path(CASES_NAME)
    return replace(spec, **changes)
