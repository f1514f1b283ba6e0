"""The one-direction rule: statistics modules never load plotting, PDF or CLI code."""

import subprocess
import sys

STATS_MODULES = ["calibrate.linalg", "calibrate.cues", "calibrate.study", "calibrate.ingest",
                 "calibrate.summary", "calibrate.audit"]


def test_statistics_do_not_import_plotting_or_pdf_code():
    code = ("import importlib, sys, pkgutil, calibrate\n"
            "mods = " + repr(STATS_MODULES) + "\n"
            "mods += ['calibrate.' + m.name for m in pkgutil.iter_modules(calibrate.__path__)\n"
            "         if m.name not in ('cli', '__main__', 'report') and not m.ispkg]\n"
            "for m in mods: importlib.import_module(m)\n"
            "bad = [m for m in ('matplotlib', 'reportlab', 'pingouin', 'calibrate.cli') if m in sys.modules]\n"
            "print(','.join(bad))\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == ""
