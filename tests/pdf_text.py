"""Reading generated PDFs back in tests: the text of each page and the numbers it shows."""

from __future__ import annotations

import io
import re
from pathlib import Path

from pypdf import PdfReader

from calibrate.report.wording import fmt

#: A number as printed in a report, not part of a word, an id or a longer number.
_PRINTED_NUMBER = re.compile(r"(?<![\w.])-?\d+(?:\.\d+)?(?![\w])")


def page_texts(pdf: bytes | str | Path) -> list[str]:
    """Extracted text of every page of a PDF given as bytes or as a path."""
    source = io.BytesIO(pdf) if isinstance(pdf, bytes) else str(pdf)
    return [page.extract_text() for page in PdfReader(source).pages]


def numbers_in(text: str) -> list[str]:
    """The numbers printed in ``text``, as written."""
    # "95% interval" names the interval's level, not a figure of the results
    return _PRINTED_NUMBER.findall(re.sub(r"95%\s+interval", "interval", text))


def entries_of(results: dict, rater: str) -> list[dict]:
    """The rater's raw results.json entries, in the order written (phase order)."""
    return [e for e in results["raters"] if e["rater"] == rater]


def numbers_of(entries) -> set[str]:
    """Every number inside JSON-like entries, as the reports print it and as ``str``."""
    found: set[str] = set()
    pending = list(entries)
    while pending:
        node = pending.pop()
        if isinstance(node, dict):
            pending.extend(node.values())
        elif isinstance(node, list):
            pending.extend(node)
        elif isinstance(node, (int, float)) and not isinstance(node, bool):
            found.update({fmt(float(node)), fmt(float(node), 3), str(node)})  # 3 decimals: a p-value
    return found
