"""The tidy tables as files: CSV bytes with formula-like text escaped, their descriptions,
and the JSON Schema of results.json shipped in the package."""

from __future__ import annotations

import csv
import io
import json
import re
from importlib import resources

import numpy as np
import pandas as pd

from ..data.rules import map_distinct
from ..safe_files import FORMULA_START, escape_formula


def results_schema() -> dict:
    """The JSON Schema of results.json (shipped in the package)."""
    text = resources.files("calibrate.output").joinpath("schemas/results.schema.json").read_text("utf-8")
    return json.loads(text)


def comparison_schema() -> dict:
    """The JSON Schema of comparison.json (shipped in the package)."""
    text = resources.files("calibrate.output").joinpath("schemas/comparison.schema.json").read_text("utf-8")
    return json.loads(text)


_FLOAT_FORMAT = "%.10g"
# A field the csv module might quote holds one of these (QUOTE_MINIMAL: the delimiter, the
# quote character, a line break); any other field is written as it is.
_MAY_NEED_QUOTES = re.compile('[,"\r\n]')


def csv_bytes(frame: pd.DataFrame) -> bytes:
    """A table as UTF-8 CSV; text a spreadsheet would run as a formula is escaped.

    The bytes are those of pandas' ``to_csv`` (:func:`pandas_csv_bytes`, the reference the
    tests hold this to). A table of plain columns (float, whole-number, true/false and text)
    is written here, each column's texts made in bulk and text once per distinct value:
    the tables of a 2,000-rater audit (460,000 rows of reading order) took 2.5 s CPU
    through pandas and 0.6 s here (DEVELOPERS.md, "Speed at scale"). Other tables (nullable
    integers, mixed objects, one column) go through pandas.
    """
    columns = _column_texts(frame) if frame.shape[1] >= 2 else None
    if columns is None:
        return pandas_csv_bytes(frame)
    lines = [",".join(_csv_field(str(c)) for c in frame.columns)]
    lines += map(",".join, zip(*columns))
    lines.append("")
    return "\n".join(lines).encode("utf-8")


def pandas_csv_bytes(frame: pd.DataFrame) -> bytes:
    """A table as UTF-8 CSV written by pandas' ``to_csv``, formula-like text escaped."""
    safe = frame.copy()
    for col in frame.columns:
        values = frame[col]
        if values.dtype == np.float64:
            written = _formatted_repeats(values.to_numpy())
            if written is not None:
                safe[col] = written
            continue
        if not (pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values)):
            continue
        if not _may_hold_formula_text(values):
            continue
        # once per distinct value: a long table repeats its ids (460,000 rows at 2,000 raters)
        present = values.notna()
        safe[col] = map_distinct(values, escape_formula).where(present, values)
    return safe.to_csv(index=False, lineterminator="\n", float_format=_FLOAT_FORMAT).encode("utf-8")


def _csv_field(text: str) -> str:
    """One field as the csv module writes it within a row of several (QUOTE_MINIMAL)."""
    if not _MAY_NEED_QUOTES.search(text):
        return text
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerow([text, ""])
    return buffer.getvalue()[:-2]  # the row is the field, "," and the empty second field, "\n"


def _column_texts(frame: pd.DataFrame) -> list[list[str]] | None:
    """Each column's cells as the CSV writes them, or None when a column is not plain (its
    table is left to pandas)."""
    if not all(type(c) is str for c in frame.columns):
        return None
    out = []
    for _name, values in frame.items():
        texts = _plain_column_texts(values)
        if texts is None:
            return None
        out.append(texts)
    return out


def _plain_column_texts(values: pd.Series) -> list[str] | None:
    """One column's cells as text (formula-like text escaped), or None for a column of
    another kind (nullable integers, mixed objects)."""
    dtype = values.dtype
    if dtype == np.float64:
        data = values.to_numpy()
        written = _formatted_repeats(data)
        if written is not None:
            written[np.isnan(data)] = ""
            return written.tolist()
        return ["" if v != v else _FLOAT_FORMAT % v for v in data.tolist()]
    if isinstance(dtype, np.dtype) and dtype.kind in "iu":
        data = values.to_numpy()
        if len(data) >= 1000:  # positions and counts repeat: each distinct one written once
            codes, distinct = pd.factorize(data)
            if len(distinct) <= len(data) // 10:
                return np.array(list(map(str, distinct.tolist())), dtype=object)[codes].tolist()
        return list(map(str, data.tolist()))
    if isinstance(dtype, np.dtype) and dtype.kind == "b":
        return np.array(["False", "True"], dtype=object)[values.to_numpy().astype(np.intp)].tolist()
    text_column = (isinstance(dtype, pd.StringDtype) or (pd.api.types.is_object_dtype(dtype) and
                   pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty")))
    if not text_column:
        return None
    codes, distinct = pd.factorize(values, use_na_sentinel=True)
    texts = np.empty(len(distinct) + 1, dtype=object)
    texts[:-1] = [_csv_field(escape_formula(t)) for t in distinct.tolist()]
    texts[-1] = ""  # a missing cell (code -1)
    return texts[codes].tolist()


def _formatted_repeats(values: np.ndarray) -> np.ndarray | None:
    """A float column of few distinct values (judgments on a scale) as the text the CSV
    writer would give each (``%.10g``, empty when missing), formatted once per distinct
    value; None when most values differ (the writer formats them as fast). Values are told
    apart by their bits, so -0.0 stays "-0"."""
    if len(values) < 1000:
        return None
    codes, distinct = pd.factorize(values.view(np.int64))
    if len(distinct) > len(values) // 10:
        return None
    texts = np.array([_FLOAT_FORMAT % v for v in distinct.view(np.float64).tolist()], dtype=object)
    written = texts[codes]
    written[np.isnan(values)] = None
    return written


def _may_hold_formula_text(values: pd.Series) -> bool:
    """False when no cell of a text column starts like a formula (one vectorised test); True
    for a column of mixed objects, which is escaped cell by cell."""
    if pd.api.types.is_object_dtype(values.dtype):
        return True
    return bool(values.str.startswith(FORMULA_START).fillna(False).any())


TABLE_DESCRIPTIONS = {
    "raters": "One row per rater and phase: counts, R_s, test-retest r, severity offset, group, flags.",
    "data_summary": "One row per rater and phase: cases, repeats, all judgments, usable cases, "
                    "cases per model term.",
    "policies": "One row per rater and phase: the captured policy's consistency (R_s with its "
                "bootstrap interval, adjusted R^2, cross-validated r) and fit diagnostics.",
    "policy_weights": "One row per rater, phase and model term: raw weight with SE, interval and "
                      "p-value, standardized weight, cue utilization, structure coefficient, VIF.",
    "policy_importance": "One row per rater, phase and cue: relative importance (share and R^2 part) "
                         "with its bootstrap interval.",
    "retest": "One row per rater and phase: test-retest on the hidden repeated cases.",
    "repeat_pairs": "One row per repeated case: the first and the second judgment.",
    "chance_flags": "One row per test behind a tested flag (curvature, cutoff_rule, drift, "
                    "excluded_attribute, low_retest): rater, flag, test, p-value, Holm-adjusted "
                    "p-value across every such test of the phase, flagged.",
    "reading_order": "Every judgment in each rater's reading order (position from 0).",
    "peer_agreement": "One row per rater and phase: correlation with the other readers' mean on "
                      "shared cases, and the mean gap.",
    "severity": "One row per rater and phase: severity offset (positive = more lenient) with SE, "
                "range use and central tendency.",
    "files": "One row per file and phase, ranked by the chance that one more reading changes its side "
             "of the cut-off: raw mean, severity-adjusted score, spread, that chance, and whether it "
             "needs another read (and why).",
    "readers_per_file": "D-study: reliability (relative and absolute) for 1 to 10 readers per file.",
    "agreement": "The six ICC forms with intervals and the method used.",
    "lens": "One row per rater and phase: lens model (r_a, G, C, R_e, R_s) with BCa case-bootstrap "
            "intervals for r_a, G, C and R_e (*_ci_low, *_ci_high), cases per term and the "
            "small-sample caution, and judgment bootstrapping figures.",
    "alignment": "One row per rater and phase: alignment with the rubric.",
    "excluded": "One row per rater, phase and excluded attribute: incremental R^2, test, p-values.",
    "cutoffs": "One row per rater and phase: the best threshold rule on one cue and its test.",
    "drift": "One row per rater and phase: leniency and consistency drift over the reading order.",
    "rater_pairs": "One row per rater pair and phase: interpersonal lens model (r, G, C, R_i, R_j).",
    "grouping": "One row per rater and phase: policy group and the cross-check grouping.",
    "group_merges": "The merge sequence of the policy grouping with the R^2 lost at each step.",
    "groups": "One row per group and phase: pooled policy and stability.",
    "notes": "Every note (warning) from reading and fitting the data, one row each: its kind (a "
             "stable code; the reports print one line per kind), phase, rater and case it concerns, "
             "file, row and column where known, and the text.",
    "group_pairs": "One row per pair of grouped raters and phase: the share of case resamples in "
                   "which the two shared a group (panels of up to 200 grouped raters, or with "
                   "--full-extras).",
}
