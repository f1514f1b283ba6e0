"""Write an audit's results folder: results.json, policies.json, tables, workbook, PDFs.

The folder is built beside its final place and swapped in whole, so a failure
never leaves half an output behind.
"""

from __future__ import annotations

from pathlib import Path

from .analyses import AuditResult
from .output.folder import OutputFolder
from .output.tables import TABLE_DESCRIPTIONS, csv_bytes
from .result_base import jsonable
from .safe_files import atomic_write_bytes, atomic_write_text, dump_json


def write_audit(result: AuditResult, out: str | Path, *, overwrite: bool = False, pdf: bool = True,
                jobs: int = 1, include_excluded: bool = False, progress=None) -> Path:
    """Write the results folder; returns its path. The folder appears whole or not at all.

    ``progress(done, total, name)`` is called as each PDF is written.
    """
    from .output.workbook import workbook_bytes

    out = Path(out)
    with OutputFolder(out, overwrite=overwrite) as tmp:
        atomic_write_text(tmp / "results.json", dump_json(result.to_dict()))
        if result.policies:
            atomic_write_text(tmp / "policies.json", dump_json(jsonable(result.policies)))
        tables_dir = tmp / "tables"
        for name, frame in result.tables.items():
            atomic_write_bytes(tables_dir / f"{name}.csv", csv_bytes(frame))
        atomic_write_bytes(tmp / "audit.xlsx", workbook_bytes(result.tables, TABLE_DESCRIPTIONS))
        if pdf:
            from .report import build_reports

            build_reports(result, tmp, jobs=jobs, include_excluded=include_excluded,
                          progress=progress)
    return out


COMPARISON_TABLES = {
    "comparison_changes": "One row per rater, metric and change between phases: values, change, "
                          "interval, p-value and the method behind them.",
    "comparison_values": "One row per rater, metric and phase: the value.",
    "comparison_panel": "One row per metric, arm and change: mean change across raters with the "
                        "paired t (interval, p, d_z) and Wilcoxon's signed-rank test.",
}


def write_comparison(result, out: str | Path, *, overwrite: bool = False, pdf: bool = True) -> Path:
    """Write comparison.json, its tidy tables and (``pdf``) training-report.pdf; the folder
    appears whole or not at all."""
    out = Path(out)
    frames = {"comparison_changes": result.to_frame(), "comparison_values": result.values_frame(),
              "comparison_panel": result.panel_frame()}
    with OutputFolder(out, overwrite=overwrite) as tmp:
        atomic_write_text(tmp / "comparison.json", dump_json(result.to_dict()))
        for name, frame in frames.items():
            atomic_write_bytes(tmp / "tables" / f"{name}.csv", csv_bytes(frame))
        if pdf:
            from .report.training import TRAINING_FILE, training_pdf

            atomic_write_bytes(tmp / TRAINING_FILE, training_pdf(result.to_dict()))
    return out
