"""Tolerant reading of results.json for the reports.

The reports are built from ``AuditResult.to_dict()`` (the same dictionary as
results.json), so a report can be rebuilt from a results folder alone. Analyses
land over time and some do not apply to every study, so every accessor here
returns ``None`` for anything absent, null or not a finite number, and the
section code says plainly that the figure is not available.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import pandas as pd


def num(value: Any) -> float | None:
    """A finite float from a number or from a ``{"estimate": ...}`` mapping, else None."""
    if isinstance(value, Mapping):
        value = value.get("estimate")
    if isinstance(value, bool) or value is None:
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def dig(mapping: Any, *path: str | int, default: Any = None) -> Any:
    """``mapping[p0][p1]...`` with ``default`` wherever a step is missing or null."""
    here = mapping
    for step in path:
        if isinstance(here, Mapping) and step in here:
            here = here[step]
        elif isinstance(here, (list, tuple)) and isinstance(step, int) and -len(here) <= step < len(here):
            here = here[step]
        else:
            return default
        if here is None:
            return default
    return here


def interval(value: Any) -> tuple[float, float] | None:
    """A (low, high) pair from ``[lo, hi]`` or ``{"ci_low":, "ci_high":}``, else None."""
    if isinstance(value, Mapping):
        lo, hi = num(value.get("ci_low")), num(value.get("ci_high"))
    elif isinstance(value, (list, tuple)) and len(value) == 2:
        lo, hi = num(value[0]), num(value[1])
    else:
        return None
    return None if lo is None or hi is None else (lo, hi)


def id_pattern(ids: Iterable[str]) -> re.Pattern | None:
    """A regex that finds any of ``ids`` as a whole word (``r1`` is not found in ``r10``)."""
    ids = sorted({str(i) for i in ids if str(i)}, key=len, reverse=True)
    if not ids:
        return None
    alternatives = "|".join(re.escape(i) for i in ids)
    return re.compile(rf"(?<![\w]){'(?:' + alternatives + ')'}(?![\w])")


@dataclass
class ReportInput:
    """What the reports read: results.json as a dict, plus tidy tables when at hand."""

    results: dict
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)

    @property
    def study_name(self) -> str:
        return str(dig(self.results, "study", "name", default="(unnamed study)"))

    @property
    def phases(self) -> list:
        phases = self.results.get("phases") or []
        return list(phases) if phases else [None]

    def rater_ids(self) -> list[str]:
        seen: dict[str, None] = {}
        for entry in self.results.get("raters", []):
            seen.setdefault(str(entry["rater"]), None)
        return list(seen)

    def entries_of(self, rater: str) -> list[dict]:
        """This rater's entries, in phase order."""
        order = {p: i for i, p in enumerate(self.phases)}
        found = [e for e in self.results.get("raters", []) if str(e["rater"]) == rater]
        return sorted(found, key=lambda e: order.get(e.get("phase"), len(order)))

    def entries_in(self, phase) -> list[dict]:
        return [e for e in self.results.get("raters", []) if e.get("phase") == phase]

    def panel(self, phase) -> dict:
        for p in self.results.get("panels", []):
            if p.get("phase") == phase:
                return p
        return {}

    def cues(self) -> list[str]:
        """Cue names in a stable order: from the data summary, else from the first policy."""
        return self._names("missing_per_cue", "importance")

    def design_terms(self) -> list[str]:
        """Design columns (a categorical cue's dummies apart), as for cues."""
        return self._names("design_terms", "std_weights")

    def _names(self, summary_key: str, policy_key: str) -> list[str]:
        names = list((self.results.get("data_summary") or {}).get(summary_key) or [])
        if names:
            return names
        for e in self.results.get("raters", []):
            found = dig(e, "policy", policy_key)
            if isinstance(found, Mapping) and found:
                return list(found)
        return []

    def table(self, *names: str) -> pd.DataFrame | None:
        for name in names:
            frame = self.tables.get(name)
            if isinstance(frame, pd.DataFrame) and not frame.empty:
                return frame
        return None


def as_report_input(result: Any) -> ReportInput:
    """Accept an AuditResult, a results.json dictionary or a ReportInput."""
    if isinstance(result, ReportInput):
        return result
    if isinstance(result, Mapping):
        return ReportInput(results=dict(result))
    to_dict = getattr(result, "to_dict", None)
    if to_dict is None:
        raise TypeError(f"cannot build reports from {type(result).__name__}; give an AuditResult "
                        "or the results.json dictionary")
    tables = dict(getattr(result, "tables", {}) or {})
    return ReportInput(results=to_dict(), tables=tables)
