"""Our own plain names: the pairwise view is `rater_pairs` ("where two readers part ways").

The word "conflict" is what established software of this field calls the same view, so it
appears nowhere in the package, its schemas, the README or DEVELOPERS.md (issue 14, item 7).
"""

from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _project_texts():
    yield from (ROOT / "calibrate").rglob("*.py")
    yield from (ROOT / "calibrate").rglob("*.json")
    yield ROOT / "README.md"
    yield ROOT / "DEVELOPERS.md"


def test_the_pairwise_view_has_a_plain_name_of_our_own():
    hits = [f"{path.relative_to(ROOT)}:{n}" for path in _project_texts()
            for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1)
            if "conflict" in line.lower()]
    assert hits == []
