"""Safe writing: sanitised file names, formula escaping, folders that appear whole."""

import unicodedata

import pytest
from hypothesis import given
from hypothesis import strategies as st

from calibrate.errors import OutputExistsError
from calibrate.output.folder import OutputFolder
from calibrate.safe_files import escape_formula, safe_file_stem


@given(st.text(max_size=200))
def test_file_stems_are_always_safe(raw):
    stem = safe_file_stem(raw)
    assert stem and len(stem.encode("utf-8")) <= 200
    assert "/" not in stem and "\\" not in stem and not stem.startswith(".")
    assert all(ch.isalnum() or ch in "._-" or unicodedata.category(ch).startswith("M") for ch in stem)
    assert not unicodedata.category(stem[0]).startswith("M")


def test_clashing_ids_get_distinct_names():
    taken: set[str] = set()
    assert safe_file_stem("a/b", taken=taken) == "a_b"
    assert safe_file_stem("a b", taken=taken) == "a_b_2"
    assert safe_file_stem("../etc/passwd") == "etc_passwd"
    assert safe_file_stem("CON") == "rater_CON"


@pytest.mark.parametrize("raw, stem", [
    ("王小明", "王小明"), ("Zoë Brandt", "Zoë_Brandt"), ("Ольга", "Ольга"), ("سارة", "سارة"),
    ("x\u202etxt.exe", "x_txt.exe"), ("a\x1b[31mred", "a_31mred"), ("\u0301abc", "abc")])
def test_file_stems_keep_every_script_readable(raw, stem):
    assert safe_file_stem(raw) == stem


def test_file_stems_clash_ignoring_case_in_any_script():
    taken: set[str] = set()
    assert [safe_file_stem(r, taken=taken) for r in ("Ärzte", "ärzte", "ÄRZTE")] == [
        "Ärzte", "ärzte_2", "ÄRZTE_3"]


@pytest.mark.parametrize("cell, expected", [
    ("=SUM(A1)", "'=SUM(A1)"), ("+1", "'+1"), ("-cmd", "'-cmd"), ("@x", "'@x"),
    ("plain", "plain"), (-3.5, -3.5), (7, 7)])
def test_formula_like_text_is_escaped_and_numbers_stay_numbers(cell, expected):
    assert escape_formula(cell) == expected


def test_failed_write_leaves_no_folder(tmp_path):
    target = tmp_path / "out"
    with pytest.raises(RuntimeError):
        with OutputFolder(target) as tmp:
            (tmp / "half.txt").write_text("x")
            raise RuntimeError("boom")
    assert not target.exists()
    assert list(tmp_path.iterdir()) == []


def test_existing_folder_needs_overwrite(tmp_path):
    (tmp_path / "out").mkdir()
    with pytest.raises(OutputExistsError, match="--overwrite"):
        OutputFolder(tmp_path / "out")


def test_csv_tables_escape_formula_text_and_keep_numbers():
    import pandas as pd

    from calibrate.output.tables import csv_bytes

    frame = pd.DataFrame({"rater": ["=HYPERLINK(1)", "ok"], "note": pd.Series(["@x", None], dtype="string"),
                          "value": [-1.5, 2.0]})
    text = csv_bytes(frame).decode()
    assert "'=HYPERLINK(1)" in text and "'@x" in text
    assert "-1.5" in text and "'-1.5" not in text


def test_written_files_are_ordinary_files_not_private_temporaries(tmp_path):
    import os
    import stat

    from calibrate.safe_files import atomic_write_text

    atomic_write_text(tmp_path / "a.txt", "x")
    mode = stat.S_IMODE(os.stat(tmp_path / "a.txt").st_mode)
    umask = os.umask(0)
    os.umask(umask)
    assert mode == 0o666 & ~umask


# --------------------------------------------------------------------- output safety


def _marked_output(path, text="old"):
    from calibrate.output.folder import KIND_RESULTS, MARKER_FILE, marker_bytes

    path.mkdir(parents=True)
    (path / MARKER_FILE).write_bytes(marker_bytes(KIND_RESULTS))
    (path / "results.json").write_text(text)
    return path


def test_overwrite_refuses_a_folder_without_the_marker(tmp_path):
    inputs = tmp_path / "study"
    inputs.mkdir()
    (inputs / "judgments.csv").write_text("rater,case\n")
    with pytest.raises(OutputExistsError, match="not written by calibrate"):
        OutputFolder(inputs, overwrite=True)
    assert (inputs / "judgments.csv").read_text() == "rater,case\n"


def test_overwrite_replaces_a_marked_folder_and_marks_the_new_one(tmp_path):
    from calibrate.output.folder import is_tool_output

    target = _marked_output(tmp_path / "out")
    with OutputFolder(target, overwrite=True) as staging:
        (staging / "results.json").write_text("new")
    assert (target / "results.json").read_text() == "new"
    assert is_tool_output(target)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # no lock, no staging, no old copy


def test_marker_bytes_are_the_same_on_every_run():
    from calibrate.output.folder import KIND_RESULTS, marker_bytes

    assert marker_bytes(KIND_RESULTS) == marker_bytes(KIND_RESULTS)
    assert b'"kind": "results"' in marker_bytes(KIND_RESULTS)


def test_folder_that_appears_during_the_run_is_not_replaced(tmp_path):
    target = tmp_path / "out"
    with pytest.raises(OutputExistsError, match="appeared while the audit ran"):
        with OutputFolder(target) as staging:
            (staging / "results.json").write_text("new")
            target.mkdir()
            (target / "someone.txt").write_text("theirs")
    assert (target / "someone.txt").read_text() == "theirs"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_output_may_not_hold_or_sit_above_an_input(tmp_path):
    from calibrate.errors import OutputPlaceError

    spec = tmp_path / "study" / "study.toml"
    spec.parent.mkdir()
    spec.write_text("")
    for out in (tmp_path / "study", tmp_path):
        with pytest.raises(OutputPlaceError, match="input"):
            OutputFolder(out, overwrite=True, protect=(spec, spec.parent))
    OutputFolder(tmp_path / "study" / "results", protect=(spec, spec.parent))  # below is fine


def test_second_run_into_a_target_is_locked_out_and_a_dead_runs_lock_is_taken_over(tmp_path):
    from calibrate.errors import OutputLockedError

    target = tmp_path / "out"
    with OutputFolder(target) as staging:
        (staging / "results.json").write_text("first")
        with pytest.raises(OutputLockedError, match="another calibrate run"):
            with OutputFolder(target):
                pass
    assert (target / "results.json").read_text() == "first"
    # a lock left by a process that no longer exists: pid far above any pid_max in use
    (tmp_path / ".again.lock").write_text("999999999\n")
    with OutputFolder(tmp_path / "again") as staging:
        (staging / "results.json").write_text("x")
    assert not (tmp_path / ".again.lock").exists()


def test_leftover_staging_of_a_killed_run_is_removed_by_the_next_run(tmp_path):
    from calibrate.output.folder import KIND_STAGING, MARKER_FILE, marker_bytes

    left = tmp_path / ".out.staging-abc123"
    left.mkdir()
    (left / MARKER_FILE).write_bytes(marker_bytes(KIND_STAGING))
    (left / "results.json").write_text("private")
    unrelated = tmp_path / ".out.staging-notours"  # no marker: not ours, kept
    unrelated.mkdir()
    with OutputFolder(tmp_path / "out") as staging:
        (staging / "results.json").write_text("x")
    assert not left.exists() and unrelated.exists()


def test_interrupt_inside_the_block_removes_the_staging_folder(tmp_path):
    target = _marked_output(tmp_path / "out")
    with pytest.raises(KeyboardInterrupt):
        with OutputFolder(target, overwrite=True) as staging:
            (staging / "half.txt").write_text("x")
            raise KeyboardInterrupt
    assert (target / "results.json").read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_unwritable_parent_and_odd_places_are_refused_before_any_work(tmp_path):
    from calibrate.errors import OutputPlaceError

    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    with pytest.raises(OutputPlaceError, match="cannot write"):
        with OutputFolder(blocker / "out"):
            pass
    with pytest.raises(OutputPlaceError, match="not a folder"):
        OutputFolder(blocker, overwrite=True)
    with pytest.raises(OutputPlaceError, match="current folder"):
        OutputFolder(".")
    with pytest.raises(OutputPlaceError, match="mount point"):
        OutputFolder("/proc", overwrite=True)
    assert blocker.read_text() == "x"


class _NoResult:
    raters = ()

    def to_dict(self):
        return {}


def test_a_failed_write_becomes_one_clear_error_and_keeps_the_old_output(tmp_path, monkeypatch):
    import errno

    from calibrate import writing
    from calibrate.errors import OutputPlaceError

    target = _marked_output(tmp_path / "out")

    def full_disk(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(writing, "atomic_write_text", full_disk)
    with pytest.raises(OutputPlaceError, match="disk is full"):
        writing.write_audit(_NoResult(), target, overwrite=True, pdf=False)
    assert (target / "results.json").read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
