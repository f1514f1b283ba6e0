"""The README's Python examples run as printed, on the demo study written where they expect it."""

import json
import re
from pathlib import Path

import pandas as pd

from calibrate.data.demo import write_demo

README = Path(__file__).resolve().parents[2] / "README.md"


def python_blocks() -> list[str]:
    return re.findall(r"```python\n(.*?)```", README.read_text(), flags=re.S)


def test_readme_python_examples_run(tmp_path, monkeypatch):
    blocks = python_blocks()
    assert blocks, "README.md has no Python example"
    write_demo(tmp_path)  # study.toml and its tables, as the example names them
    monkeypatch.chdir(tmp_path)
    spaces = []
    for code in blocks:
        spaces.append({})
        exec(compile(code, "README.md", "exec"), spaces[-1])
    results = json.loads((tmp_path / "reports" / "mine" / "results.json").read_text())
    assert results["raters"]
    notebook = next(ns for ns in spaces if "judgments" in ns)   # the notebook example
    assert notebook["judgments"].equals(pd.read_csv(tmp_path / "judgments_autumn.csv"))
    assert len(repr(notebook["result"]).splitlines()) <= 6
    assert {"Fleiss' kappa", "Gwet's AC1"} <= set(notebook["agreement"]["label"])
    assert len(notebook["policies"]) == len(notebook["flags"])
