"""Run the analyses of a study and write the results folder.

``audit()`` is pure: JudgmentTable in, :class:`AuditResult` out. ``write_audit()``
writes results.json, policies.json, the CSV tables and the workbook into a
folder that appears whole or not at all.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from ._results import jsonable
from .ingest import JudgmentTable, load_study
from .outputs import OutputFolder, atomic_write_bytes, atomic_write_text, dump_json, escape_formula
from .study import StudySpec
from .summary import DataSummary, summarize

RESULTS_SCHEMA = "calibrate.results/1"
POLICIES_SCHEMA = "calibrate.policies/1"


@dataclass(frozen=True)
class AuditResult:
    """Everything one audit found. ``to_dict()`` is results.json."""

    study_name: str
    seed: int
    inputs: tuple[dict, ...]
    phases: tuple[str, ...]
    warnings: tuple[dict, ...]
    summary: DataSummary
    raters: tuple[dict, ...]
    panels: tuple[dict, ...]
    tables: dict[str, pd.DataFrame] = field(default_factory=dict, repr=False)
    policies: dict = field(default_factory=dict, repr=False)

    def to_dict(self) -> dict:
        return jsonable({
            "schema": RESULTS_SCHEMA,
            "tool_version": __version__,
            "seed": self.seed,
            "study": {"name": self.study_name},
            "inputs": list(self.inputs),
            "phases": list(self.phases),
            "warnings": list(self.warnings),
            "data_summary": self.summary.to_dict(),
            "raters": list(self.raters),
            "panels": list(self.panels),
        })

    def rater_entry(self, rater: str, phase: str) -> dict:
        for entry in self.raters:
            if entry["rater"] == rater and entry["phase"] == phase:
                return entry
        raise KeyError((rater, phase))


def audit(study: JudgmentTable | StudySpec | str | Path, *, seed: int | None = None) -> AuditResult:
    """Audit a study: every analysis, for every phase.

    Parameters
    ----------
    study : a JudgmentTable (from :func:`calibrate.load_study`), a StudySpec or a spec path.
    seed : resampling seed; defaults to the spec's ``[study] seed``.
    """
    table = study if isinstance(study, JudgmentTable) else load_study(study)
    spec = table.spec
    seed = spec.seed if seed is None else int(seed)
    summary = summarize(table)
    warnings = [w.to_dict() for w in table.warnings]
    raters: list[dict] = []
    panels: list[dict] = []
    for ph, ph_summary in zip(table.phases, summary.phases):
        per_rater = {r["rater"]: r for r in ph_summary.per_rater}
        for rater in ph.raters:
            counts = per_rater[rater]
            flags = []
            if rater in ph.too_few:
                flags.append("too_few_cases")
            elif counts["cases_per_term"] < 10:
                flags.append("few_cases")
            raters.append({
                "rater": rater,
                "phase": ph.label,
                "n_cases": counts["n_cases"],
                "n_repeats": counts["n_repeats"],
                "policy": None,
                "retest": None,
                "lens": None,
                "severity": None,
                "alignment": None,
                "drift": None,
                "group": None,
                "flags": flags,
                "excluded": {},
            })
        panels.append({
            "phase": ph.label,
            "n_raters": len(ph.raters),
            "connected": ph_summary.connectedness.connected,
            "icc": None,
            "alpha": None,
            "variance_components": None,
            "d_study": [],
            "groups": [],
            "homogeneity": None,
        })
    tables = {"raters": _rater_table(raters), "data_summary": summary.to_frame()}
    return AuditResult(
        study_name=spec.name,
        seed=seed,
        inputs=table.inputs,
        phases=tuple(p.label for p in table.phases),
        warnings=tuple(warnings),
        summary=summary,
        raters=tuple(raters),
        panels=tuple(panels),
        tables=tables,
    )


def _rater_table(raters: list[dict]) -> pd.DataFrame:
    rows = []
    for e in raters:
        row = {"rater": e["rater"], "phase": e["phase"], "n_cases": e["n_cases"],
               "n_repeats": e["n_repeats"], "group": e["group"], "flags": " ".join(e["flags"])}
        rows.append(row)
    return pd.DataFrame(rows)


# ----------------------------------------------------------------------------- writing


def results_schema() -> dict:
    """The JSON Schema of results.json (shipped in the package)."""
    text = resources.files("calibrate").joinpath("schemas/results.schema.json").read_text("utf-8")
    return json.loads(text)


def _csv_bytes(frame: pd.DataFrame) -> bytes:
    safe = frame.copy()
    for col in safe.columns:
        if safe[col].dtype == object:
            safe[col] = safe[col].map(escape_formula)
    return safe.to_csv(index=False, lineterminator="\n", float_format="%.10g").encode("utf-8")


def _xlsx_bytes(tables: dict[str, pd.DataFrame], descriptions: dict[str, str]) -> bytes:
    """The tables as one workbook: a sheet each, header frozen, text that looks like a
    formula stored as text, numbers as numbers. Fixed document dates keep it reproducible."""
    import datetime as dt
    import io

    from openpyxl import Workbook
    from openpyxl.styles import Font

    wb = Workbook()
    readme = wb.active
    readme.title = "read-me"
    readme.append(["sheet", "what it holds"])
    for name in tables:
        readme.append([name, descriptions.get(name, "")])
    readme["A1"].font = Font(bold=True)
    readme["B1"].font = Font(bold=True)
    readme.freeze_panes = "A2"
    for name, frame in tables.items():
        ws = wb.create_sheet(title=name[:31])
        ws.append([str(c) for c in frame.columns])
        for cell in ws[1]:
            cell.font = Font(bold=True)
        for row in frame.itertuples(index=False):
            values = []
            for v in row:
                if isinstance(v, (np.floating, float)):
                    values.append(None if not np.isfinite(v) else float(v))
                elif isinstance(v, (np.integer,)):
                    values.append(int(v))
                elif isinstance(v, (np.bool_, bool)):
                    values.append(bool(v))
                elif v is None or v is pd.NA:
                    values.append(None)
                else:
                    values.append(str(v))
            ws.append(values)
        for col_cells in ws.iter_cols(min_row=2):
            for cell in col_cells:
                if isinstance(cell.value, str):
                    cell.data_type = "s"  # never a formula, whatever it starts with
                elif isinstance(cell.value, float):
                    cell.number_format = "0.000"
        ws.freeze_panes = "A2"
    fixed = dt.datetime(2000, 1, 1)
    wb.properties.created = fixed
    wb.properties.modified = fixed
    buf = io.BytesIO()
    wb.save(buf)
    return _zip_fixed_dates(buf.getvalue())


def _zip_fixed_dates(data: bytes) -> bytes:
    """Rewrite a zip (xlsx) with fixed member dates so the same tables give the same bytes."""
    import io
    import zipfile

    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            fixed = zipfile.ZipInfo(info.filename, date_time=(2000, 1, 1, 0, 0, 0))
            fixed.compress_type = zipfile.ZIP_DEFLATED
            fixed.external_attr = 0o644 << 16
            content = src.read(info.filename)
            if info.filename == "docProps/core.xml":
                # openpyxl stamps the save time into the document properties
                content = re.sub(rb"(<dcterms:(?:created|modified)[^>]*>)[^<]*", rb"\g<1>2000-01-01T00:00:00Z",
                                 content)
            dst.writestr(fixed, content)
    return out.getvalue()


TABLE_DESCRIPTIONS = {
    "raters": "One row per rater and phase: counts, group and flags.",
    "data_summary": "One row per rater and phase: cases, repeats, all judgments, usable cases, "
                    "cases per model term.",
}


def write_audit(result: AuditResult, out: str | Path, *, overwrite: bool = False,
                progress: bool = False) -> Path:
    """Write the results folder; returns its path. The folder appears whole or not at all."""
    out = Path(out)
    with OutputFolder(out, overwrite=overwrite) as tmp:
        atomic_write_text(tmp / "results.json", dump_json(result.to_dict()))
        if result.policies:
            atomic_write_text(tmp / "policies.json", dump_json(jsonable(result.policies)))
        tables_dir = tmp / "tables"
        for name, frame in result.tables.items():
            atomic_write_bytes(tables_dir / f"{name}.csv", _csv_bytes(frame))
        atomic_write_bytes(tmp / "audit.xlsx", _xlsx_bytes(result.tables, TABLE_DESCRIPTIONS))
    return out
