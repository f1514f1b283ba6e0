"""Reports end to end on the demo study: privacy, first-page numbers, reproducible bytes,
worker processes, and rebuilding from a results folder."""

from __future__ import annotations

import io
import resource
import time

import pytest

from calibrate.analyses import audit
from calibrate.data.demo import write_demo
from calibrate.report import build_reports, load_report_input, panel_pdf, rater_file_names, rater_pdf
from calibrate.report._read import as_report_input, id_pattern
from calibrate.writing import write_audit
from tests.pdf_text import entries_of, numbers_in, numbers_of, page_texts

EPOCH = "1780000000"  # 2026-05-28 UTC


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    files = write_demo(folder / "study")
    result = audit(files.spec)
    return folder, result


def _cpu_seconds() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


@pytest.fixture(scope="module")
def built(demo):
    folder, result = demo
    mp = pytest.MonkeyPatch()
    mp.setenv("SOURCE_DATE_EPOCH", EPOCH)
    calls = []
    try:
        start, cpu_start = time.perf_counter(), _cpu_seconds()
        paths = build_reports(result, folder / "out", progress=lambda *a: calls.append(a))
        # CPU of this process and its (joined) report workers: the wall clock also counts
        # whatever else a shared machine is running and made the bound flaky under load.
        seconds = min(time.perf_counter() - start, _cpu_seconds() - cpu_start)
    finally:
        mp.undo()
    return folder / "out", paths, calls, seconds


def test_every_report_is_written_with_progress(demo, built):
    _, result = demo
    out, paths, calls, seconds = built
    raters = sorted({e["rater"] for e in result.to_dict()["raters"]})
    assert paths[0] == out / "panel-summary.pdf"
    assert sorted(p.name for p in paths[1:]) == sorted(rater_file_names(raters).values())
    assert [c[0] for c in calls] == list(range(1, len(raters) + 2))
    assert all(c[1] == len(raters) + 1 for c in calls)
    # a generous bound: measured about 0.05 s per rater report on the 2-core machine
    assert seconds / len(paths) < 1.0


def test_rater_reports_name_their_rater_and_nobody_else(demo, built):
    _, result = demo
    out, *_ = built
    ids = sorted({e["rater"] for e in result.to_dict()["raters"]})
    for rater, name in rater_file_names(ids).items():
        pages = page_texts(out / "raters" / name)
        # Five pages at most: the demo's lens fits have under 10 cases per term, and the
        # small-sample caution they carry can push the glossary onto a fifth page.
        assert 2 <= len(pages) <= 5
        text = "\n".join(pages)
        assert id_pattern([rater]).search(text)
        assert not id_pattern([r for r in ids if r != rater]).findall(text), rater


def test_panel_summary_names_every_rater(demo, built):
    _, result = demo
    out, *_ = built
    text = "\n".join(page_texts(out / "panel-summary.pdf"))
    for rater in {e["rater"] for e in result.to_dict()["raters"]}:
        assert id_pattern([rater]).search(text), rater
    assert "Audit date 2026-05-28" in text


def test_panel_summary_states_the_chance_flags_and_the_retest_reach(demo, built):
    # the sentences print the figures of results.json panels[].chance_flags and
    # raters[].retest.flag_detectable_below, through the wording functions
    from calibrate.report import wording

    _, result = demo
    out, *_ = built
    text = " ".join(" ".join(page_texts(out / "panel-summary.pdf")).split())
    d = result.to_dict()
    for panel in d["panels"]:
        c = panel["chance_flags"]
        assert wording.chance_flags_sentence(c["n_tests"], c["panelwise_rate"], c["expected_chance_flags"],
                                             c["flags_shown"], panel["phase"]) in text
        entries = [e for e in d["raters"] if e["phase"] == panel["phase"] and "low_retest" not in e["flags"]]
        highest = max(e["retest"]["flag_detectable_below"] for e in entries)
        pairs = [e["retest"]["n_pairs"] for e in entries]
        assert wording.retest_reach_panel_sentence(min(pairs), max(pairs), highest, panel["phase"]) in text
    sorrel = " ".join(" ".join(page_texts(out / "raters" / "Sorrel.pdf")).split())
    entry = d["raters"][[e["rater"] for e in d["raters"]].index("Sorrel")]
    assert wording.retest_reach_sentence(entry["retest"]["n_pairs"], entry["retest"]["flag_detectable_below"]) in sorrel


def test_first_page_numbers_equal_results_json(demo, built):
    _, result = demo
    out, *_ = built
    data = as_report_input(result)
    for rater, name in rater_file_names(data.rater_ids()).items():
        body = page_texts(out / "raters" / name)[0].split("Feedback on your judgments", 1)[1]
        allowed = numbers_of(entries_of(data.results, rater))
        numbers = numbers_in(body)
        assert numbers, rater
        assert [n for n in numbers if n not in allowed] == [], rater


def test_same_epoch_same_bytes(demo, monkeypatch):
    _, result = demo
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    rater = result.to_dict()["raters"][0]["rater"]
    assert rater_pdf(result, rater) == rater_pdf(result, rater)
    assert panel_pdf(result) == panel_pdf(result)


def test_worker_processes_give_the_same_files(demo, built, tmp_path, monkeypatch):
    _, result = demo
    out, paths, *_ = built
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    again = build_reports(result, tmp_path, jobs=2)  # the panel summary builds in a worker too
    assert [p.name for p in again] == [p.name for p in paths]
    assert again[0].read_bytes() == paths[0].read_bytes()
    for path in again[1:]:
        assert path.read_bytes() == (out / "raters" / path.name).read_bytes(), path.name


def test_reports_rebuild_from_a_results_folder(demo, tmp_path, monkeypatch):
    folder, result = demo
    write_audit(result, tmp_path / "audit")
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    rebuilt = load_report_input(tmp_path / "audit")
    rater = rebuilt.rater_ids()[0]
    assert page_texts(rater_pdf(rebuilt, rater))[0] == page_texts(rater_pdf(result, rater))[0]
    assert "Panel summary" in page_texts(panel_pdf(rebuilt))[0]


def test_excluded_attribute_stays_with_the_chair_by_default(demo):
    _, result = demo
    rater = result.to_dict()["raters"][0]["rater"]
    assert "Attributes that must not count" not in "\n".join(page_texts(rater_pdf(result, rater)))
    assert "Attributes that must not count" in "\n".join(page_texts(rater_pdf(result, rater, include_excluded=True)))


def test_workbook_holds_every_audit_table(demo):
    from openpyxl import load_workbook

    from calibrate.output.workbook import sheet_names, workbook_bytes

    _, result = demo
    data = workbook_bytes(result.tables, {})
    wb = load_workbook(io.BytesIO(data), read_only=True)
    for name, sheet in sheet_names(result.tables).items():
        assert wb[sheet].max_row == len(result.tables[name]) + 1, name


def test_workbook_sheets_read_back_as_the_csv_tables(demo):
    # every sheet of the demo's workbook, read by pandas, holds what its CSV table holds
    import numpy as np
    import pandas as pd

    from calibrate.output.tables import csv_bytes
    from calibrate.output.workbook import sheet_names, workbook_bytes

    _, result = demo
    data = workbook_bytes(result.tables, {})
    for name, sheet in sheet_names(result.tables).items():
        csv = pd.read_csv(io.BytesIO(csv_bytes(result.tables[name])))
        book = pd.read_excel(io.BytesIO(data), sheet_name=sheet)
        assert list(book.columns) == list(csv.columns), name
        for column in csv.columns:
            a, b = csv[column], book[column]
            assert (a.isna() == b.isna()).all(), (name, column)
            if pd.api.types.is_numeric_dtype(a) and not pd.api.types.is_bool_dtype(a):
                np.testing.assert_allclose(b[a.notna()].astype(float), a[a.notna()].astype(float),
                                           rtol=1e-9, err_msg=f"{name}.{column}")
            else:   # the CSV escapes formula-like text with a quote; the workbook keeps it as text
                want = a[a.notna()].astype(str).str.replace(r"^'(?=[=+\-@\t\r])", "", regex=True)
                assert b[a.notna()].astype(str).tolist() == want.tolist(), (name, column)


def test_large_panels_get_compact_json_with_the_same_content(demo, tmp_path, monkeypatch):
    import json

    import calibrate.writing as writing

    _, result = demo
    writing.write_audit_files(result, tmp_path / "indented", pdf=False)
    monkeypatch.setattr(writing, "COMPACT_RESULTS_RATERS", 0)
    writing.write_audit_files(result, tmp_path / "compact", pdf=False)
    for name in ("results.json", "policies.json"):
        compact = (tmp_path / "compact" / name).read_text("utf-8")
        indented = (tmp_path / "indented" / name).read_text("utf-8")
        assert compact.count("\n") == 1 and len(compact) < len(indented), name
        assert json.loads(compact) == json.loads(indented), name


def test_no_report_text_says_from_memory_or_null(built):
    """Sources the tool doubts never reach a reader, and no phase is called "null"."""
    out, paths, *_ = built
    for path in paths:
        text = " ".join(page_texts(path))
        assert "from memory" not in text, path.name
        assert "null" not in text, path.name


def test_the_chairs_first_page_fits_on_one_page(built):
    # page 1 of the demo's panel summary holds the flags, the decisions' reliability,
    # the lens result and all three next steps; the lens section starts page 2
    out, *_ = built
    pages = [" ".join(p.split()) for p in page_texts(out / "panel-summary.pdf")]
    first = pages[0]
    for part in ("Flags first", "Decisions as the files were read", "Policies alike?", "Lens model:",
                 "Next steps", "1. Talk first with", "2. ", "3. "):
        assert part in first, part
    assert "cutoff_rule" not in first and "excluded_attribute" not in first
    assert "Lens model: judgments against the outcome" in pages[1]
