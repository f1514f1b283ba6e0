"""Commands load only what they use: `--help` and `check` none of the model, plotting or PDF
libraries, `audit --no-pdf` no plotting or PDF code (each checked in a fresh process)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

from tests.helpers import simple_judgments, write_study

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("statsmodels", "pingouin", "matplotlib", "reportlab")

CHILD = """
import json, runpy, sys
sys.argv = ["calibrate"] + json.loads(sys.argv[1])
try:
    runpy.run_module("calibrate", run_name="__main__")
except SystemExit as stop:
    code = stop.code
else:
    code = 0
print(json.dumps({"code": code, "loaded": sorted(m for m in %r if m in sys.modules)}))
""" % (HEAVY,)


def _loaded(args: list[str]) -> dict:
    proc = subprocess.run([sys.executable, "-c", CHILD, json.dumps(args)], capture_output=True,
                          text=True, check=False, cwd=ROOT, env={"PATH": "/usr/bin:/bin",
                                                                 "PYTHONPATH": str(ROOT)})
    return json.loads(proc.stdout.strip().splitlines()[-1])


def test_help_and_check_load_no_model_plotting_or_pdf_library(tmp_path):
    spec = write_study(tmp_path, simple_judgments())
    assert _loaded(["--help"]) == {"code": 0, "loaded": []}
    assert _loaded(["check", str(spec)]) == {"code": 0, "loaded": []}


def test_audit_without_pdfs_loads_no_plotting_or_pdf_code(tmp_path):
    spec = write_study(tmp_path / "study", simple_judgments())
    out = _loaded(["audit", str(spec), "--out", str(tmp_path / "out"), "--no-pdf"])
    assert out["code"] in (0, None)
    assert out["loaded"] == []
