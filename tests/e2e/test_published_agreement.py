"""Published agreement examples audited from the command line, with one cue and with none.

Shrout & Fleiss (1979), Psychological Bulletin 86:420-428, 6 targets x 4 judges: ICC(1,1) .17,
ICC(2,1) .29, ICC(3,1) .71, ICC(1,4) .44, ICC(2,4) .62, ICC(3,4) .91 (recomputed .1657 .2898
.7148 .4428 .6201 .9093, shared REFERENCE-DATA.md). Krippendorff (2011), "Computing
Krippendorff's Alpha-Reliability", 4 coders x 12 units with missing values: ordinal alpha .815,
interval .849 (recomputed .8154, .8491). The fixtures (long table + study.toml) are in
tests/data/published/; their `length` cue is invented so the same data run with one cue.
"""

import json
from pathlib import Path

import jsonschema
import pytest
from click.testing import CliRunner

from calibrate.cli import main
from calibrate.output.tables import results_schema
from tests.pdf_text import page_texts

DATA = Path(__file__).resolve().parents[1] / "data" / "published"
SHROUT_FLEISS = {"i1": 0.1657, "a1": 0.2898, "c1": 0.7148, "ik": 0.4428, "ak": 0.6201, "ck": 0.9093}
KRIPPENDORFF = {"ordinal": 0.8154, "interval": 0.8491}
CUE_SECTIONS = ("policy", "lens", "alignment", "drift", "cutoff")


def run(*args):
    """The command in-process (click's runner: the console script's code path, without a new
    interpreter per call); a crash fails the test, a traceback in the output too."""
    result = CliRunner().invoke(main, [str(a) for a in args])
    crashed = result.exception is not None and not isinstance(result.exception, SystemExit)
    assert not crashed, f"{args[0]} crashed: {result.exception!r}\n{result.output}"
    assert "Traceback" not in result.output
    return result


def _audit(spec, out, *extra):
    checked = run("check", spec)
    assert checked.exit_code == 0, checked.output
    proc = run("audit", spec, "--out", out, *extra)
    assert proc.exit_code == 0, proc.output
    results = json.loads((out / "results.json").read_text())
    jsonschema.validate(results, results_schema())
    return results, checked.output


@pytest.mark.parametrize("spec", ["study_one_cue.toml", "study_no_cues.toml"])
def test_shrout_fleiss_icc_forms_match(spec, tmp_path):
    results, _ = _audit(DATA / "shrout_fleiss_1979" / spec, tmp_path / "out", "--no-pdf")
    icc = results["panels"][0]["icc"]
    for form, published in SHROUT_FLEISS.items():
        assert icc[form] == pytest.approx(published, abs=5e-5), form
    assert results["panels"][0]["fleiss_kappa"] is None  # a continuous scale has no categories


@pytest.mark.parametrize("level", sorted(KRIPPENDORFF))
@pytest.mark.parametrize("cues", ["one_cue", "no_cues"])
def test_krippendorff_alpha_matches(level, cues, tmp_path):
    results, _ = _audit(DATA / "krippendorff_2011" / f"study_{level}_{cues}.toml", tmp_path / "out", "--no-pdf")
    panel = results["panels"][0]
    assert panel["alpha"] == pytest.approx(KRIPPENDORFF[level], abs=5e-5)
    assert panel["agreement"]["alpha_detail"]["n_cases"] == 11  # unit 12 has one value
    if level == "ordinal":  # categories: Fleiss' kappa and AC1 join the table
        assert -1 < panel["fleiss_kappa"] < panel["gwet_ac1"] < 1
    if cues == "one_cue":
        assert all(e["policy"] is not None for e in results["raters"])
        assert panel["rater_pairs"]["threshold"] == "4 cases (4 per cue term x 1 term)"


def test_no_cues_runs_what_applies_and_says_what_needs_cues(tmp_path):
    out = tmp_path / "out"
    results, check_text = _audit(DATA / "shrout_fleiss_1979" / "study_no_cues.toml", out)
    assert "Cues: none (agreement-only study" in check_text
    assert any("the study lists no cues" in w["message"] for w in results["warnings"])
    for entry in results["raters"]:
        assert entry["severity"] is not None and entry["agreement"] is not None
        for key in CUE_SECTIONS:
            assert entry[key] is None
            assert entry["unavailable"][key].startswith("the study lists no cues")
    panel = results["panels"][0]
    assert panel["d_study"] and panel["variance_components"] is not None
    assert panel["rater_pairs"] is None and panel["groups"] == []
    tables = {p.stem for p in (out / "tables").glob("*.csv")}
    assert {"agreement", "severity", "files", "readers_per_file"} <= tables
    assert "policies" not in tables
    rater_text = " ".join(" ".join(page_texts(next((out / "raters").glob("*.pdf")))).split())
    assert "the study lists no cues" in rater_text
