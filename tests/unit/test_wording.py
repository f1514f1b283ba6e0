"""Wording: the bands that turn numbers into words are complete, ordered and sourced."""

from __future__ import annotations

import math

import pytest

from calibrate.report import wording

SCALES = [wording.ICC_BANDS, wording.ALPHA_BANDS, wording.CONSISTENCY_BANDS, wording.RETEST_BANDS,
          wording.MISALLOCATION_BANDS, wording.MATCH_BANDS, wording.RANGE_BANDS]


@pytest.mark.parametrize("scale", SCALES, ids=lambda s: s.name)
def test_bands_tile_the_line_and_name_a_source(scale):
    bands = scale.bands
    assert bands[0].low == -math.inf and bands[-1].high == math.inf
    for before, after in zip(bands, bands[1:]):
        assert before.high == after.low           # no gap, no overlap
    assert scale.source and ("our own choice" in scale.source or "(" in scale.source)
    for band in bands:
        probe = band.low if math.isfinite(band.low) else band.high - 1
        assert scale.words(probe) == band.words   # lower edge belongs to the band
    assert scale.words(None) is None


def test_icc_bands_follow_koo_and_li_2016():
    # Koo & Li (2016), J. Chiropractic Medicine 15:155-163 (from memory): < .5 poor, .5-.75
    # moderate, .75-.9 good, > .9 excellent
    assert [wording.icc_reading(v) for v in (0.49, 0.5, 0.74, 0.75, 0.89, 0.9)] == [
        "poor", "moderate", "moderate", "good", "good", "excellent"]


def test_printed_figures():
    assert wording.fmt(-0.001) == "0.00"     # no "-0.00"
    assert wording.fmt(None) == "n/a"
    assert wording.fmt(0.8961) == "0.90"
    assert wording.fmt_p(0.0004) == "<0.001" and wording.fmt_p(0.0123) == "0.012"


def test_every_flag_the_analyses_set_has_words():
    # flag identifiers set by calibrate.policy, consistency, severity, drift, alignment, cutoffs
    for flag in ("too_few_cases", "few_cases", "not_fitted", "collinear_cues", "curvature", "inconsistent",
                 "separation", "low_retest", "lenient", "severe", "narrow_range", "wide_range",
                 "central_tendency", "drift", "excluded_attribute", "cutoff_rule"):
        assert flag in wording.FLAG_WORDS, flag


def test_sentences_talk_about_the_task_not_the_person():
    person_words = ("you are", "careless", "bad rater", "poor rater", "lazy", "biased rater")
    texts = [*wording.FLAG_WORDS.values(), *wording.CEILING_VERDICTS.values(), *wording.CAUTIONS,
             *(b.words for s in SCALES for b in s.bands)]
    for t in texts:
        assert not any(w in t.lower() for w in person_words), t


def test_readme_flag_table_matches_the_flag_words():
    # the README documents every flag identifier; the reports have plain words for each
    import re
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    section = readme.split("### Flags", 1)[1].split("\n## ", 1)[0]
    documented = set()
    for cell in re.findall(r"^\| (`[^|]+`) \|", section, flags=re.M):
        documented |= set(re.findall(r"`([a-z_]+)`", cell))
    assert documented == set(wording.FLAG_WORDS)
