"""Layout of every PDF: no word cut in two by its column, no page left nearly empty.

Built on the demo (panel summary, every rater, the training report) and on simulated
panels unlike it: long rater names with many cues, and binary decisions.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibrate.analyses import audit
from calibrate.data import load_study, write_demo
from calibrate.report import panel_pdf, rater_pdf
from calibrate.report.training import training_pdf
from calibrate.training import compare
from tests.helpers import write_study
from tests.report_layout import split_words, watch_build

# A page other than the last must be at least this full (share of the text frame's height):
# a heading or one caution box alone fills about a tenth.
LEAST_PAGE_FILL = 0.25


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    files = write_demo(tmp_path_factory.mktemp("layout-demo"))
    return files, audit(files.spec, n_boot=200)


def _long_names_many_cues(folder):
    """Eight raters with long hyphenated names, ten cues, hidden repeats, on a 1-7 scale."""
    rng = np.random.default_rng(5)
    n_cases, n_cues = 70, 10
    cues = rng.normal(size=(n_cases, n_cues)).round(2)
    names = ["Maximiliana-Featherstonehaugh", "Bartholomew-Oyelaran-Smythe", "Wilhelmina-Kowalczykowska",
             "Theodosia-Papadimitriou", "Rr", "Anastasios-Vanderhoeven", "Guinevere-Abernathy-Ito",
             "Quentin-Montgomery-Achterberg"]
    weights = rng.uniform(-0.4, 1.0, size=(len(names), n_cues))
    rows = []
    for r, name in enumerate(names):
        order = list(rng.permutation(n_cases)) + list(rng.choice(n_cases, size=12, replace=False))
        for seq, c in enumerate(order):
            latent = 4 + 0.5 * cues[c] @ weights[r] + rng.normal(0, 0.7)
            rows.append({"rater": name, "case": f"case-{c + 1:03d}", "score": int(np.clip(round(latent), 1, 7)),
                         "seq": seq, **{f"cue_number_{k + 1}": cues[c, k] for k in range(n_cues)}})
    cue_lines = "\n".join(f'cue_number_{k + 1} = "numeric"' for k in range(n_cues))
    return write_study(folder, pd.DataFrame(rows), cues=cue_lines, extra_columns='sequence = "seq"')


def _binary(folder):
    """Six raters deciding admit / decline on three cues, with an outcome for every case."""
    rng = np.random.default_rng(9)
    n_cases = 60
    x = rng.normal(size=(n_cases, 3)).round(3)
    outcome = (x @ [1.0, 0.5, 0.2] + rng.normal(0, 0.8, n_cases)).round(3)
    rows = []
    for r in range(6):
        for c in rng.choice(n_cases, size=48, replace=False):
            latent = x[c] @ [1.0, 0.6 - 0.2 * r, 0.3] + rng.normal(0, 0.6)
            rows.append({"rater": f"reader{r + 1}", "case": f"f{c + 1}", "score": "admit" if latent > 0 else "decline",
                         "x1": x[c, 0], "x2": x[c, 1], "x3": x[c, 2], "outcome": outcome[c]})
    return write_study(folder, pd.DataFrame(rows), scale="binary", jmin=0, jmax=1,
                       cues='x1 = "numeric"\nx2 = "numeric"\nx3 = "numeric"',
                       extra_columns='criterion = "outcome"',
                       extra_judgment='labels = { admit = 1, decline = 0 }')


@pytest.fixture(scope="module")
def simulated(tmp_path_factory):
    base = tmp_path_factory.mktemp("layout-sim")
    return {"long names, many cues": audit(_long_names_many_cues(base / "long"), n_boot=100),
            "binary decisions": audit(_binary(base / "binary"), n_boot=100)}


def _raters_of(result):
    return sorted({str(x) for x in result.tables["raters"]["rater"]})


def _all_builds(result):
    yield "panel summary", lambda: panel_pdf(result)
    for r in _raters_of(result):
        yield f"report of {r}", lambda r=r: rater_pdf(result, r, include_excluded=True)


def _check_words(builds) -> list[str]:
    problems = []
    for name, build in builds:
        _, layout = watch_build(build)
        assert layout.tables, f"{name}: no table was set"
        problems += [f"{name}: {p}" for p in (q for t in layout.tables for q in split_words(t))]
    return problems


def test_no_word_is_cut_by_its_column_in_the_demo_reports(demo):
    _, result = demo
    problems = _check_words(_all_builds(result))
    assert not problems, "\n".join(problems[:20])


@pytest.mark.parametrize("shape", ["long names, many cues", "binary decisions"])
def test_no_word_is_cut_by_its_column_in_simulated_panels(simulated, shape):
    result = simulated[shape]
    problems = _check_words(_all_builds(result))
    assert not problems, "\n".join(problems[:20])


def test_no_word_is_cut_in_the_training_report(demo):
    files, _ = demo
    comparison = compare(load_study(files.spec), n_boot=100).to_dict()
    problems = _check_words([("training report", lambda: training_pdf(comparison))])
    assert not problems, "\n".join(problems[:20])


def _thin_pages(name, build) -> list[str]:
    _, layout = watch_build(build)
    thin = [(k + 1, round(fill, 2)) for k, fill in enumerate(layout.page_fill[:-1]) if fill < LEAST_PAGE_FILL]
    return [f"{name}: page(s) with very little on them (page, share of the page filled): {thin}"] if thin else []


def test_no_page_but_the_last_is_nearly_empty(demo, simulated):
    files, result = demo
    builds = list(_all_builds(result))
    for shape, sim in simulated.items():
        builds += [(f"{shape}, {name}", build) for name, build in _all_builds(sim)]
    comparison = compare(load_study(files.spec), n_boot=100).to_dict()
    builds.append(("training report", lambda: training_pdf(comparison)))
    problems = [p for name, build in builds for p in _thin_pages(name, build)]
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
    printed = " ".join(" ".join(page_texts(panel_pdf(result))).split())
    assert printed.count("share only cases on which some design column is constant") == 1
