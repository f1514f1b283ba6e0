"""The one-direction rule: statistics modules never load plotting, PDF or CLI code.

One fresh process imports every module of the package except the CLI and the report
package (found on disk, so a new module is covered without editing this file) and
reports what each import left loaded. This single check stands for the whole package.
"""

import json
import subprocess
import sys
from pathlib import Path

import calibrate

PACKAGE_DIR = Path(calibrate.__file__).resolve().parent

#: Not statistics: the command line and the PDF report package may load anything.
NOT_STATISTICS = {"calibrate.cli", "calibrate.__main__"}
NOT_STATISTICS_PACKAGES = {"report"}

#: No statistics module may load these (pingouin loads matplotlib; the CLI loads all).
FORBIDDEN = ("matplotlib", "reportlab", "pingouin", "calibrate.cli")

#: The panel agreement modules compute with numpy and scipy alone; statsmodels is
#: only their independent reference in tests, so they must not load it either.
NUMPY_SCIPY_ONLY = ("calibrate.agreement", "calibrate.consistency", "calibrate.severity",
                    "calibrate.generalizability", "calibrate.files")

CHILD = """
import importlib, json, sys
watched = json.loads(sys.argv[2])
report = []
for name in json.loads(sys.argv[1]):
    importlib.import_module(name)
    report.append([name, [m for m in watched if m in sys.modules]])
print(json.dumps(report))
"""


def statistics_modules() -> list[str]:
    """Every module file of the package, less the CLI and the report package."""
    names = []
    for path in sorted(PACKAGE_DIR.rglob("*.py")):
        parts = path.relative_to(PACKAGE_DIR).with_suffix("").parts
        if parts[0] in NOT_STATISTICS_PACKAGES:
            continue
        if parts[-1] == "__init__":
            parts = parts[:-1]
        name = ".".join(("calibrate",) + parts)
        if name not in NOT_STATISTICS:
            names.append(name)
    return names


def test_statistics_do_not_import_plotting_or_pdf_code():
    modules = statistics_modules()
    assert set(NUMPY_SCIPY_ONLY) <= set(modules)
    # The numpy/scipy-only modules go first, so what is loaded after them is theirs.
    order = list(NUMPY_SCIPY_ONLY) + [m for m in modules if m not in NUMPY_SCIPY_ONLY]
    watched = list(FORBIDDEN) + ["statsmodels"]
    proc = subprocess.run([sys.executable, "-c", CHILD, json.dumps(order), json.dumps(watched)],
                          capture_output=True, text=True, check=False, cwd=PACKAGE_DIR.parent)
    assert proc.returncode == 0, proc.stderr
    loaded = dict(json.loads(proc.stdout))
    assert list(loaded) == order  # every module really was imported
    # Loaded lists only grow, so the first module showing a forbidden one brought it in.
    culprits = [(name, [m for m in found if m in FORBIDDEN]) for name, found in loaded.items()]
    assert next(((name, found) for name, found in culprits if found), None) is None
    assert {name: loaded[name] for name in NUMPY_SCIPY_ONLY if loaded[name]} == {}
