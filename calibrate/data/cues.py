"""The cue design: the matrix of predictors every rater's policy is fitted on.

Cues belong to the case, so there is one design row per case, shared by every
rater who judged it. Numeric cues enter as they are; a categorical cue becomes
dummy columns named ``cue=level`` with the most frequent level as reference; a
numeric cue with ``missing = "indicator"`` is mean-filled and gets a 0/1 column
``cue:missing`` that belongs to the same cue.

The coding (which columns exist, each categorical cue's reference level, whether a
cue has a ``:missing`` column) is fixed once over every case of the study, on
purpose, so that every phase is fitted on the same terms and phases can be
compared. The fill value is an estimate and belongs to a phase:
:meth:`CueDesign.for_cases` recomputes it on the phase's own cases.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ..result_base import ResultMixin


@dataclass(frozen=True)
class CueRule:
    """How one cue enters the design."""

    name: str
    kind: str = "numeric"      # "numeric" | "categorical"
    missing: str = "drop"      # "drop" | "indicator"


@dataclass(frozen=True)
class CueDesign(ResultMixin):
    """Design matrix over cases.

    Attributes
    ----------
    case_ids : tuple of case ids (str), one per row of ``matrix``.
    matrix : (n_cases, p) float array; NaN marks a row that a ``drop`` rule removes.
    columns : names of the p design columns.
    cue_of_column : for each design column, the cue it belongs to.
    cues : cue names in spec order.
    kinds : cue -> "numeric" | "categorical".
    reference_levels : categorical cue -> its reference level.
    missing_rules : cue -> "drop" | "indicator" (how a missing value is handled).
    fill_values : numeric cue with the indicator rule -> the mean that fills a missing value,
        over the cases of ``case_ids`` (the whole study from :func:`build_cue_design`, one
        phase's cases from :meth:`for_cases`).
    """

    case_ids: tuple[str, ...]
    matrix: np.ndarray = field(repr=False)
    columns: tuple[str, ...]
    cue_of_column: tuple[str, ...]
    cues: tuple[str, ...]
    kinds: dict[str, str]
    reference_levels: dict[str, str]
    missing_rules: dict[str, str] = field(default_factory=dict)
    fill_values: dict[str, float] = field(default_factory=dict)

    @property
    def n_columns(self) -> int:
        return len(self.columns)

    def columns_of(self, cue: str) -> list[int]:
        """Indices of the design columns that belong to ``cue``."""
        return [i for i, c in enumerate(self.cue_of_column) if c == cue]

    def cue_groups(self) -> list[list[int]]:
        """Design-column indices per cue, in cue order (a categorical cue's dummies together)."""
        return [self.columns_of(c) for c in self.cues]

    def row_of(self, case_ids) -> np.ndarray:
        """Row index in ``matrix`` for each case id (KeyError on an unknown id)."""
        index = {c: i for i, c in enumerate(self.case_ids)}
        return np.array([index[c] for c in case_ids], dtype=np.intp)

    def complete_rows(self) -> np.ndarray:
        """Boolean per case: True where every design column is present."""
        return ~np.isnan(self.matrix).any(axis=1)

    def for_cases(self, case_ids) -> CueDesign:
        """The same coding restricted to ``case_ids`` (kept in design order), mean fills redone.

        A mean-filled cue's fill value becomes the mean of its known values among these
        cases only (0.0 when none is known, as in :func:`build_cue_design`). The known
        values are read back from the matrix: a row whose ``cue:missing`` column is 0
        holds the cue's own value. The columns and reference levels do not change.
        """
        # the ids out of a column in one conversion (iterating a text column is slow)
        columnar = (pd.Series, pd.Index, np.ndarray, pd.api.extensions.ExtensionArray)
        given = (pd.Series(case_ids, dtype=object).tolist() if isinstance(case_ids, columnar)
                 else list(case_ids))
        wanted = set(map(str, given))
        keep = np.fromiter((c in wanted for c in self.case_ids), dtype=bool, count=len(self.case_ids))
        matrix = self.matrix[keep].copy()
        fills = dict(self.fill_values)
        for cue in self.fill_values:
            cols = self.columns_of(cue)
            value_col = cols[0]
            flag = [j for j in cols if self.columns[j].endswith(":missing")]
            missing = matrix[:, flag[0]] == 1.0 if flag else np.zeros(len(matrix), dtype=bool)
            known = matrix[~missing, value_col]
            fills[cue] = float(known.mean()) if known.size else 0.0
            matrix[missing, value_col] = fills[cue]
        return replace(self, case_ids=tuple(np.asarray(self.case_ids, dtype=object)[keep]),
                       matrix=matrix, fill_values=fills)

    def to_dict(self) -> dict:
        return {
            "columns": list(self.columns),
            "cue_of_column": list(self.cue_of_column),
            "cues": list(self.cues),
            "kinds": dict(self.kinds),
            "reference_levels": dict(self.reference_levels),
            "missing_rules": dict(self.missing_rules),
            "fill_values": dict(self.fill_values),
            "n_cases": len(self.case_ids),
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(self.matrix, index=pd.Index(self.case_ids, name="case"),
                            columns=list(self.columns))


def build_cue_design(cases: pd.DataFrame, rules: list[CueRule]) -> CueDesign:
    """Build the design from a cases table (index = case id, one column per cue).

    Categorical levels are compared as strings; the reference level is the most
    frequent one (ties broken by sort order, so the result is deterministic).
    """
    blocks: list[np.ndarray] = []
    columns: list[str] = []
    owner: list[str] = []
    refs: dict[str, str] = {}
    kinds: dict[str, str] = {}
    fills: dict[str, float] = {}
    for rule in rules:
        kinds[rule.name] = rule.kind
        raw = cases[rule.name]
        if rule.kind == "categorical":
            present = raw.notna()
            values = raw.astype("string")
            counts = values[present].value_counts()
            levels = sorted(counts.index.tolist(), key=lambda lv: (-counts[lv], str(lv)))
            if not levels:
                continue
            refs[rule.name] = str(levels[0])
            for level in sorted(levels[1:], key=str):
                col = np.where(present, (values == level).fillna(False).astype(float), np.nan)
                blocks.append(col)
                columns.append(f"{rule.name}={level}")
                owner.append(rule.name)
        else:
            x = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
            if rule.missing == "indicator":
                miss = np.isnan(x)
                fill = float(np.nanmean(x)) if (~miss).any() else 0.0
                fills[rule.name] = fill
                blocks.append(np.where(miss, fill, x))
                columns.append(rule.name)
                owner.append(rule.name)
                if miss.any():
                    blocks.append(miss.astype(float))
                    columns.append(f"{rule.name}:missing")
                    owner.append(rule.name)
            else:
                blocks.append(x)
                columns.append(rule.name)
                owner.append(rule.name)
    matrix = np.column_stack(blocks) if blocks else np.empty((len(cases), 0))
    return CueDesign(
        case_ids=tuple(cases.index.astype(str).tolist()),
        matrix=matrix,
        columns=tuple(columns),
        cue_of_column=tuple(owner),
        cues=tuple(r.name for r in rules),
        kinds=kinds,
        reference_levels=refs,
        missing_rules={r.name: r.missing for r in rules},
        fill_values=fills,
    )
