"""No function in calibrate/data/ runs over 80 lines, so each input rule stays readable alone."""

import ast
from pathlib import Path

import calibrate.data

MAX_LINES = 80
DATA_DIR = Path(calibrate.data.__file__).parent


def _function_lengths():
    for path in sorted(DATA_DIR.glob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                yield f"{path.name}:{node.lineno} {node.name}", node.end_lineno - node.lineno + 1


def test_no_function_in_data_over_80_lines():
    too_long = {name: n for name, n in _function_lengths() if n > MAX_LINES}
    assert not too_long, f"functions over {MAX_LINES} lines in calibrate/data/: {too_long}"


def test_the_measure_sees_functions():
    # guards against a glob or walk that silently measures nothing
    names = [name for name, _ in _function_lengths()]
    assert any(name.endswith(" load_study") for name in names)
