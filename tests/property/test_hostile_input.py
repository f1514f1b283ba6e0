"""Damaged tables and specs never crash the door: `check` and `audit --no-pdf` either
succeed or exit 2 with one clear message, never a traceback and never a hang, and they
agree (what `check` refuses, `audit` refuses; what `check` accepts, `audit` accepts or
stops cleanly on a fit it cannot make).

Each example starts from a small valid study (3 raters x 10 cases, a numeric cue, a
categorical cue, a criterion, a reading order) and applies a few random kinds of damage:
hostile cell values, renamed, doubled or dropped columns, cut or re-encoded bytes, other
delimiters, and damaged spec values. The commands run in-process through click's
CliRunner. Examples are derandomized (tests/conftest.py) and bounded.
"""

from __future__ import annotations

import tempfile
from datetime import timedelta
from pathlib import Path

from click.testing import CliRunner
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from calibrate.cli import main

HEADER = ["rater", "case", "score", "x1", "kind", "outcome", "seq"]
KINDS = ["alpha", "beta", "gamma"]


def _base_rows() -> list[list[str]]:
    rows = []
    for r in range(3):
        for c in range(10):
            x1 = (c * 7 % 10) / 3
            score = 1 + (c + r + c * c) % 7
            rows.append([f"r{r + 1}", f"c{c + 1}", str(score), f"{x1:.3f}", KINDS[c % 3],
                         str(2 + c % 4), str(c + 1)])
    return rows


SPEC_FIELDS = {
    "name": '"fuzz"', "data": '"judgments.csv"', "seed": "7",
    "criterion_only_for_selected": "false",
    "scale": '"ordinal"', "min": "1", "max": "7",
    "x1": '"numeric"', "kind": '"categorical"',
}


def _spec_text(fields: dict[str, str], extra: str) -> str:
    f = fields
    return (f"[study]\nname = {f['name']}\ndata = {f['data']}\nseed = {f['seed']}\n"
            f"criterion_only_for_selected = {f['criterion_only_for_selected']}\n{extra}\n"
            "[columns]\nrater = \"rater\"\ncase = \"case\"\njudgment = \"score\"\n"
            "criterion = \"outcome\"\nsequence = \"seq\"\n"
            f"[judgment]\nscale = {f['scale']}\nmin = {f['min']}\nmax = {f['max']}\n"
            f"[cues]\nx1 = {f['x1']}\nkind = {f['kind']}\n")


HOSTILE_CELLS = ["", " ", "inf", "-inf", "Infinity", "nan", "NaN", "1e400", "-1e400", "9" * 40,
                 "1e-400", "NA", "None", "null", "n/a", "#N/A", "-", ".", "true", "0x1f", "1,5",
                 "=1+1", "café", "中文", "\t", "a\nb", '"', "'", ";", "0", "-0", "7.0000001",
                 "x" * 300, "\u200b", "\x1b[31m", "2024-13-45", "1/0"]
HOSTILE_NAMES = ["_row", "_file", "", "x1", "score", "a=b", "g:missing", "  rater  ", "Rater"]
HOSTILE_TOML = ['"no"', '"true"', "0", "1", "-1", "inf", "nan", "-inf", "1e308", "[]", "{}",
                '""', "9223372036854775808", '"ordinal"', '"binary"', '"continuous"', '"text"',
                "[1, 2]", "{ type = \"numeric\", missing = \"indicator\" }", "true"]
EXTRA_LINES = ["", 'missing_words = ["alpha"]', "missing_words = []", "missing_words = 3",
               'cases = "nowhere.csv"', "bogus = 1", 'cases = "."']


DAMAGE = ("cells", "cells", "name", "drop", "few_rows", "constant", "separator", "encoding",
          "cut", "spec_value", "spec_line", "cut_spec", "dates")
ZONES = ["", "", "Z", "+02:00", "-05:00", " UTC"]


@st.composite
def damaged_study(draw):
    """(bytes of judgments.csv, text of study.toml, the kinds of damage done)."""
    damage = draw(st.sets(st.sampled_from(DAMAGE), max_size=3))
    header = list(HEADER)
    rows = _base_rows()
    if "cells" in damage:  # hostile cell values
        for _ in range(draw(st.integers(1, 4))):
            r = draw(st.integers(0, len(rows) - 1))
            c = draw(st.integers(0, len(header) - 1))
            rows[r][c] = draw(st.sampled_from(HOSTILE_CELLS))
    if "dates" in damage:  # the reading order as date-times, some perhaps zoned
        for i, row in enumerate(rows):
            row[-1] = f"2024-05-01 10:{i % 60:02d}" + draw(st.sampled_from(ZONES))
    if "name" in damage:  # one hostile column name
        header[draw(st.integers(0, len(header) - 1))] = draw(st.sampled_from(HOSTILE_NAMES))
    if "drop" in damage:  # a dropped column
        drop = draw(st.integers(0, len(header) - 1))
        header.pop(drop)
        rows = [row[:drop] + row[drop + 1:] for row in rows]
    if "few_rows" in damage:  # only the header, or only a few rows
        rows = rows[:draw(st.integers(0, 3))]
    if "constant" in damage:  # the same value everywhere in a column
        col = draw(st.integers(0, len(header) - 1))
        rows = [row[:col] + ["4"] + row[col + 1:] for row in rows]
    sep = draw(st.sampled_from([";", "\t", "|"])) if "separator" in damage else ","

    def cell(text: str) -> str:
        if any(ch in text for ch in (sep, '"', "\n", "\r")):
            return '"' + text.replace('"', '""') + '"'
        return text

    text = "\n".join(sep.join(cell(v) for v in line) for line in [header] + rows) + "\n"
    encoding = (draw(st.sampled_from(["utf-8-sig", "latin-1", "utf-16", "cp1252"]))
                if "encoding" in damage else "utf-8")
    data = text.encode(encoding, errors="replace")
    if "cut" in damage:  # the file cut short
        data = data[:draw(st.integers(0, len(data)))]
    fields = dict(SPEC_FIELDS)
    if "spec_value" in damage:
        fields[draw(st.sampled_from(sorted(fields)))] = draw(st.sampled_from(HOSTILE_TOML))
    extra = draw(st.sampled_from(EXTRA_LINES)) if "spec_line" in damage else ""
    spec = _spec_text(fields, extra)
    if "cut_spec" in damage:
        spec = spec[:draw(st.integers(0, len(spec)))]
    return data, spec, sorted(damage)


def _run(args: list[str]):
    result = CliRunner().invoke(main, args)
    crashed = result.exception is not None and not isinstance(result.exception, SystemExit)
    assert not crashed, f"{args[0]} crashed: {result.exception!r}\n{result.output}"
    assert result.exit_code in (0, 2), result.output
    assert "Traceback" not in result.output
    if result.exit_code == 2:
        # one message: the CLI's "calibrate: ..." paragraph, or check's list of problems
        assert "calibrate: " in result.output or "problem(s) stop the analysis" in result.output
    return result


@settings(max_examples=150, deadline=timedelta(seconds=60),
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(damaged_study())
def test_damaged_input_ends_cleanly_and_check_agrees_with_audit(study):
    data, spec, damage = study
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "study"
        folder.mkdir()
        (folder / "judgments.csv").write_bytes(data)
        (folder / "study.toml").write_text(spec, encoding="utf-8")
        checked = _run(["check", str(folder / "study.toml")])
        audited = _run(["audit", str(folder / "study.toml"), "--out", str(Path(tmp) / "out"),
                        "--no-pdf"])
        event(f"check {checked.exit_code}, audit {audited.exit_code}")
        event(f"{len(damage)} kind(s) of damage")
        if checked.exit_code == 2:
            assert audited.exit_code == 2, "check refused what audit accepted"
        assert (folder / "judgments.csv").read_bytes() == data  # inputs are only read


# ----------------------------------------------------------------------------- the spec alone

TOML_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-2**70, 2**70)
    | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=12)
    | st.sampled_from(["numeric", "categorical", "indicator", "drop", "binary", "ordinal",
                       "continuous", "raw", "standardized", "judgments.csv", "_row", "a=b"]),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner,
                                                                  max_size=3),
    max_leaves=6)

VALID_DOC = {
    "study": {"name": "fuzz", "data": "judgments.csv", "seed": 7,
              "criterion_only_for_selected": False, "missing_words": ["NA"]},
    "columns": {"rater": "rater", "case": "case", "judgment": "score", "phase": "phase"},
    "judgment": {"scale": "ordinal", "min": 1, "max": 7, "cut_off": 4,
                 "labels": {"poor": 1, "good": 7}},
    "cues": {"x1": "numeric", "kind": {"type": "categorical", "missing": "drop"}},
    "rubric": {"basis": "standardized", "x1": 1.0},
    "excluded": {"columns": ["group"]},
    "phases": {"order": ["before", "after"], "trained": ["r1"]},
}


def _paths(doc, prefix=()):
    for key, value in doc.items():
        yield prefix + (key,)
        if isinstance(value, dict):
            yield from _paths(value, prefix + (key,))


PATHS = sorted(_paths(VALID_DOC))


@settings(max_examples=400, deadline=timedelta(seconds=10))
@given(st.lists(st.tuples(st.sampled_from(PATHS), TOML_VALUES), max_size=3),
       st.lists(st.sampled_from(PATHS), max_size=2))
def test_a_damaged_spec_is_refused_with_its_problems_or_read(replacements, removals):
    """Any value at any key of the spec: parse_spec returns a StudySpec or raises SpecError
    listing text problems; never another exception."""
    import copy

    from calibrate.data.spec import StudySpec, parse_spec
    from calibrate.errors import SpecError

    doc = copy.deepcopy(VALID_DOC)
    for path in removals:
        parent = doc
        for key in path[:-1]:
            parent = parent.get(key) if isinstance(parent, dict) else None
        if isinstance(parent, dict):
            parent.pop(path[-1], None)
    for path, value in replacements:
        parent = doc
        for key in path[:-1]:
            parent = parent.setdefault(key, {}) if isinstance(parent, dict) else None
        if isinstance(parent, dict):
            parent[path[-1]] = value
    try:
        spec = parse_spec(doc, base_dir=Path("/nonexistent"))
    except SpecError as exc:
        assert exc.problems and all(isinstance(p, str) and p for p in exc.problems)
        event("refused")
    else:
        assert isinstance(spec, StudySpec)
        spec.to_toml()  # what was accepted can be written back
        event("accepted")
