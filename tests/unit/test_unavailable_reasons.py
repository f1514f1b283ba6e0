"""A null section of a rater entry carries the reason the audit knows, never a bare blank."""

from types import SimpleNamespace

from calibrate.analyses import _unavailable_reasons

SECTIONS = ("policy", "retest", "agreement", "lens", "severity", "alignment", "drift", "cutoff")


def entry(**present):
    return {key: present.get(key) for key in SECTIONS}


def test_study_level_facts_are_named():
    spec = SimpleNamespace(columns={"rater": "r", "case": "c", "judgment": "j"}, rubric=None, cues=("x",))
    ph = SimpleNamespace(too_few=set())
    got = _unavailable_reasons(entry(policy={}, agreement={}, severity={}, drift={}, cutoff={}),
                               "r1", ph, spec, {"n_repeats": 0})
    assert got == {"retest": "no case was judged twice", "lens": "the study names no criterion",
                   "alignment": "the study has no rubric"}


def test_rater_level_facts_are_named():
    spec = SimpleNamespace(columns={"criterion": "outcome"}, rubric={"a": 1.0}, cues=("a",))
    ph = SimpleNamespace(too_few={"r1"})
    got = _unavailable_reasons(entry(), "r1", ph, spec, {"n_repeats": 2})
    assert got["policy"] == "too few usable cases to fit a policy"
    assert got["retest"] == "test-retest could not be computed from 2 repeated case(s)"
    assert "criterion" in got["lens"] and got["alignment"].startswith("the analysis gave no result")
    assert set(got) == set(SECTIONS)


def test_nothing_recorded_when_every_section_is_there():
    spec = SimpleNamespace(columns={}, rubric=None, cues=("x",))
    full = {key: {} for key in SECTIONS}
    assert _unavailable_reasons(full, "r1", SimpleNamespace(too_few=set()), spec, {"n_repeats": 3}) == {}
