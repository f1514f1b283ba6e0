"""Write an audit's results folder: results.json, policies.json, tables, workbook, PDFs.

The folder is built beside its final place and swapped in whole, so a failure
never leaves half an output behind.
"""

from __future__ import annotations

from pathlib import Path

from .analyses import AuditResult
from .output.folder import OutputFolder, write_failure
from .output.tables import TABLE_DESCRIPTIONS, csv_bytes
from .result_base import jsonable
from .safe_files import atomic_write_bytes, atomic_write_text, dump_json


def write_audit(result: AuditResult, out: str | Path, *, overwrite: bool = False, pdf: bool = True,
                jobs: int = 1, include_excluded: bool = False, progress=None,
                protect: tuple[Path, ...] = ()) -> Path:
    """Write the results folder; returns its path. The folder appears whole or not at all.

    ``overwrite`` replaces an earlier results folder only (one carrying the tool's
    marker); ``protect`` lists inputs the folder must not contain. ``progress(done,
    total, name)`` is called as each PDF is written.
    """
    out = Path(out)
    with OutputFolder(out, overwrite=overwrite, protect=protect) as staging:
        write_audit_files(result, staging, pdf=pdf, jobs=jobs, include_excluded=include_excluded,
                          progress=progress, shown=out)
    return out


def write_audit_files(result: AuditResult, folder: Path, *, pdf: bool = True, jobs: int = 1,
                      include_excluded: bool = False, progress=None, shown: Path | None = None) -> None:
    """Write every output file into ``folder`` (a staging folder of :class:`OutputFolder`).

    A failed write (full disk, read-only place) becomes one clear error naming ``shown``.
    """
    from .output.workbook import workbook_bytes

    try:
        atomic_write_text(folder / "results.json", dump_json(result.to_dict()))
        if result.policies:
            atomic_write_text(folder / "policies.json", dump_json(jsonable(result.policies)))
        tables_dir = folder / "tables"
        for name, frame in result.tables.items():
            atomic_write_bytes(tables_dir / f"{name}.csv", csv_bytes(frame))
        atomic_write_bytes(folder / "audit.xlsx", workbook_bytes(result.tables, TABLE_DESCRIPTIONS))
        if pdf:
            from .report import build_reports

            build_reports(result, folder, jobs=jobs, include_excluded=include_excluded,
                          progress=progress)
    except OSError as exc:
        raise write_failure(exc, shown or folder) from None


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
