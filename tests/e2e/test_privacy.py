"""Privacy end to end: pseudonymised audits name no rater, index.csv finds every report,
ids in any script print in the reports, the terminal never gets raw control characters,
and results.json records what a later reader needs to verify the audit."""

import hashlib
import io
import json
import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pandas as pd
import pytest

from calibrate.output.pseudonyms import PseudonymKey, default_key_path, id_replacer
from calibrate.safe_files import terminal_text
from tests.helpers import simple_judgments, write_study
from tests.pdf_text import page_texts

NAMES = {"r1": "王小明", "r2": "Ольга Петрова", "r3": "Ingrid Alvarsson", "r4": "Tomasz",
         "r5": "Birgit"}


def run(*args):
    return subprocess.run([sys.executable, "-m", "calibrate", *map(str, args)], capture_output=True,
                          text=True, timeout=300)


@pytest.fixture(scope="module")
def named_study(tmp_path_factory):
    df = simple_judgments(n_raters=5, n_cases=14)
    df["rater"] = df["rater"].map(NAMES)
    return write_study(tmp_path_factory.mktemp("named") / "study", df)


def texts_of(folder: Path):
    """(relative name, text) of every file in the folder: PDF page text, every member of the
    workbook, and every other file decoded as UTF-8."""
    for path in sorted(folder.rglob("*")):
        if not path.is_file():
            continue
        rel = str(path.relative_to(folder))
        if path.suffix == ".pdf":
            yield rel, "\n".join(page_texts(path))
        elif path.suffix == ".xlsx":
            with zipfile.ZipFile(path) as z:
                yield rel, "\n".join(z.read(n).decode("utf-8") for n in z.namelist())
        else:
            yield rel, path.read_bytes().decode("utf-8")


def whole_word(text: str, word: str) -> bool:
    return re.search(r"(?<!\w)" + re.escape(word) + r"(?!\w)", text) is not None


@pytest.fixture(scope="module")
def pseudonymised(named_study, tmp_path_factory):
    out = tmp_path_factory.mktemp("pseudo") / "audit"
    proc = run("audit", named_study, "--out", out, "--pseudonymise")
    assert proc.returncode == 0, proc.stderr
    return out, proc


def test_pseudonymised_outputs_name_no_rater(pseudonymised):
    out, proc = pseudonymised
    files = dict(texts_of(out))
    assert "results.json" in files and any(name.endswith(".pdf") for name in files)
    for rater in NAMES.values():
        for part in [rater, *rater.split()]:
            leaks = [name for name, text in files.items() if whole_word(text, part) or part in name]
            assert not leaks, f"{part!r} appears in {leaks}"
            assert not whole_word(proc.stdout + proc.stderr, part)


def test_key_file_lies_outside_and_maps_codes_to_ids_and_reports(pseudonymised):
    out, proc = pseudonymised
    key_path = default_key_path(out)
    assert key_path.parent == out.parent and str(key_path) in proc.stdout
    key = PseudonymKey.open(key_path)
    assert set(key.codes) == set(NAMES.values())
    index = pd.read_csv(out / "index.csv", dtype=str, keep_default_na=False)
    assert sorted(index["rater"]) == sorted(key.codes.values())
    for code, report in zip(index["rater"], index["report"]):
        assert (out / report).is_file() and key.reports[code] == report
        assert code in "\n".join(page_texts(out / report))[:2000]  # the code heads its own report


def test_rerun_with_the_key_gives_the_same_codes_and_bytes(pseudonymised, named_study, tmp_path):
    out, _ = pseudonymised
    key_path = default_key_path(out)
    codes = PseudonymKey.open(key_path).codes
    again = tmp_path / "again"
    proc = run("audit", named_study, "--out", again, "--pseudonymise", "--key-file", key_path, "--no-pdf")
    assert proc.returncode == 0, proc.stderr
    assert PseudonymKey.open(key_path).codes == codes
    for name in ("results.json", "tables/raters.csv", "policies.json"):
        assert (again / name).read_bytes() == (out / name).read_bytes(), name


def test_codes_are_keyed_stable_and_new_ids_leave_old_codes(tmp_path):
    key = PseudonymKey(path=tmp_path / "k.csv", salt=bytes(32))
    first = key.assign(["ann", "bo"])
    key.write()
    reread = PseudonymKey.open(tmp_path / "k.csv")
    assert reread.assign(["bo", "cy", "ann"]) == {"bo": first["bo"], "cy": reread.codes["cy"],
                                                   "ann": first["ann"]}
    other_salt = PseudonymKey(path=tmp_path / "k2.csv", salt=bytes([1]) * 32).assign(["ann"])
    assert other_salt["ann"] != first["ann"]  # the code depends on the secret salt
    assert all(re.fullmatch(r"R-[A-Z2-7]{6}", c) for c in first.values())


def test_ids_that_look_like_formulas_survive_the_key_file(tmp_path):
    key = PseudonymKey(path=tmp_path / "k.csv", salt=bytes(32))
    key.assign(["=cmd", "plain", "a,b"])
    key.write()
    assert set(PseudonymKey.open(tmp_path / "k.csv").codes) == {"=cmd", "plain", "a,b"}


def test_a_foreign_file_at_the_key_path_is_refused_and_kept(named_study, tmp_path):
    key = tmp_path / "mine.csv"
    key.write_text("someone's notes\n")
    proc = run("audit", named_study, "--out", tmp_path / "o", "--pseudonymise", "--key-file", key,
               "--no-pdf")
    assert proc.returncode == 2 and "not a calibrate pseudonym key" in proc.stderr
    assert key.read_text() == "someone's notes\n" and not (tmp_path / "o").exists()


def test_key_inside_the_output_is_refused(named_study, tmp_path):
    proc = run("audit", named_study, "--out", tmp_path / "o", "--pseudonymise", "--key-file",
               tmp_path / "o" / "key.csv", "--no-pdf")
    assert proc.returncode == 2 and "kept apart" in proc.stderr


def test_whole_word_replacement_leaves_longer_words():
    swap = id_replacer({"ann": "R-1", "ann-2": "R-2"})
    assert swap("ann and ann-2 met anna") == "R-1 and R-2 met anna"


def test_index_maps_every_id_to_a_readable_report_and_cjk_prints(named_study, tmp_path):
    out = tmp_path / "plain"
    proc = run("audit", named_study, "--out", out)
    assert proc.returncode == 0, proc.stderr
    index = pd.read_csv(out / "index.csv", dtype=str, keep_default_na=False)
    assert sorted(index["rater"]) == sorted(NAMES.values())
    assert "raters/王小明.pdf" in set(index["report"]) and "raters/Ольга_Петрова.pdf" in set(index["report"])
    for rater, report in zip(index["rater"], index["report"]):
        first_page = page_texts(out / report)[0]
        assert rater in first_page  # the id reads back from the PDF as written
    fonts = (out / "raters" / "王小明.pdf").read_bytes()
    assert b"WenQuanYiMicroHei" in fonts  # the CJK font is embedded, not assumed on the reader


@pytest.mark.parametrize("raw, shown", [
    ("a\x1b[31mred", "a\\e[31mred"), ("x\u202etxt", "x\\u202etxt"), ("two\nlines", "two\\nlines"),
    ("bell\x07", "bell\\x07"), ("c1\x9b", "c1\\x9b"), ("王小明", "王小明"), ("zw\u200bj", "zw\\u200bj")])
def test_terminal_text_escapes_controls_and_bidi(raw, shown):
    assert terminal_text(raw, keep_lines=False) == shown


def test_terminal_text_keeps_the_tools_own_lines():
    assert terminal_text("one\ntwo\tthree") == "one\ntwo\tthree"


def test_every_echo_of_the_cli_goes_through_the_sanitiser():
    source = Path(__file__).resolve().parents[2].joinpath("calibrate", "cli.py").read_text("utf-8")
    assert source.count("click.echo(") == 1  # inside echo(), which sanitises
    assert "print(" not in source


def test_an_escape_sequence_in_a_path_reaches_the_terminal_escaped(named_study, tmp_path):
    out = tmp_path / "o\x1b]0;owned\x07\u202e"
    proc = run("audit", named_study, "--out", out, "--no-pdf")
    assert proc.returncode == 0, proc.stderr
    for stream in (proc.stdout, proc.stderr):
        assert "\x1b" not in stream and "\u202e" not in stream and "\x07" not in stream
    assert "\\e]0;owned" in proc.stdout


def test_results_record_the_spec_inputs_and_libraries(named_study, tmp_path):
    import numpy
    import reportlab
    import tomllib

    out = tmp_path / "prov"
    assert run("audit", named_study, "--out", out, "--no-pdf").returncode == 0
    results = json.loads((out / "results.json").read_text("utf-8"))
    spec = results["provenance"]["spec"]
    raw = named_study.read_bytes()
    assert spec["sha256"] == hashlib.sha256(raw).hexdigest() and spec["text"] == raw.decode("utf-8")
    assert spec["parsed"]["cues"] == tomllib.loads(raw.decode("utf-8"))["cues"]
    data = named_study.parent / "judgments.csv"
    assert {"path": "judgments.csv", "sha256": hashlib.sha256(data.read_bytes()).hexdigest()} in results["inputs"]
    libraries = results["provenance"]["libraries"]
    assert libraries["numpy"] == numpy.__version__ and libraries["reportlab"] == reportlab.Version
    assert libraries["python"] == ".".join(map(str, sys.version_info[:3]))
    assert results["provenance"]["pseudonymised"] is False


def test_a_spec_naming_raters_is_withheld_when_pseudonymised(tmp_path):
    df = simple_judgments(n_raters=4, n_cases=12)
    df["phase"] = ["before" if i % 2 else "after" for i in range(len(df))]
    df["rater"] = df["rater"].map(NAMES)
    spec = write_study(tmp_path / "s", df, extra_columns='phase = "phase"',
                       extra='[phases]\norder = ["before", "after"]\ntrained = ["Tomasz"]\n')
    out = tmp_path / "o"
    proc = run("audit", spec, "--out", out, "--no-pdf", "--pseudonymise")
    assert proc.returncode == 0, proc.stderr
    record = json.loads((out / "results.json").read_text("utf-8"))["provenance"]["spec"]
    assert record["text"] is None and "pseudonymised" in record["text_withheld"]
    assert record["sha256"] == hashlib.sha256(spec.read_bytes()).hexdigest()
    assert "Tomasz" not in json.dumps(record, ensure_ascii=False)
    assert not io.StringIO((out / "results.json").read_text("utf-8")).read().count("Tomasz")
