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


def test_presentations_are_stated_as_they_happened():
    from calibrate.report.wording import only_first_two_used, presentations_text

    assert presentations_text(100, 0, 100, 1) == "100 cases"
    assert presentations_text(100, 15, 115, 2) == "100 cases (15 of them shown twice)"
    # 14 cases each shown 15 times: 14 + 14 * 14 presentations
    assert presentations_text(14, 14, 14 + 14 * 14, 15) == "14 cases (14 of them each shown 15 times)"
    assert presentations_text(10, 4, 10 + 3 + 1 + 1 + 1, 4) == "10 cases (4 of them shown between two and 4 times)"
    assert presentations_text(10, 4, None, None) == "10 cases (4 of them shown more than once)"
    assert only_first_two_used(2) is None and only_first_two_used(None) is None
    assert "first two judgments" in only_first_two_used(15)


def test_a_hidden_check_is_described_as_hidden_whatever_it_found():
    from calibrate.report.wording import flags_reading

    assert flags_reading((), 1) == ("None of the checks in this report flagged anything. "
                                   "One further check is shared with the chair only.")
    assert flags_reading((), 0) == "None of the checks in this report flagged anything."
    line = flags_reading(("drift",), 1, "after")
    assert line.startswith("Worth a look in phase after: judgments changed over the reading order.")
    assert "Nothing was flagged" not in line


def test_predictions_stay_on_the_scale():
    from calibrate.report.wording import predicted_on_scale

    assert predicted_on_scale(8.3, (1, 7)) == (7, True)
    assert predicted_on_scale(0.2, (1, 7)) == (1, True)
    assert predicted_on_scale(4.4, (1, 7)) == (4.4, False)
    assert predicted_on_scale(4.4, None) == (4.4, False)


def test_the_shares_caption_is_true_for_negative_shares():
    from calibrate.report.wording import shares_caption

    assert "the shares add up to 1." in shares_caption({"a": 0.7, "b": 0.3})
    signed = shares_caption({"a": 0.7, "b": -0.3})
    assert "sizes of the shares add up to 1" in signed and "negative share" in signed


def test_one_p_formatter_never_prints_zero():
    from calibrate.report.wording import fmt_p

    assert fmt_p(0.0) == "<0.001" and fmt_p(0.0004) == "<0.001" and fmt_p(0.0123) == "0.012"
    assert fmt_p(None) == "n/a"


def test_no_band_source_printed_in_a_report_says_from_memory():
    from calibrate.report import wording

    scales = [v for v in vars(wording).values() if isinstance(v, wording.Scale)]
    printed = [s.source for s in scales] + [c.source for c in wording.PUBLISHED_CONTEXT]
    printed += [wording.CONTEXT_INTRO, *wording.CAUTIONS, *wording.GLOSSARY.values()]
    assert scales and not [t for t in printed if "memory" in t]
