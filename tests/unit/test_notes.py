"""Notes of one kind are grouped into one line (issue 14, signal before noise)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.analyses import _warn_texts
from calibrate.data.rules import Collector, mark_repeats
from calibrate.notes import analysis_note, group_notes, notes_frame, wording_code
from tests.helpers import write_study
from tests.pdf_text import page_texts


def many_showings_judgments(*, n_raters=29, n_cases=14, showings=15, seed=14) -> pd.DataFrame:
    """A judgment experiment shaped like the one of the issue: 29 raters, 3 cues, 14 cases
    each shown 15 times (invented numbers; straight-line raters on 1-7)."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n_cases, 3)).round(2)
    rows = []
    for r in range(n_raters):
        w = np.array([.6, .4, .2]) + rng.normal(0, .15, 3)
        seq = 0
        for _ in range(showings):
            for c in rng.permutation(n_cases):
                seq += 1
                y = int(np.clip(np.round(4 + x[c] @ w + rng.normal(0, .7)), 1, 7))
                rows.append({"rater": f"p{r + 1:02d}", "case": f"s{c + 1:02d}", "score": y, "seq": seq,
                             "x1": x[c, 0], "x2": x[c, 1], "x3": x[c, 2]})
    return pd.DataFrame(rows)


def test_wording_code_ignores_names_and_numbers():
    a = wording_code("4.7 cases per weight (under 10, a rule of thumb): the weights are unstable.")
    b = wording_code("12 cases per weight (under 10, a rule of thumb): the weights are unstable.")
    assert a == b == "cases-per-weight-under-a-rule"
    assert wording_code("cue 'test' is missing for 3 case(s)") == wording_code("cue 'essay' is missing for 40 case(s)")
    assert wording_code("R_s = 0.51, interval up to 0.70") != a


def test_later_showings_are_one_grouped_note_of_their_kind():
    # a case shown more than twice gives one note for the whole table (issue 16: one grouped
    # warning, not one per case), whichever [judgment] repeats mode is used
    data = pd.DataFrame({"_rater": ["a"] * 4 + ["b"] * 3, "_case": ["c1"] * 4 + ["c2"] * 3,
                         "_sequence": [1, 2, 3, 4, 1, 2, 3], "_phase": [None] * 7, "_row": range(2, 9),
                         "_file": ["j.csv"] * 7})
    for mode, kind in (("first-two", "later_presentations_dropped"), ("all", "every_presentation_used")):
        out = Collector()
        mark_repeats(data.copy(), out, mode=mode)
        notes = [w.to_dict() for w in out.warnings]
        assert [n["kind"] for n in notes] == [kind]
        assert "2 rater-case pair(s) (2 rater(s))" in notes[0]["message"]
        (group,) = group_notes(notes)
        assert group.count == 1 and notes[0]["message"] in group.line()  # one note: in full


def test_group_line_counts_and_shows_a_few_examples():
    notes = [analysis_note("policies", f"{4 + i / 10:.1f} cases per weight (under 10, a rule of thumb): the "
                           "weights are unstable.", phase="before", rater=f"r{i:02d}") for i in range(40)]
    notes.append(analysis_note("gstudy", "The rater variance component came out negative.", phase="before"))
    first, second = group_notes(notes)
    assert (first.count, second.count) == (40, 1)
    assert first.kind == "policies:cases-per-weight-under-a-rule"
    line = first.line()
    assert "40 notes" in line and "and 37 more" in line and line.count("rater 'r") == 3
    assert "The first: Fitting the policies (before): Rater 'r00': 4.0 cases per weight" in line
    assert "phase 'before'" not in line                   # one phase: not repeated per example
    assert second.line() == "Readers per file (before): The rater variance component came out negative."
    assert first.phases == ("before",)


def test_a_rater_is_named_once_and_a_panel_note_repeating_a_rater_note_is_written_once():
    class Item:
        def __init__(self, rater, warnings):
            self.rater, self.warnings = rater, warnings

    class Result:
        raters = (Item("r1", ("Rater 'r1': too few cases.",)), Item("r2", ("too few cases.",)))
        warnings = ("Rater 'r2': too few cases.", "No pair shares 20 cases.")

    notes = _warn_texts(None, "cutoffs", Result())
    assert [n["message"] for n in notes] == ["cutoffs: Rater 'r1': too few cases.",
                                             "cutoffs: Rater 'r2': too few cases.",
                                             "cutoffs: No pair shares 20 cases."]
    assert notes[0]["kind"] == notes[1]["kind"] != notes[2]["kind"]


def test_notes_without_a_kind_group_by_their_wording():
    """Results folders written before kinds existed still group (report rebuilt from them)."""
    old = [{"message": f"rater 'r{i}' has {i} usable case(s), fewer than the 5 a policy fit needs"}
           for i in range(3)]
    (group,) = group_notes(old)
    assert group.count == 3
    frame = notes_frame(old)
    assert list(frame.columns) == ["phase", "kind", "rater", "case", "file", "row", "column", "message"]
    assert frame["kind"].nunique() == 1 and len(frame) == 3


def test_fifteen_showings_give_a_data_quality_section_on_one_page(tmp_path):
    """The issue's shape: 29 raters x 14 cases x 15 showings. Before grouping the section ran to
    24 pages (406 'later showings dropped' lines, per-rater notes twice); now one line per kind."""
    from calibrate import audit
    from calibrate.report import panel_pdf

    spec = write_study(tmp_path / "study", many_showings_judgments(),
                       cues='x1 = "numeric"\nx2 = "numeric"\nx3 = "numeric"', extra_columns='sequence = "seq"')
    result = audit(spec, n_boot=200)
    # every showing is used by default ([judgment] repeats = "all"), said in one grouped note
    assert sum(w["kind"] == "every_presentation_used" for w in result.warnings) == 1
    assert len(result.tables["notes"]) == len(result.warnings)
    assert set(result.tables["notes"]["phase"]) == {"all"}          # as in every other table
    # every note once: the rater and panel entries' own notes are all in results.json's list,
    # and the list repeats none (the data-quality section reads it alone)
    from calibrate.report.view import collect_warnings

    data = result.to_dict()
    messages = [w["message"] for w in data["warnings"]]
    assert len(messages) == len(set(messages))
    for entry in data["raters"] + data["panels"]:
        for note in collect_warnings(entry):
            assert sum(m.endswith(note) for m in messages) == 1, note
    pages = page_texts(panel_pdf(result))
    start = [i for i, p in enumerate(pages) if "Data quality" in p and "What was noted" in p]
    end = [i for i, p in enumerate(pages) if "Every note, one row each" in p]
    assert len(start) == 1 and end == start, (start, end)
    section = " ".join(pages[start[0]].split())
    assert "406 rater-case pair(s)" in section and "more than twice" in section


def test_command_line_flags_stay_short_on_two_thousand_raters():
    """On 2,000 raters the command line printed 1,091 flag lines; now a count per flag, at most
    five raters (most serious first, data conditions never named) and a pointer."""
    from calibrate.cli import MOST_RATERS_NAMED, _flag_lines

    rng = np.random.default_rng(3)
    menu = ["few_cases", "drift", "inconsistent", "lenient", "collinear_cues", "excluded_attribute"]
    raters = [{"rater": f"r{i:04d}", "phase": "all",
               "flags": sorted(set(rng.choice(menu, size=rng.integers(0, 3)).tolist()))} for i in range(2000)]
    lines = _flag_lines(raters, named_phases=False)
    kinds = {f for e in raters for f in e["flags"]}
    assert len(lines) == 1 + len(kinds) + 1 + MOST_RATERS_NAMED + 1
    for flag in kinds:
        count = sum(flag in e["flags"] for e in raters)
        assert any(ln.strip().startswith(f"{count} ") and ln.endswith(f"[{flag}]") for ln in lines)
    named = lines[len(kinds) + 2:-1]
    assert all("attribute that must not count" in ln for ln in named)    # the most serious first
    assert "tables/raters.csv" in lines[-1]
    assert _flag_lines([{"rater": "a", "phase": "all", "flags": []}], named_phases=False) == ["No rater was flagged."]
    only_data = _flag_lines([{"rater": "a", "phase": "all", "flags": ["few_cases"]}], named_phases=False)
    assert "Only data conditions" in only_data[-2]


def test_every_unstable_group_shares_one_kind():
    # On a 2,000-rater panel 90 groups failed the resampling check and, their labels being
    # unquoted, each became a kind of its own (102 kinds in the data-quality section).
    from calibrate.notes import analysis_note
    texts = [f"Group '{g}' does not survive resampling of cases (mean Jaccard similarity 0.4{i}, "
             "below 0.5); treat it as unstable." for i, g in enumerate(("A", "aa", "ZZ9"))]
    kinds = {analysis_note("grouping", t, phase=None)["kind"] for t in texts}
    assert kinds == {"grouping:group-does-not-survive-resampling-of"}
