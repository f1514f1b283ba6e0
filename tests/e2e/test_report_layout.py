"""Layout of every PDF: no word cut in two by its column, no page left nearly empty.

Built on the demo (panel summary, every rater, the training report) and on simulated
panels unlike it: long rater names with many cues, and binary decisions.
"""

from __future__ import annotations

import pytest

from calibrate.analyses import audit
from calibrate.data import load_study, write_demo
from calibrate.report import panel_pdf, rater_pdf
from calibrate.report.training import training_pdf
from calibrate.training import compare
from tests.report_layout import split_words, watch_build
from tests.varied_studies import binary_study, long_names_many_cues_study

# A page other than the last must be at least this full (share of the text frame's height):
# a heading or one caution box alone fills about a tenth.
LEAST_PAGE_FILL = 0.25


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    files = write_demo(tmp_path_factory.mktemp("layout-demo"))
    return files, audit(files.spec, n_boot=200)


@pytest.fixture(scope="module")
def simulated(tmp_path_factory):
    base = tmp_path_factory.mktemp("layout-sim")
    return {"long names, many cues": audit(long_names_many_cues_study(base / "long"), n_boot=100),
            "binary decisions": audit(binary_study(base / "binary"), n_boot=100)}


def _raters_of(result):
    return sorted({str(x) for x in result.tables["raters"]["rater"]})


def _all_builds(result):
    yield "panel summary", lambda: panel_pdf(result)
    for r in _raters_of(result):
        yield f"report of {r}", lambda r=r: rater_pdf(result, r, include_excluded=True)


@pytest.fixture(scope="module")
def laid_out(demo, simulated):
    """Every PDF built once and watched: study shape -> [(file, Layout)]."""
    files, result = demo
    builds = {"demo": list(_all_builds(result))}
    comparison = compare(load_study(files.spec), n_boot=100).to_dict()
    builds["demo"].append(("training report", lambda: training_pdf(comparison)))
    for shape, sim in simulated.items():
        builds[shape] = list(_all_builds(sim))
    return {shape: [(name, watch_build(build)[1]) for name, build in items] for shape, items in builds.items()}


@pytest.mark.parametrize("shape", ["demo", "long names, many cues", "binary decisions"])
def test_no_word_is_cut_by_its_column(laid_out, shape):
    problems = []
    for name, layout in laid_out[shape]:
        assert layout.tables, f"{name}: no table was set"
        problems += [f"{name}: {p}" for p in (q for t in layout.tables for q in split_words(t))]
    assert not problems, "\n".join(problems[:20])


@pytest.mark.parametrize("shape", ["demo", "long names, many cues", "binary decisions"])
def test_no_page_but_the_last_is_nearly_empty(laid_out, shape):
    problems = []
    for name, layout in laid_out[shape]:
        thin = [(k + 1, round(fill, 2)) for k, fill in enumerate(layout.page_fill[:-1]) if fill < LEAST_PAGE_FILL]
        if thin:
            problems.append(f"{name}: page(s) with very little on them (page, share of the page filled): {thin}")
    assert not problems, "\n".join(problems)


def test_a_data_quality_note_is_printed_once(demo):
    """The pairs' note on constant design columns reached the panel summary twice: once from the
    study's list of notes and once from the panel's own block."""
    from calibrate.report._read import as_report_input
    from calibrate.report.panel import PanelReport
    from tests.pdf_text import page_texts

    _, result = demo
    notes = PanelReport(as_report_input(result)).all_warnings()
    study_level = [msg for where, msg in notes if where == "analysis"]
    repeated = [(where, msg) for where, msg in notes if where != "analysis"
                and any(other.endswith(": " + msg) for other in study_level)]
    assert not repeated
    # the data-quality section prints one line per kind of note, each once
    from calibrate.notes import group_notes

    printed = " ".join(" ".join(page_texts(panel_pdf(result))).split())
    groups = group_notes([w.as_note() for w in PanelReport(as_report_input(result)).view.warnings])
    assert groups
    for group in groups:
        line = " ".join(group.line().split())[:60]
        assert printed.count(line) == 1, line


def test_heat_map_rows_follow_the_grouping_tree(demo):
    from calibrate.report import charts
    from calibrate.report._read import as_report_input
    from calibrate.report.panel import PanelReport

    _, result = demo
    report = PanelReport(as_report_input(result))
    for phase in report.view.phases:
        panel = report.view.panel(phase)
        grouping = panel.grouping
        tree = charts.tree_leaf_order(list(grouping.grouped_raters),
                                      [(m.merged_a, m.merged_b) for m in grouping.merges])
        rows = [e.rater for e in report._in_tree_order(list(report.view.entries_in(phase)), panel)]
        assert rows == tree, phase


def test_each_rater_chart_names_its_phase_unless_the_study_has_none(demo, simulated):
    from tests.pdf_text import page_texts

    _, result = demo
    with_phases = " ".join(" ".join(page_texts(rater_pdf(result, "Alder"))).split())
    for caption in ("Phase after: a share is", "Phase after: each dot is a case",
                    "Phase after: grey dots: your judgments in reading order"):
        assert caption in with_phases
    sim = simulated["long names, many cues"]
    without = " ".join(" ".join(page_texts(rater_pdf(sim, _raters_of(sim)[0]))).split())
    assert "Phase" not in without and "Each dot is a case" in without
