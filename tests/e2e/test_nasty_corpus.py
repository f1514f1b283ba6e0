"""Every nasty input of tests/data/nasty/ ends as its expect.toml says: `check` and `audit`
either succeed (exit 0) or stop with exit 2 and one clear message holding the pinned
phrase, never a traceback; `init`, where a case asks for it, too. The corpus folders are
only read: the audit writes into tmp_path, and a test checks that no corpus byte changed.

The commands run in-process through click's CliRunner (the same code path as the console
script, much faster than a subprocess per case).
"""

from __future__ import annotations

import hashlib
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from calibrate.cli import main

CORPUS = Path(__file__).resolve().parents[1] / "data" / "nasty"
CASES = sorted(p.name for p in CORPUS.iterdir() if (p / "expect.toml").is_file())


def _expect(name: str) -> dict:
    return tomllib.loads((CORPUS / name / "expect.toml").read_text(encoding="utf-8"))


def _invoke(args: list[str]):
    result = CliRunner().invoke(main, args)
    # a SystemExit is click's way of ending with a code; anything else escaped as a crash
    crashed = result.exception is not None and not isinstance(result.exception, SystemExit)
    assert not crashed, f"{args[0]} crashed: {result.exception!r}\n{result.output}"
    assert "Traceback" not in result.output
    return result


def _spec(name: str) -> str:
    spec = _expect(name).get("spec", "study.toml")
    return str(CORPUS / name) if spec == "." else str(CORPUS / name / spec)


def _corpus_digest() -> dict[str, str]:
    return {str(p.relative_to(CORPUS)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(CORPUS.rglob("*")) if p.is_file() and "__pycache__" not in p.parts}


def test_the_corpus_holds_every_case_the_issue_lists():
    wanted = {"inf_cue", "overflow_cue", "huge_integer_cue", "inf_judgment_open_scale",
              "inf_criterion", "na_rater_id", "none_is_a_level", "cue_named_like_missing_term",
              "cue_named_like_level_term", "string_boolean", "labels_out_of_order",
              "xlsx_random_bytes", "xlsx_truncated", "xlsx_empty", "parquet_garbage",
              "latin1_past_64kb", "header_only_without_cues", "cue_named_row",
              "rater_column_named_file", "continuous_only_min", "continuous_only_max",
              "rubric_weight_inf", "rubric_weight_nan", "scale_min_nan", "empty_file",
              "random_bytes_csv", "duplicate_column_names", "byte_order_mark",
              "semicolon_delimited", "very_long_ids", "id_with_a_line_break", "cue_all_missing",
              "spec_not_toml", "spec_names_a_missing_table", "spec_names_a_folder"}
    assert wanted <= set(CASES)


@pytest.mark.parametrize("name", CASES)
def test_check_ends_as_expected(name):
    expect = _expect(name)
    result = _invoke(["check", _spec(name)])
    assert result.exit_code == expect["exit"], result.output
    assert expect["phrase"] in result.output


@pytest.mark.parametrize("name", CASES)
def test_audit_ends_as_expected(name, tmp_path):
    expect = _expect(name)
    result = _invoke(["audit", _spec(name), "--out", str(tmp_path / "out"), "--no-pdf"])
    assert result.exit_code == expect["exit"], result.output
    if expect["exit"] == 0:
        assert (tmp_path / "out" / "results.json").is_file()
    else:
        assert expect["phrase"] in result.output
        assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("name", [n for n in CASES if "init" in _expect(n)])
def test_init_ends_as_expected(name, tmp_path):
    init = _expect(name)["init"]
    draft = tmp_path / "draft.toml"
    result = _invoke(["init", str(CORPUS / name / init["table"]), "--out", str(draft)])
    assert result.exit_code == init["exit"], result.output
    shown = result.output + (draft.read_text(encoding="utf-8") if draft.is_file() else "")
    assert init["phrase"] in shown


def test_problems_are_one_paragraph_per_problem():
    """An error names its problem on one line: no raw line break from a cell leaks into it."""
    result = _invoke(["check", _spec("id_with_a_line_break")])
    problem_lines = [line for line in result.output.splitlines() if line.startswith("  - ")]
    assert len(problem_lines) == 1 and "second" not in result.output


def test_the_corpus_is_never_changed(tmp_path):
    before = _corpus_digest()
    for name in ("na_rater_id", "inf_cue", "spec_is_a_folder"):
        _invoke(["audit", _spec(name), "--out", str(tmp_path / name), "--no-pdf"])
    assert _corpus_digest() == before
