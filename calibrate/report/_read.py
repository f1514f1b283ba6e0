"""What the reports read: results.json (through its typed view) and the tidy tables.

The reports are built from ``AuditResult.to_dict()`` (the same dictionary as
results.json), so a report can be rebuilt from a results folder alone. Every figure
is read through :mod:`calibrate.report.view`, which fails on a missing key instead of
quietly printing "not available".
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import pandas as pd

from .view import ResultsView


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
    # What is the same in every rater's report (the panel's median weight shares, the id
    # pattern of the privacy check, the groups frame), computed once per input rather than
    # once per report; keyed by what it depends on.
    shared_figures: dict = field(default_factory=dict, repr=False, compare=False)

    @cached_property
    def view(self) -> ResultsView:
        """The typed view of ``results``; raises :class:`ResultsViewError` naming a missing key."""
        return ResultsView.read(self.results)

    def rater_ids(self) -> list[str]:
        return self.view.rater_ids()

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
