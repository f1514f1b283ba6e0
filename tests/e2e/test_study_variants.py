"""Audits of studies unlike the demo: each must finish, write valid results and name its gaps.

Minimal continuous study (no sequence, criterion, rubric, excluded, phases), binary decisions
with word labels, a rater with too few cases, and a rater-case network in two parts.
"""

import json
import subprocess
import sys

import jsonschema
import numpy as np
import pandas as pd

from calibrate.output.tables import results_schema
from tests.helpers import write_study


def run(*args):
    return subprocess.run([sys.executable, "-m", "calibrate", *map(str, args)], capture_output=True,
                          text=True)


def _panel(n_raters=6, n_cases=60, seed=11, binary=False):
    rng = np.random.default_rng(seed)
    x1, x2, x3 = (rng.normal(size=n_cases).round(3) for _ in range(3))
    rows = []
    for r in range(n_raters):
        for c in rng.choice(n_cases, size=int(n_cases * 0.8), replace=False):
            latent = x1[c] + 0.6 * x2[c] - 0.3 * x3[c] + rng.normal(0, 0.6)
            value = ("admit" if latent > 0 else "decline") if binary else round(50 + 10 * latent, 2)
            rows.append({"rater": f"p{r + 1}", "case": f"f{c + 1}", "score": value,
                         "x1": x1[c], "x2": x2[c], "x3": x3[c]})
    return pd.DataFrame(rows)


def _audit(path, out, *extra):
    proc = run("audit", path, "--out", out, *extra)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    results = json.loads((out / "results.json").read_text())
    jsonschema.validate(results, results_schema())
    return results


CUES = 'x1 = "numeric"\nx2 = "numeric"\nx3 = "numeric"'


def test_minimal_continuous_study_with_reports(tmp_path):
    path = write_study(tmp_path / "s", _panel(), scale="continuous", jmin=0, jmax=100, cues=CUES)
    results = _audit(path, tmp_path / "out")
    assert results["phases"] == ["all"]
    entry = results["raters"][0]
    assert entry["policy"]["r"] > 0.8
    assert entry["lens"] is None and entry["alignment"] is None and entry["drift"] is None
    assert entry["retest"] is None  # no repeated cases
    assert results["panels"][0]["icc"]["a1"] > 0.3
    assert (tmp_path / "out" / "panel-summary.pdf").is_file()
    assert len(list((tmp_path / "out" / "raters").glob("*.pdf"))) == 6


def test_binary_decisions_with_word_labels(tmp_path):
    path = write_study(tmp_path / "s", _panel(binary=True), scale="binary", jmin=0, jmax=1, cues=CUES,
                       extra_judgment='labels = { admit = 1, decline = 0 }')
    results = _audit(path, tmp_path / "out", "--no-pdf")
    policy = results["raters"][0]["policy"]
    assert policy["logistic"] is not None and policy["logistic"]["tjur_r2"] > 0.2
    assert policy["logistic"]["weights"]["x1"] > 0  # planted: x1 raises the chance of admission
    assert results["panels"][0]["agreement"]["alpha_detail"]["level"] == "nominal"


def test_rater_with_too_few_cases_is_listed_not_fitted(tmp_path):
    df = _panel()
    few = df[df["rater"] == "p1"].head(4)
    df = pd.concat([df[df["rater"] != "p1"], few])
    path = write_study(tmp_path / "s", df, scale="continuous", jmin=0, jmax=100, cues=CUES)
    results = _audit(path, tmp_path / "out", "--no-pdf")
    p1 = next(e for e in results["raters"] if e["rater"] == "p1")
    assert p1["policy"] is None and "too_few_cases" in p1["flags"]
    assert any("p1" in w["message"] and "kept out of policy fits" in w["message"]
               for w in results["warnings"])


def test_network_in_two_parts_is_named(tmp_path):
    a = _panel(n_raters=3, seed=1)
    b = _panel(n_raters=3, seed=2)
    b = b.assign(rater=b["rater"].str.replace("p", "q"), case=b["case"].str.replace("f", "g"))
    path = write_study(tmp_path / "s", pd.concat([a, b]), scale="continuous", jmin=0, jmax=100,
                       cues=CUES)
    proc = run("check", path)
    assert proc.returncode == 0
    assert "2 separate parts" in proc.stdout and "p1, p2, p3 | q1, q2, q3" in proc.stdout
    results = _audit(path, tmp_path / "out", "--no-pdf")
    assert results["panels"][0]["connected"] is False


def test_rater_ids_in_other_scripts_print_as_written_and_become_safe_file_names(tmp_path):
    from pypdf import PdfReader

    df = _panel(n_raters=3)
    names = {"p1": "Zoë Ødegård", "p2": "Ярослава", "p3": "../=cmd"}
    df["rater"] = df["rater"].map(names)
    path = write_study(tmp_path / "s", df, scale="continuous", jmin=0, jmax=100, cues=CUES)
    _audit(path, tmp_path / "out")
    files = sorted(p.name for p in (tmp_path / "out" / "raters").glob("*.pdf"))
    assert files == ["Zoë_Ødegård.pdf", "cmd.pdf", "Ярослава.pdf"]  # readable in every script
    text = "".join(page.extract_text() for page in PdfReader(tmp_path / "out" / "raters" / "Zoë_Ødegård.pdf").pages)
    assert "Zoë Ødegård" in text and "Ярослава" not in text
    text = "".join(page.extract_text() for page in PdfReader(tmp_path / "out" / "raters" / "Ярослава.pdf").pages)
    assert "Ярослава" in text
    index = pd.read_csv(tmp_path / "out" / "index.csv", dtype=str, keep_default_na=False)
    assert dict(zip(index["rater"], index["report"]))["../=cmd"] == "raters/cmd.pdf"
