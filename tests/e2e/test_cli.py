"""The command line end to end, in a temporary folder: success, clean errors, outputs."""

import json
import subprocess
import sys

import jsonschema
import pytest

from calibrate.output.tables import results_schema
from tests.helpers import simple_judgments, write_study


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "calibrate", *map(str, args)], capture_output=True,
                          text=True, cwd=cwd)


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    proc = run("demo", "--out", folder / "study")
    assert proc.returncode == 0, proc.stderr
    return folder / "study"


def test_demo_init_check_round_trip(demo_folder, tmp_path):
    # init drafts a spec from the judgments table alone (cues in a separate table are not known
    # to it); check accepts the demo's own spec.
    proc = run("check", demo_folder / "study.toml")
    assert proc.returncode == 0, proc.stderr
    assert "The data can be analysed." in proc.stdout
    assert "Rater-case network: connected" in proc.stdout
    assert "Traceback" not in proc.stderr

    merged = tmp_path / "merged.csv"
    import pandas as pd

    judg = pd.read_csv(demo_folder / "judgments_autumn.csv")
    cases = pd.read_csv(demo_folder / "applicants.csv").drop(columns=["round", "first_year_result"])
    judg.merge(cases, on="applicant").to_csv(merged, index=False)
    proc = run("init", merged)
    assert proc.returncode == 0, proc.stderr
    draft = (tmp_path / "study.toml").read_text()
    assert 'rater = "reviewer"' in draft and 'case = "applicant"' in draft
    assert 'judgment = "score"' in draft and 'sequence = "read_order"' in draft
    assert '"recommendation" = "categorical"' in draft
    assert '"test_score" = { type = "numeric", missing = "indicator" }' in draft
    proc = run("check", tmp_path / "study.toml")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "14 raters, 350 cases" in proc.stdout


def test_non_numeric_judgment_exits_2_naming_row_and_column(tmp_path):
    df = simple_judgments()
    df["score"] = df["score"].astype(object)
    df.loc[7, "score"] = "n/a?"
    proc = run("check", write_study(tmp_path, df))
    assert proc.returncode == 2
    assert "row 9, column 'score'" in proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout


def test_misspelt_key_names_it_and_suggests_the_right_one(tmp_path):
    path = write_study(tmp_path, simple_judgments())
    path.write_text(path.read_text().replace("scale =", "scael ="))
    proc = run("check", path)
    assert proc.returncode == 2
    assert "unknown key 'scael' in [judgment]; did you mean 'scale'?" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_audit_writes_valid_results_and_refuses_to_overwrite(demo_folder, tmp_path):
    out = tmp_path / "out"
    # --no-pdf: this test is about results.json and the overwrite rule; the PDFs have
    # their own tests (tests/e2e/test_reports.py), and each build of them costs ~15 s.
    proc = run("audit", demo_folder / "study.toml", "--out", out, "--no-pdf")
    assert proc.returncode == 0, proc.stderr
    results = json.loads((out / "results.json").read_text())
    jsonschema.validate(results, results_schema())
    assert results["phases"] == ["before", "after"]
    assert {i["path"] for i in results["inputs"]} == {"judgments_autumn.csv", "judgments_spring.csv",
                                                      "applicants.csv"}
    assert results["seed"] == 20261201
    assert (out / "audit.xlsx").is_file() and (out / "tables" / "raters.csv").is_file()
    # What it prints: a count per flag, at most five raters, a pointer; never a line per rater-flag
    lines = proc.stdout.splitlines()
    flag_lines = [ln for ln in lines if ln.strip().endswith("]") and ln.strip()[0].isdigit()]
    flags = {f for e in results["raters"] for f in e["flags"]}
    assert len(flag_lines) == len(flags) and len(lines) <= 5 + len(flags) + 5 + 1, proc.stdout
    assert any(ln.startswith(f"Notes: {len(results['warnings'])} from reading") for ln in lines)
    assert "Juniper (before, after): judgments are associated with an attribute that must not count" in map(str.strip, lines)
    assert any("tables/raters.csv" in ln for ln in lines)
    assert "(tables/notes.csv" not in proc.stderr and (out / "tables" / "notes.csv").is_file()

    again = run("audit", demo_folder / "study.toml", "--out", out, "--no-pdf")
    assert again.returncode == 2 and "--overwrite" in again.stderr
    assert "Traceback" not in again.stderr
    third = run("audit", demo_folder / "study.toml", "--out", out, "--overwrite", "--no-pdf")
    assert third.returncode == 0, third.stderr
    assert json.loads((out / "results.json").read_text()) == results


def test_same_input_and_seed_give_identical_files(demo_folder, tmp_path):
    outs = []
    for name in ("a", "b"):
        # the files compared are written before the PDFs, which have their own
        # byte-identity test; --no-pdf keeps this test to the analysis
        proc = run("audit", demo_folder / "study.toml", "--out", tmp_path / name, "--no-pdf")
        assert proc.returncode == 0, proc.stderr
        outs.append(tmp_path / name)
    for rel in ("results.json", "audit.xlsx", "tables/raters.csv"):
        assert (outs[0] / rel).read_bytes() == (outs[1] / rel).read_bytes(), rel


def test_missing_spec_file_is_a_clean_error(tmp_path):
    proc = run("audit", tmp_path / "none.toml", "--out", tmp_path / "o")
    assert proc.returncode == 2 and "does not exist" in proc.stderr
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "o").exists()


def test_demo_is_deterministic(tmp_path):
    for name in ("a", "b"):
        assert run("demo", "--out", tmp_path / name).returncode == 0
    for f in ("applicants.csv", "judgments_autumn.csv", "judgments_spring.csv", "study.toml"):
        assert (tmp_path / "a" / f).read_bytes() == (tmp_path / "b" / f).read_bytes()
