"""`calibrate init` drafts a spec that runs: init, then check, then audit, without editing.

On the demo's own tables (judgments plus a separate cases table), and on one merged table
that carries a constant column, an id-like column and a column that looks like a
protected attribute (issue 16, item 3).
"""

import json

import pandas as pd
import pytest
from click.testing import CliRunner

from calibrate.cli import main
from calibrate.data.demo import write_demo
from calibrate.data.drafting import draft_spec, sensitive_columns


def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    write_demo(folder)
    return folder


def test_init_with_a_cases_table_then_check_then_audit(demo, tmp_path):
    spec = demo / "drafted.toml"
    result = invoke("init", demo / "judgments_autumn.csv", "--cases", demo / "applicants.csv", "--out", spec)
    assert result.exit_code == 0, result.output
    text = spec.read_text()
    assert 'cases = "applicants.csv"' in text
    assert 'criterion = "first_year_result"' in text
    assert '"grades" = "numeric"' in text and '"recommendation" = "categorical"' in text
    # the round is the same for every autumn case: left out, with the reason
    assert '# "round" left out: the same in every judged case' in text
    # alumni_family looks like a sensitive attribute: excluded, never a cue
    assert 'columns = ["alumni_family"]' in text and '"alumni_family" =' not in text
    assert "criterion_only_for_selected" in text
    checked = invoke("check", spec)
    assert checked.exit_code == 0, checked.output
    out = tmp_path / "audit"
    audited = invoke("audit", spec, "--out", out, "--no-pdf")
    assert audited.exit_code == 0, audited.output
    results = json.loads((out / "results.json").read_text())
    assert len(results["raters"]) == 14


def test_init_on_a_merged_table_leaves_out_constant_id_and_sensitive_columns(demo, tmp_path):
    judgments = pd.read_csv(demo / "judgments_autumn.csv")
    cases = pd.read_csv(demo / "applicants.csv").drop(columns=["first_year_result"])
    keep = sorted(judgments["reviewer"].unique())[:5]  # five reviewers keep the audit quick
    merged = judgments[judgments["reviewer"].isin(keep)].merge(cases, on="applicant")
    ids = {a: i + 1000 for i, a in enumerate(sorted(merged["applicant"].unique()))}
    merged["record_id"] = merged["applicant"].map(ids)
    merged["Gender"] = merged["applicant"].map(lambda a: "female" if int(a[1:]) % 2 else "male")
    merged["programme"] = "MSc"
    path = tmp_path / "merged.csv"
    merged.to_csv(path, index=False)
    spec = tmp_path / "merged.toml"
    result = invoke("init", path, "--out", spec)
    assert result.exit_code == 0, result.output
    text = spec.read_text()
    assert '# "record_id" left out: looks like an id' in text
    assert '# "programme" left out: the same in every judged case' in text
    assert 'columns = ["alumni_family", "Gender"]' in text
    assert '"Gender" =' not in text and '"record_id" =' not in text
    checked = invoke("check", spec)
    assert checked.exit_code == 0, checked.output
    audited = invoke("audit", spec, "--out", tmp_path / "audit", "--no-pdf")
    assert audited.exit_code == 0, audited.output


def test_sensitive_columns_match_whole_words_and_gender_like_values():
    table = pd.DataFrame({"applicant_age": [30, 40], "page_count": [3, 4], "average": [1, 2],
                          "RaceGroup": ["a", "b"], "pronoun_set": ["woman", "man"], "legacy": ["y", "n"]})
    assert sensitive_columns(table, list(table.columns)) == ["applicant_age", "RaceGroup", "pronoun_set",
                                                             "legacy"]


def test_init_with_a_cases_table_lacking_the_case_column_says_how_to_fix():
    from calibrate.errors import CalibrateError

    judgments = pd.DataFrame({"rater": ["a", "a"], "case": ["c1", "c2"], "score": [1, 2]})
    cases = pd.DataFrame({"file": ["c1", "c2"], "x": [1.0, 2.0]})
    with pytest.raises(CalibrateError, match="has no column 'case'"):
        draft_spec(judgments, data_name="j.csv", study_name="t", cases=cases, cases_name="c.csv")
