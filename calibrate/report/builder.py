"""Build the PDFs: one private report per rater and the chair's panel summary.

``build_reports`` is what ``calibrate audit`` calls. Builds are byte-identical when
``SOURCE_DATE_EPOCH`` is set (reportlab's invariant mode fixes the document ids and
the printed date comes from that variable).
"""

from __future__ import annotations

import io
import json
import os
import sys
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path
from typing import Any

import pandas as pd

from ..safe_files import atomic_write_bytes
from . import wording
from ._read import ReportInput, as_report_input
from .names import PANEL_FILE, RATERS_FOLDER, rater_file_names
from .panel import PanelReport
from .rater import RaterReport
from .styles import ReportDocument


Progress = Callable[[int, int, str], None]


def rater_pdf(result: Any, rater: str, *, include_excluded: bool = False) -> bytes:
    """The private feedback report of one rater, as PDF bytes.

    Parameters
    ----------
    result : an AuditResult, the results.json dictionary, or a ReportInput.
    rater : the rater id as in results.json.
    include_excluded : show the excluded-attribute check in the rater's own report (the
        chair's choice; by default it stays in the panel summary).
    """
    data = as_report_input(result)
    report = RaterReport(data, str(rater), include_excluded=include_excluded)
    buf = io.BytesIO()
    doc = ReportDocument(buf, study_name=data.view.study_name, title="Private feedback",
                         caution=wording.CAUTION_LINE)
    doc.build(report.flowables())
    return buf.getvalue()


def panel_pdf(result: Any) -> bytes:
    """The chair's panel summary, as PDF bytes."""
    data = as_report_input(result)
    buf = io.BytesIO()
    doc = ReportDocument(buf, study_name=data.view.study_name, title="Panel summary (names every rater)",
                         caution=wording.CAUTION_LINE)
    doc.build(PanelReport(data).flowables())
    return buf.getvalue()


# What each worker process builds from: handed over once when the worker starts (inherited
# without copying where workers are forked, pickled once per worker elsewhere), not with every
# task, so that a task is only a list of rater ids and its answer the PDF bytes.
_WORKER_INPUT: ReportInput | None = None


def _worker_started(parent_pid: int, data: ReportInput | None = None) -> None:
    """Runs first in each worker: end with the parent, leave signals to the parent, and keep
    the report input for the tasks to come."""
    import signal

    global _WORKER_INPUT
    _WORKER_INPUT = data
    # The parent handles Ctrl-C and SIGTERM and stops the workers itself.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if sys.platform.startswith("linux"):
        try:  # PR_SET_PDEATHSIG: the kernel sends SIGTERM when the parent dies, even by SIGKILL
            import ctypes

            ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGTERM, 0, 0, 0)
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent_pid:  # the parent died before the line above took effect
        os._exit(1)


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """Terminate the pool's workers now rather than waiting for their running tasks."""
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for process in processes:
        try:
            process.terminate()
        except (OSError, ValueError):
            pass
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        try:
            process.join(timeout=5)
        except (OSError, ValueError, AssertionError):
            pass


def _build_chunk(raters: list[str], include_excluded: bool) -> list[tuple[str, bytes]]:
    """A worker's task: the reports of a few raters, from the input the worker started with."""
    return [(r, rater_pdf(_WORKER_INPUT, r, include_excluded=include_excluded)) for r in raters]


def _build_panel() -> bytes:
    """A worker's task: the panel summary."""
    return panel_pdf(_WORKER_INPUT)


# Raters per worker task: enough tasks to keep both workers busy to the end and the progress
# bar moving (one task is about a second of work), few enough that handing out tasks costs
# nothing next to building the reports.
CHUNK_RATERS = 16


def build_reports(result: Any, out_dir: str | Path, *, jobs: int = 1, include_excluded: bool = False,
                  progress: Progress | None = None, panel: bool = True) -> list[Path]:
    """Write ``panel-summary.pdf`` and ``raters/<sanitised id>.pdf`` into ``out_dir``.

    Parameters
    ----------
    result : an AuditResult, the results.json dictionary, or a ReportInput.
    out_dir : the folder to write into (created if needed); each file is written atomically.
    jobs : worker processes for the reports (1: build in this process; see
        :func:`calibrate.threads.available_cores` for the command line's default).
    include_excluded : show the excluded-attribute check in each rater's own report.
    progress : called as ``progress(done, total, file_name)`` after each file is written.
    panel : also write the panel summary.

    Returns
    -------
    The written paths: the panel summary first, then the rater reports in id order.
    """
    if not isinstance(jobs, int) or jobs < 1:
        from ..errors import CalibrateError

        raise CalibrateError(f"jobs must be a whole number of at least 1; got {jobs!r}.")
    data = as_report_input(result)
    out_dir = Path(out_dir)
    names = rater_file_names(data.rater_ids())
    total = len(names) + (1 if panel else 0)
    written: list[Path] = []
    done = 0

    def wrote(path: Path) -> None:
        nonlocal done
        written.append(path)
        done += 1
        if progress is not None:
            progress(done, total, path.name)

    raters = list(names)
    if jobs == 1 or len(raters) < 2:
        if panel:
            path = out_dir / PANEL_FILE
            atomic_write_bytes(path, panel_pdf(data))
            wrote(path)
        for r in raters:
            path = out_dir / RATERS_FOLDER / names[r]
            atomic_write_bytes(path, rater_pdf(data, r, include_excluded=include_excluded))
            wrote(path)
    else:
        # The panel summary is one task of its own, submitted first, so it builds in one worker
        # while the others start on the rater reports; files are written as tasks finish.
        size = max(1, min(CHUNK_RATERS, -(-len(raters) // (jobs * 4))))
        chunks = [raters[i:i + size] for i in range(0, len(raters), size)]
        pool = ProcessPoolExecutor(max_workers=jobs, initializer=_worker_started,
                                   initargs=(os.getpid(), data))
        try:
            summary = pool.submit(_build_panel) if panel else None
            futures = [pool.submit(_build_chunk, chunk, include_excluded) for chunk in chunks]
            for future in as_completed([*([summary] if summary is not None else []), *futures]):
                if future is summary:
                    path = out_dir / PANEL_FILE
                    atomic_write_bytes(path, future.result())
                    wrote(path)
                    continue
                for r, pdf in future.result():
                    path = out_dir / RATERS_FOLDER / names[r]
                    atomic_write_bytes(path, pdf)
                    wrote(path)
        except BaseException:
            _stop_workers(pool)  # an error or a signal: the workers must not outlive the run
            raise
        pool.shutdown(wait=True)
    panel_path = out_dir / PANEL_FILE
    rater_paths = sorted(p for p in written if not (panel and p == panel_path))
    return ([panel_path] if panel else []) + rater_paths


def load_report_input(folder: str | Path) -> ReportInput:
    """Read a results folder (results.json and tables/*.csv) back for rebuilding reports."""
    folder = Path(folder)
    results = json.loads((folder / "results.json").read_text("utf-8"))
    tables: dict[str, pd.DataFrame] = {}
    tables_dir = folder / "tables"
    if tables_dir.is_dir():
        for path in sorted(tables_dir.glob("*.csv")):
            tables[path.stem] = pd.read_csv(path, keep_default_na=True)
    return ReportInput(results=results, tables=tables)



__all__ = ["PANEL_FILE", "RATERS_FOLDER", "build_reports", "load_report_input", "panel_pdf", "rater_pdf",
           "rater_file_names"]
