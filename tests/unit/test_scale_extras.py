"""Extras that grow with the panel: the pair-level grouping table is written for small
panels or on request, and results.json states what ran in a reduced form."""

from __future__ import annotations

import calibrate.analyses as analyses
from calibrate.analyses import audit
from calibrate.data.ingest import load_study
from tests.helpers import simple_judgments, write_study


def _table(tmp_path):
    return load_study(write_study(tmp_path, simple_judgments(n_raters=5, n_cases=30, seed=3)))


def test_small_panel_gets_the_pair_table_and_no_reductions(tmp_path):
    result = audit(_table(tmp_path), n_boot=50)
    panel = result.to_dict()["panels"][0]
    assert panel["group_pairs_table"] == "group_pairs"
    assert panel["reduced_forms"] == []
    n_grouped = sum(r["group"] is not None for r in panel["grouping"]["raters"])
    assert len(result.tables["group_pairs"]) == n_grouped * (n_grouped - 1) // 2
    assert list(result.tables["group_pairs"].columns) == ["phase", "rater_a", "rater_b", "together"]


def test_above_the_limit_the_pair_table_is_left_out_and_said_so_unless_asked(tmp_path, monkeypatch):
    monkeypatch.setattr(analyses, "GROUP_PAIRS_MAX_RATERS", 3)
    table = _table(tmp_path)
    result = audit(table, n_boot=50)
    panel = result.to_dict()["panels"][0]
    assert "group_pairs" not in result.tables
    assert panel["group_pairs_table"] is None
    assert any("left out of the tables on panels of more than 3 grouped raters" in s
               for s in panel["reduced_forms"])
    full = audit(table, n_boot=50, full_extras=True)
    assert full.to_dict()["panels"][0]["group_pairs_table"] == "group_pairs"
    assert "group_pairs" in full.tables


def test_the_left_out_pair_table_is_also_a_study_warning(tmp_path, monkeypatch):
    monkeypatch.setattr(analyses, "GROUP_PAIRS_MAX_RATERS", 3)
    result = audit(_table(tmp_path), n_boot=50)
    assert sum("pairs) is left out of the tables" in w["message"] for w in result.warnings) == 1


def test_results_of_a_large_panel_are_written_compact_with_the_same_content(tmp_path, monkeypatch):
    import json

    import calibrate.writing as writing

    result = audit(_table(tmp_path / "study"), n_boot=50)
    writing.write_audit(result, tmp_path / "indented", pdf=False)
    monkeypatch.setattr(writing, "COMPACT_RESULTS_RATERS", 2)
    writing.write_audit(result, tmp_path / "compact", pdf=False)
    indented = (tmp_path / "indented" / "results.json").read_text("utf-8")
    compact = (tmp_path / "compact" / "results.json").read_text("utf-8")
    assert compact.count("\n") == 1 and len(compact) < 0.8 * len(indented)
    assert json.loads(compact) == json.loads(indented)
