"""Reports on a fully filled result: every section drawn, privacy and first-page numbers.

The lead wires the analyses into results.json over time, so this module fills every
entry of the demo audit with invented (but well-formed) figures following the
results.json contract in DESIGN.md, and adds the tables the reports use when present
(repeat pairs, reading order, per-file scores). The figures are made up: what is
checked here is the report, not the statistics.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest
from pypdf import PdfReader

from calibrate.analyses import audit
from calibrate.data.demo import write_demo
from calibrate.data.ingest import load_study
from calibrate.report import build_reports, rater_pdf
from calibrate.report._read import ReportInput, id_pattern
from calibrate.report.builder import rater_file_names
from calibrate.report.wording import fmt
from tests.pdf_text import entries_of, numbers_in, numbers_of, page_texts

EPOCH = "1780000000"


def fill(result, table) -> ReportInput:
    """results.json of the demo with every analysis filled by invented figures."""
    rng = np.random.default_rng(7)
    d = copy.deepcopy(result.to_dict())
    d["judgment"] = {"scale": "ordinal", "min": 1, "max": 7}
    d["rubric"] = {"basis": "standardized", "shares": {"grades": .30, "test_score": .15, "essay": .20,
                                                       "interview": .20, "field_years": .10,
                                                       "recommendation": .05}}
    cues = list(d["data_summary"]["missing_per_cue"])
    terms = list(d["data_summary"]["design_terms"])
    groups = "AAABBBCAABBCAB"
    first_by_phase = {ph.label: ph.first for ph in table.phases}
    for k, e in enumerate(d["raters"]):
        shares = rng.dirichlet(np.ones(len(cues)) * 3)
        std = dict(zip(terms, rng.normal(0.2, 0.2, len(terms))))
        r = float(rng.uniform(0.6, 0.95))
        mine = first_by_phase[e["phase"]]
        mine = mine[mine["rater"] == e["rater"]].head(5)
        e["policy"] = {
            "intercept": 1.0, "weights": {t: v * 2 for t, v in std.items()}, "std_weights": std,
            "ci": {t: [v * 2 - .3, v * 2 + .3] for t, v in std.items()},
            "importance": dict(zip(cues, shares)), "importance_r2": dict(zip(cues, shares * r * r)),
            "r": r, "r_ci": [r - .08, min(r + .04, 1)], "r2_adj": r * r - .02, "r_cv": r - .05,
            "look_again": [{"case": c, "judgment": float(j), "predicted": float(j) + rng.choice([-2.2, 1.9])}
                           for c, j in zip(mine["case"], mine["judgment"])],
            "warnings": ["a test warning that names Birch and should not reach other raters"] if k == 0 else [],
        }
        rt = float(rng.uniform(0.55, 0.95))
        e["retest"] = {"n_pairs": e["n_repeats"], "r": rt, "icc_a1": rt - .03, "mean_abs_diff": 0.6,
                       "low_p": 0.5, "flag_detectable_below": 0.21}
        g, c_, re_ = float(rng.uniform(.6, .95)), float(rng.uniform(-.1, .2)), .72
        e["lens"] = {"r_a": g * re_ * r, "g": g, "c": c_, "r_e": re_, "r_s": r, "model_validity": g * re_,
                     "model_validity_cv": g * re_ - .03,
                     "model_vs_rater": {"verdict": "about_same", "gain": .01, "ci_low": -.05, "ci_high": .07,
                                        "p_value": .6, "method": "test"},
                     "summary": "A model of your policy and your own judgments tracked the outcome about "
                                "equally well on these cases.",
                     "r_a_ci_low": g * re_ * r - .1, "r_a_ci_high": g * re_ * r + .1,
                     "g_ci_low": g - .1, "g_ci_high": min(g + .1, 1.0), "c_ci_low": c_ - .2,
                     "c_ci_high": c_ + .2, "r_e_ci_low": re_ - .1, "r_e_ci_high": re_ + .1,
                     "cases_per_term": 8.0, "small_sample": True,
                     "small_sample_note": "The lens figures rest on few cases per model term."}
        e["severity"] = {"offset": float(rng.normal(0, .4)), "se": .12,
                         "range_use": {"sd_ratio": float(rng.uniform(.6, 1.4))},
                         "central_tendency": {"middle_share": .3, "panel_middle_share": .28}, "flags": []}
        e["alignment"] = {"misallocation": float(rng.uniform(.03, .35)), "most_over": cues[k % 6],
                          "most_under": cues[(k + 2) % 6], "g_rubric": float(rng.uniform(.6, .98)),
                          "shares": dict(zip(cues, shares))}
        e["drift"] = {"slope": -0.01, "p_value": .01, "p_adjusted": .04, "flagged": k % 5 == 0}
        e["group"] = groups[k % 14]
        e["agreement"] = {"r": float(rng.uniform(.5, .9))}
        e["excluded"] = {"alumni_family": {"delta_r2": .02, "p_value": .01, "p_adjusted": .03 if k == 3 else .6,
                                           "flagged": k == 3}}
        if k == 3:
            e["flags"] = e["flags"] + ["excluded_attribute"]
        if k % 5 == 0:
            e["flags"] = e["flags"] + ["drift"]
    for p in d["panels"]:
        names = [e["rater"] for e in d["raters"] if e["phase"] == p["phase"]]
        icc = dict(zip(("i1", "a1", "c1", "ik", "ak", "ck"), (.55, .57, .62, .71, .73, .77)))
        p["icc"] = icc
        p["agreement"]["icc_detail"]["forms"] = [{"form": f, "estimate": v, "ci_low": v - .1, "ci_high": v + .05}
                                                 for f, v in icc.items()]
        p["alpha"] = .58
        p["variance_components"] = {"case": .9, "rater": .1, "residual": .6}
        p["d_study"] = [{"raters": k, "g_rel": .6 * k / (1 + .6 * (k - 1)), "phi": .55 * k / (1 + .55 * (k - 1))}
                        for k in (1, 2, 3, 4)]
        members = {g: [n for n, e in zip(names, d["raters"]) if e["group"] == g] for g in "ABC"}
        p["groups"] = [{"group": g, "raters": members[g], "importance": {c: 1 / len(cues) for c in cues},
                        "std_weights": {t: .2 for t in terms}, "sets_apart": f"Group {g} leans on essay."}
                       for g in "ABC"]
        merges, clusters, r2 = [], [[n] for n in names], .7
        while len(clusters) > 1:
            a, b = clusters[0], clusters[1]
            clusters = clusters[2:] + [a + b]
            r2 -= .01
            merges.append({"merged_a": a, "merged_b": b, "r2": r2})
        p["grouping"] = {"r2_individual": .7, "merges": merges, "rule": "invented for the test",
                         "raters": [{"rater": n, "group": "A"} for n in names]}
        p["homogeneity"] = {"statistic": 40.2, "p_value": .002}
        p["rater_pairs"] = {"pairs": [{"rater_a": a, "rater_b": b, "n": 30, "r": .3 + .01 * i, "g": .6, "c": .1,
                                    "main_source": "weighting"}
                                   for i, (a, b) in enumerate(zip(names, names[1:]))]}
    tables = dict(result.tables)
    tables["repeat_pairs"] = pd.concat([ph.repeats.assign(phase=ph.label) for ph in table.phases])
    tables["reading_order"] = pd.concat([ph.ordered.assign(phase=ph.label) for ph in table.phases])
    files = table.phases[0].first.groupby("case")["judgment"].agg(["mean", "std"]).reset_index()
    files = files.rename(columns={"mean": "raw_mean", "std": "disagreement"})
    files["needs_another_read"] = files["disagreement"] > 1.8
    tables["files"] = files
    return ReportInput(results=d, tables=tables)


@pytest.fixture(scope="module")
def filled(tmp_path_factory):
    folder = tmp_path_factory.mktemp("filled")
    files = write_demo(folder / "study")
    table = load_study(files.spec)
    data = fill(audit(table), table)
    return data


@pytest.fixture(scope="module")
def built(filled, tmp_path_factory):
    out = tmp_path_factory.mktemp("reports")
    mp = pytest.MonkeyPatch()
    mp.setenv("SOURCE_DATE_EPOCH", EPOCH)
    try:
        paths = build_reports(filled, out)
    finally:
        mp.undo()
    return out, paths


def test_rater_reports_name_only_their_rater(filled, built):
    out, _ = built
    ids = filled.rater_ids()
    for rater, name in rater_file_names(ids).items():
        text = "\n".join(page_texts(out / "raters" / name))
        assert id_pattern([rater]).search(text), rater
        others = id_pattern([r for r in ids if r != rater])
        found = others.findall(text)
        assert not found, (rater, found)
        assert 2 <= len(PdfReader(str(out / "raters" / name)).pages) <= 5


def test_panel_summary_names_every_rater_and_every_section(filled, built):
    out, _ = built
    text = "\n".join(page_texts(out / "panel-summary.pdf"))
    for rater in filled.rater_ids():
        assert id_pattern([rater]).search(text), rater
    for heading in ("Flags first", "Every rater", "Cue weights by rater", "Groups of raters",
                    "Agreement and readers per file", "Where pairs of raters disagree",
                    "Files that need another read", "Attributes that must not count", "Data quality",
                    "Methods and sources", "Cautions"):
        assert heading in text, heading
    assert "not available" not in text.split("Methods and sources")[0].split("Files that need")[0]


def test_first_page_numbers_come_from_results(filled, built):
    out, _ = built
    for rater, name in rater_file_names(filled.rater_ids()).items():
        first = page_texts(out / "raters" / name)[0]
        body = first.split("Feedback on your judgments", 1)[1]
        allowed = numbers_of(entries_of(filled.results, rater))
        numbers = numbers_in(body)
        assert len(numbers) >= 8
        stray = [n for n in numbers if n not in allowed]
        assert not stray, (rater, stray)


def test_key_figures_on_the_first_page_match_the_entry(filled, built):
    out, _ = built
    rater = filled.rater_ids()[2]
    first = page_texts(out / "raters" / rater_file_names([rater])[rater])[0]
    entry = entries_of(filled.results, rater)[-1]
    for value in (entry["policy"]["r"], entry["retest"]["r"], entry["severity"]["offset"],
                  entry["alignment"]["misallocation"], entry["alignment"]["g_rubric"]):
        assert fmt(value) in first


def test_excluded_attribute_only_when_asked(filled):
    rater = filled.rater_ids()[3]
    plain = "\n".join(page_texts(rater_pdf(filled, rater)))
    asked = "\n".join(page_texts(rater_pdf(filled, rater, include_excluded=True)))
    assert "alumni_family" not in plain
    assert "alumni_family" in asked


def test_no_peer_figures_below_five_raters(filled):
    small = copy.deepcopy(filled.results)
    keep = filled.rater_ids()[:4]
    small["raters"] = [e for e in small["raters"] if e["rater"] in keep]
    data = ReportInput(results=small, tables=filled.tables)
    text = "\n".join(page_texts(rater_pdf(data, keep[0])))
    assert "fewer than five raters" in text
    assert "panel median" not in text and "Among colleagues" not in text


# Good direction of each before/after figure, written out here apart from the verdict code.
_GOOD = {"r": 1, "retest_r": 1, "misallocation": -1, "g_rubric": 1, "r_a": 1, "g": 1}


def test_before_after_section_prints_each_change_and_follows_its_interval(filled, built):
    out, _ = built
    for rater, name in rater_file_names(filled.rater_ids()).items():
        entries = entries_of(filled.results, rater)
        assert entries[0]["changes"] is None  # the first phase has nothing before it
        text = " ".join(" ".join(page_texts(out / "raters" / name)).split())
        assert "Your change between phases" in text
        for entry in entries[1:]:
            for metric, items in entry["changes"].items():
                for ch in items:
                    assert (ch["from"], ch["to"]) == ("before", "after")
                    assert " ".join(ch["sentence"].split()) in text, (rater, metric)
                    low, high = ch["ci_low"], ch["ci_high"]
                    clear_up = low is not None and low > 0
                    clear_down = high is not None and high < 0
                    expected = ("no clear change" if not (clear_up or clear_down) else
                                "better" if clear_up == (_GOOD[metric] > 0) else "worse")
                    assert ch["verdict"] == expected, (rater, metric, ch)
