"""The one-direction rule of the house, checked two ways.

1. Statically (every ``import`` in every module, function-level ones included): the
   folders and ground-floor modules form floors, and an import may only reach down.
   ``data`` imports no statistics; statistics import neither ``output``, ``report`` nor
   the CLI; ``report`` imports no statistics module; folders on one floor never import
   each other in a loop.
2. In a fresh process: importing any statistics module loads no plotting, PDF,
   pingouin or CLI code, and the agreement modules load no statsmodels.

Modules are found on disk, so a new module or folder is covered without editing this
file (a new folder must be given a floor below, or the test says so).
"""

import ast
import json
import subprocess
import sys
from pathlib import Path

import calibrate

PACKAGE_DIR = Path(calibrate.__file__).resolve().parent

#: Floors from the ground up; an import may reach any lower floor, never a higher one.
FLOORS = {
    "errors": 0, "result_base": 0, "pvalues": 0, "safe_files": 0, "notes": 0, "at_a_glance": 0, "threads": 0,
    "formatting": 0,
    "data": 1,
    "policy": 2,
    "consistency": 3, "agreement": 3, "lens": 3, "panel": 3,
    "training": 4, "design": 4,
    "analyses": 5,
    "output": 6, "report": 6,
    "writing": 7,
    "cli": 8, "__main__": 8, "__init__": 8,
}
STATISTICS = {"policy", "consistency", "agreement", "lens", "panel", "training", "design"}

#: No statistics module may load these (pingouin loads matplotlib; the CLI loads all).
FORBIDDEN = ("matplotlib", "reportlab", "pingouin", "calibrate.cli")

#: The panel agreement modules compute with numpy and scipy alone; statsmodels is
#: only their independent reference in tests, so they must not load it either.
NUMPY_SCIPY_ONLY = ("calibrate.agreement", "calibrate.consistency")

CHILD = """
import importlib, json, sys
watched = json.loads(sys.argv[2])
report = []
for name in json.loads(sys.argv[1]):
    importlib.import_module(name)
    report.append([name, [m for m in watched if m in sys.modules]])
print(json.dumps(report))
"""


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE_DIR).with_suffix("").parts
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join(("calibrate",) + parts)


def unit_of(module: str) -> str:
    """The folder or ground-floor module a dotted calibrate module belongs to."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def imports_of(path: Path) -> set[str]:
    """Every calibrate module the file imports, resolved to dotted names."""
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("calibrate")}
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.startswith("calibrate"):
                found.add(target)
                # ``from . import wording`` names modules, not attributes
                found |= {f"{target}.{a.name}" for a in node.names
                          if (PACKAGE_DIR.parent / f"{target}.{a.name}".replace(".", "/")).exists()
                          or (PACKAGE_DIR.parent / (f"{target}.{a.name}".replace(".", "/") + ".py")).exists()}
    return found


def edges() -> list[tuple[str, str, str]]:
    """(importing module, imported module, ...) across units."""
    out = []
    for path in sorted(PACKAGE_DIR.rglob("*.py")):
        src = module_name(path)
        for target in sorted(imports_of(path)):
            if target == "calibrate":
                continue  # ``from . import __version__``
            out.append((src, target, unit_of(target)))
    return out


def test_every_folder_has_a_floor():
    units = {unit_of(module_name(p)) for p in PACKAGE_DIR.rglob("*.py")}
    assert units <= set(FLOORS), f"give these a floor in FLOORS: {sorted(units - set(FLOORS))}"


def test_imports_only_reach_down():
    upward = []
    for src, target, target_unit in edges():
        src_unit = unit_of(src)
        if src_unit == target_unit:
            continue
        if FLOORS[target_unit] > FLOORS[src_unit]:
            upward.append(f"{src} imports {target}")
    assert upward == []


def test_named_rules():
    broken = []
    for src, target, target_unit in edges():
        src_unit = unit_of(src)
        if src_unit == "data" and target_unit in STATISTICS:
            broken.append(f"the door imports statistics: {src} -> {target}")
        if src_unit in STATISTICS and target_unit in {"output", "report", "cli", "writing", "analyses"}:
            broken.append(f"statistics reach up: {src} -> {target}")
        if src_unit == "report" and (target_unit in STATISTICS or target_unit in {"data", "analyses"}):
            broken.append(f"the report reads statistics instead of the typed view: {src} -> {target}")
    assert broken == []


def test_no_loops_between_folders():
    graph: dict[str, set[str]] = {}
    for src, _target, target_unit in edges():
        if unit_of(src) != target_unit:
            graph.setdefault(unit_of(src), set()).add(target_unit)
    seen: dict[str, int] = {}

    def visit(node: str, trail: list[str]) -> list[str] | None:
        seen[node] = 1
        for nxt in sorted(graph.get(node, ())):
            if seen.get(nxt) == 1:
                return trail + [node, nxt]
            if nxt not in seen and (loop := visit(nxt, trail + [node])):
                return loop
        seen[node] = 2
        return None

    loops = [loop for start in sorted(graph) if start not in seen and (loop := visit(start, []))]
    assert loops == []


def statistics_modules() -> list[str]:
    """Every module below the output floor (what an analysis may load)."""
    return [module_name(p) for p in sorted(PACKAGE_DIR.rglob("*.py"))
            if FLOORS[unit_of(module_name(p))] <= FLOORS["analyses"] and unit_of(module_name(p)) != "__init__"]


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
