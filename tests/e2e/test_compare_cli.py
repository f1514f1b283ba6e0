"""`calibrate compare` end to end on the demo: a valid comparison.json, tables, refusals, same bytes."""

import json

import jsonschema
import pandas as pd

from calibrate.output.tables import comparison_schema
from tests.e2e.test_cli import demo_folder, run  # noqa: F401  (demo_folder is a fixture)
from tests.helpers import simple_judgments, write_study


def test_compare_writes_valid_json_and_tables_and_same_bytes(demo_folder, tmp_path):
    spec = demo_folder / "study.toml"
    before = {p: p.read_bytes() for p in demo_folder.iterdir()}
    proc = run("compare", spec, "--out", tmp_path / "a", "--seed", 7)
    assert proc.returncode == 0, proc.stderr
    assert "7 trained, 7 controls" in proc.stdout
    doc = json.loads((tmp_path / "a" / "comparison.json").read_text())
    jsonschema.validate(doc, comparison_schema())
    assert doc["seed"] == 7 and doc["phases"] == ["before", "after"]
    assert doc["panel"]["training_effect"]["misallocation"]["ci_high"] < 0
    assert (tmp_path / "a" / "training-report.pdf").is_file()
    assert doc["summary"][0] in proc.stdout
    changes = pd.read_csv(tmp_path / "a" / "tables" / "comparison_changes.csv")
    assert {"rater", "metric", "from", "to", "delta", "ci_low", "ci_high", "p_value"} <= set(changes.columns)
    assert {p: p.read_bytes() for p in demo_folder.iterdir()} == before  # inputs untouched

    refused = run("compare", spec, "--out", tmp_path / "a")
    assert refused.returncode == 2 and "--overwrite" in refused.stderr
    again = run("compare", spec, "--out", tmp_path / "a", "--seed", 7, "--overwrite", "--no-pdf")
    assert again.returncode == 0, again.stderr
    assert json.loads((tmp_path / "a" / "comparison.json").read_text()) == doc
    assert not (tmp_path / "a" / "training-report.pdf").exists()  # --no-pdf
    # Same seed, same bytes, whatever --jobs (compare runs the two phases in threads).
    run("compare", spec, "--out", tmp_path / "b", "--seed", 7, "--no-pdf", "--jobs", 1)
    for name in ("comparison.json", "comparison.xlsx", "tables/comparison_changes.csv",
                 "tables/comparison_panel.csv", "tables/comparison_effects.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


def test_study_without_phases_is_a_clean_error(tmp_path):
    spec = write_study(tmp_path, simple_judgments())
    proc = run("compare", spec, "--out", tmp_path / "out")
    assert proc.returncode == 2
    assert "two phases" in proc.stderr
    assert not (tmp_path / "out").exists()
