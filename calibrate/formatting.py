"""How a figure is printed, for the words written into the JSON files and for the PDFs alike.

On the ground floor, so that the verdict sentences of ``training/verdicts.py`` (written
into comparison.json and results.json) and the reports that print figures beside them
format a number the same way without the statistics importing the reports.
"""

from __future__ import annotations

import math


def _missing(value) -> bool:
    return value is None or (isinstance(value, float) and not math.isfinite(value))


def fmt(value: float | None, digits: int = 2) -> str:
    """A figure as printed: fixed decimals, 'n/a' when missing, and no minus sign on a
    figure that rounds to zero ('-0.00' would claim a direction that is not there)."""
    if _missing(value):
        return "n/a"
    text = f"{value:.{digits}f}"
    if text.startswith("-") and float(text) == 0:
        text = text[1:]
    return text


def signed(value: float | None, digits: int = 2, *, end: bool = False) -> str:
    """A change as printed: '+0.12', '-0.05', '0.00'; 'n/a' when missing. An interval's
    ``end`` that is not zero takes up to two more decimals rather than print as '0.00', so an
    interval that excludes zero (and carries a verdict) never looks as if it touched it."""
    if _missing(value):
        return "n/a"
    while end and value != 0 and digits < 4 and float(f"{value:.{digits}f}") == 0:
        digits += 1
    out = f"{value:+.{digits}f}"
    return out[1:] if float(out) == 0 else out


#: The short name a comparison metric is printed under (table headings, chart titles), shared
#: by ``training/verdicts.py``'s sentences and the training report so the two never disagree.
METRIC_LABELS = {"r": "R_s", "retest_r": "retest r", "misallocation": "misallocation", "g_rubric": "G rubric",
                 "severity": "severity", "r_a": "r_a", "g": "G"}
