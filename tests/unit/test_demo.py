"""The demo study: deterministic, shipped in the package, and its copy in demo_data/ current."""

from pathlib import Path

from calibrate.data.demo import REVIEWERS, write_demo
from calibrate.data.ingest import load_study

REPO = Path(__file__).resolve().parents[2]


def test_committed_demo_copy_matches_the_generator(tmp_path):
    files = write_demo(tmp_path)
    for path in [files.spec, files.cases, files.readme, *files.judgments]:
        assert path.read_bytes() == (REPO / "demo_data" / path.name).read_bytes(), path.name


def test_demo_shape_matches_the_brief(tmp_path):
    table = load_study(write_demo(tmp_path).spec)
    assert 12 <= len(REVIEWERS) <= 16
    assert [p.name for p in table.phases] == ["before", "after"]
    assert len(table.spec.cues) in (5, 6)
    assert any(c.kind == "categorical" for c in table.spec.cues)
    assert any(c.missing == "indicator" for c in table.spec.cues)
    assert table.spec.excluded == ("alumni_family",)
    assert table.spec.criterion_only_for_selected
    for phase in table.phases:
        per_rater = phase.first.groupby("rater").size()
        assert per_rater.between(80, 120).all()
        share = len(phase.repeats) / len(phase.first)
        assert 0.12 <= share <= 0.18
    trained = set(table.spec.trained)
    assert len(trained) == len(REVIEWERS) // 2
    crit = table.cases["__criterion__"]
    assert 0.3 < crit.notna().mean() < 0.5  # known only for admitted applicants
