"""Write an audit's results folder: results.json, policies.json, tables, workbook, PDFs.

The folder is built beside its final place and swapped in whole, so a failure
never leaves half an output behind.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from .analyses import AuditResult
from .errors import CalibrateError
from .output.pseudonyms import PseudonymKey
from .output.folder import OutputFolder, write_failure
from .output.tables import TABLE_DESCRIPTIONS, csv_bytes
from .result_base import collector_paused, jsonable
from .safe_files import atomic_write_bytes, atomic_write_text, dump_json


INDEX_FILE = "index.csv"


#: results.json and policies.json are written without indentation above this many raters:
#: results.json grows by about 18 KB a rater indented and 10-12 KB compact (DEVELOPERS.md,
#: "Speed at scale": 4.6 MB compact at 400 raters, 19.5 MB at 2,000), so 2,000 raters stay
#: under 25 MB, and the compact form is written by json's C
#: encoder (2,000 raters: 0.37 s against 1.03 s indented; policies.json 0.12 s against
#: 0.29 s and 4.7 MB against 9.3 MB). Smaller panels keep the indented form for reading.
COMPACT_RESULTS_RATERS = 500


def write_audit(result: AuditResult, out: str | Path, *, overwrite: bool = False, pdf: bool = True,
                jobs: int = 1, include_excluded: bool = False, progress=None,
                protect: tuple[Path, ...] = (), pseudonymise: PseudonymKey | None = None) -> Path:
    """Write the results folder; returns its path. The folder appears whole or not at all.

    ``overwrite`` replaces an earlier results folder only (one carrying the tool's
    marker); ``protect`` lists inputs the folder must not contain. ``progress(done,
    total, name)`` is called as each PDF is written. ``pseudonymise`` is the
    :class:`~calibrate.output.pseudonyms.PseudonymKey` the audited table was
    pseudonymised with (``pseudonymise_table`` before ``audit``): its key file, which maps
    each code to the rater id and report file, is written outside the folder.
    """
    out = Path(out)
    with OutputFolder(out, overwrite=overwrite, protect=protect) as staging:
        write_audit_files(result, staging, pdf=pdf, jobs=jobs, include_excluded=include_excluded,
                          progress=progress, shown=out, pseudonymise=pseudonymise)
    return out


def _index_frame(result: AuditResult, pdf: bool) -> pd.DataFrame:
    """One row per rater: the id (a code when pseudonymised) and the report file, relative to
    the folder (empty without PDFs), in the order the reports are built."""
    from .report.names import RATERS_FOLDER, rater_file_names

    ids = sorted({str(e["rater"]) for e in result.raters})
    names = rater_file_names(ids)
    return pd.DataFrame({"rater": list(names),
                         "report": [f"{RATERS_FOLDER}/{names[r]}" if pdf else "" for r in names]})


def _results_dict(result: AuditResult, key: PseudonymKey | None) -> dict:
    data = result.to_dict()
    provenance = data.setdefault("provenance", {})
    provenance["pseudonymised"] = key is not None
    spec = provenance.get("spec") or {}
    if key is not None and spec.get("text") is None and spec.get("sha256"):
        spec["text_withheld"] = ("the spec names raters and this audit is pseudonymised; its "
                                 "sha256 above still identifies the file")
    return data


def _write_data_files(result: AuditResult, folder: Path, index: pd.DataFrame, key: PseudonymKey | None) -> None:
    """results.json, policies.json, the tables and the workbook."""
    from .output.workbook import workbook_bytes

    compact = len(index) > COMPACT_RESULTS_RATERS
    atomic_write_text(folder / "results.json", dump_json(_results_dict(result, key), compact=compact))
    if result.policies:
        atomic_write_text(folder / "policies.json", dump_json(jsonable(result.policies), compact=compact))
    tables_dir = folder / "tables"
    for name, frame in result.tables.items():
        atomic_write_bytes(tables_dir / f"{name}.csv", csv_bytes(frame))
    atomic_write_bytes(folder / INDEX_FILE, csv_bytes(index))
    atomic_write_bytes(folder / "audit.xlsx", workbook_bytes(result.tables, TABLE_DESCRIPTIONS))


def write_audit_files(result: AuditResult, folder: Path, *, pdf: bool = True, jobs: int = 1,
                      include_excluded: bool = False, progress=None, shown: Path | None = None,
                      pseudonymise: PseudonymKey | None = None) -> None:
    """Write every output file into ``folder`` (a staging folder of :class:`OutputFolder`).

    A failed write (full disk, read-only place) becomes one clear error naming ``shown``.
    """
    index = _index_frame(result, pdf)
    key = pseudonymise
    if key is not None:
        unknown = sorted(set(index["rater"]) - set(key.codes.values()))
        if unknown:
            raise CalibrateError(
                f"{len(unknown)} rater(s) of this result have no code in the key {key.path}: the "
                "audit ran on the real ids. Pseudonymise the table first "
                "(calibrate.output.pseudonyms.pseudonymise_table), then audit() it.")
    try:
        with collector_paused():  # plain data and text: no cycles to collect
            _write_data_files(result, folder, index, key)
        if key is not None:
            # Before the reports: the folder is swapped in only after this, so a results folder
            # never exists whose codes cannot be turned back.
            key.reports.update(dict(zip(index["rater"], index["report"])))
            key.write()
        if pdf:
            from .report import build_reports

            build_reports(result, folder, jobs=jobs, include_excluded=include_excluded,
                          progress=progress)
    except OSError as exc:
        raise write_failure(exc, shown or folder) from None


COMPARISON_WORKBOOK = "comparison.xlsx"
COMPARISON_TABLES = {
    "comparison_changes": "One row per rater, metric and change between phases: values, change, "
                          "interval, p-value and the method behind them.",
    "comparison_values": "One row per rater, metric and phase: the value.",
    "comparison_panel": "One row per metric, arm and change: mean change across raters with the "
                        "paired t (interval, p, d_z) and Wilcoxon's signed-rank test.",
    "comparison_shares": "One row per rater, cue and change: the cue's share of the rater's "
                         "weights in each phase and its change with interval.",
    "comparison_panel_figures": "One row per panel figure (ICC, alpha, spread of weight profiles, "
                                "distance to the rubric), arm and change.",
    "comparison_effects": "Trained against controls (difference in differences, ANCOVA), the "
                          "follow-up effect, and the smallest change the design could detect.",
}
COMPARISON_COLUMN_NOTES = {
    "detectable": "Smallest change this design could detect (80% power, 5% two-sided).",
    "detectable_per_rater": "Smallest change of one typical rater the design could detect.",
    "comparable": "False when the phases used different cases and the figure is not corrected for it.",
    "note": "Why a figure is not comparable, in plain words.",
}


def write_comparison(result, out: str | Path, *, overwrite: bool = False, pdf: bool = True) -> Path:
    """Write comparison.json, its tidy tables and (``pdf``) training-report.pdf; the folder
    appears whole or not at all."""
    out = Path(out)
    from .output.workbook import workbook_bytes

    frames = {"comparison_changes": result.to_frame(), "comparison_values": result.values_frame(),
              "comparison_panel": result.panel_frame(), "comparison_shares": result.shares_frame(),
              "comparison_panel_figures": result.panel_figures_frame(),
              "comparison_effects": result.effects_frame()}
    with OutputFolder(out, overwrite=overwrite) as tmp:
        atomic_write_text(tmp / "comparison.json", dump_json(result.to_dict()))
        for name, frame in frames.items():
            atomic_write_bytes(tmp / "tables" / f"{name}.csv", csv_bytes(frame))
        atomic_write_bytes(tmp / COMPARISON_WORKBOOK,
                           workbook_bytes(frames, COMPARISON_TABLES, column_notes=COMPARISON_COLUMN_NOTES))
        if pdf:
            from .report.training import TRAINING_FILE, training_pdf

            atomic_write_bytes(tmp / TRAINING_FILE, training_pdf(result.to_dict()))
    return out
