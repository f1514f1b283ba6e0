"""Safe writing: sanitised file names, formula escaping, folders that appear whole."""

import pytest
from hypothesis import given
from hypothesis import strategies as st

from calibrate.errors import OutputExistsError
from calibrate.output.folder import OutputFolder
from calibrate.safe_files import escape_formula, safe_file_stem


@given(st.text(max_size=200))
def test_file_stems_are_always_safe(raw):
    stem = safe_file_stem(raw)
    assert stem and len(stem) <= 86
    assert "/" not in stem and "\\" not in stem and not stem.startswith(".")
    assert all(ch.isalnum() or ch in "._-" for ch in stem)


def test_clashing_ids_get_distinct_names():
    taken: set[str] = set()
    assert safe_file_stem("a/b", taken=taken) == "a_b"
    assert safe_file_stem("a b", taken=taken) == "a_b_2"
    assert safe_file_stem("../etc/passwd") == "etc_passwd"
    assert safe_file_stem("CON") == "rater_CON"


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
