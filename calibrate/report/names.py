"""Where the reports go and what their files are called: light, so that writing the
results without PDFs needs none of the PDF code."""

from __future__ import annotations

from ..safe_files import safe_file_stem

PANEL_FILE = "panel-summary.pdf"
RATERS_FOLDER = "raters"


def rater_file_names(raters: list[str]) -> dict[str, str]:
    """Rater id -> sanitised PDF file name, clashes numbered in a fixed (sorted) order."""
    taken: set[str] = set()
    return {r: safe_file_stem(r, taken=taken) + ".pdf" for r in sorted(raters)}
