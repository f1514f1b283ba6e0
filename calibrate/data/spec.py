"""The study spec: which column plays which role, the judgment scale, the cues.

A spec is a small TOML file (format in README.md). :func:`read_spec` parses and
validates it once and returns a frozen :class:`StudySpec`; everything downstream
trusts that object. Every problem is collected and reported together, each with
the fix (an unknown key comes with the closest valid key).
"""

from __future__ import annotations

import difflib
import hashlib
import itertools
import math
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from ..errors import SpecError
from .cues import CueRule

SCALES = ("continuous", "ordinal", "binary")
ROLES_REQUIRED = ("rater", "case", "judgment")
ROLES_OPTIONAL = ("criterion", "sequence", "phase")
MISSING_RULES = ("drop", "indicator")
CUE_KINDS = ("numeric", "categorical")
RUBRIC_BASES = ("standardized", "raw")
DEFAULT_SEED = 20261201
# The words that mean "no value" in a numeric column (cues, criterion, judgments, sequence)
# when the spec gives no [study] missing_words; matched ignoring case and surrounding
# spaces. They never apply to ids (an id "NA" is an id), and categorical cues take only
# empty cells as missing unless the spec lists its own words (README, "Missing values").
DEFAULT_MISSING_WORDS = ("NA", "N/A", "#N/A", "NaN", "null", "None", "missing", "-", ".")
# Generated design-term names use these (cue=level, cue:missing); a cue named with them
# could collide with a generated term and silently lose a weight.
TERM_SEPARATORS = ("=", ":")

# Word scales whose order is known (our own list, README "The study spec"): each is a list of
# ranks from lowest to highest, a rank holding words that mean the same place. `init` numbers
# words found in one of them in this order, and `check` refuses [judgment] labels that
# number such words out of order (a consistently reversed numbering is accepted).
KNOWN_WORD_SCALES: tuple[tuple[tuple[str, ...], ...], ...] = (
    (("very poor",), ("poor",), ("fair",), ("good",), ("very good", "great"), ("excellent",)),
    (("poor",), ("average",), ("good",), ("excellent",)),
    (("unsatisfactory",), ("satisfactory",), ("good",), ("excellent",)),
    (("very low",), ("low",), ("medium", "moderate"), ("high",), ("very high",)),
    (("weak",), ("adequate",), ("strong",)),
    (("strongly disagree",), ("disagree",), ("somewhat disagree",),
     ("neutral", "neither agree nor disagree"), ("somewhat agree",), ("agree",),
     ("strongly agree",)),
    (("never",), ("rarely",), ("sometimes",), ("often",), ("always",)),
    (("below expectations",), ("meets expectations",), ("exceeds expectations",)),
    (("not recommended",), ("recommended with reservations",), ("recommended",),
     ("highly recommended",)),
    (("no",), ("maybe",), ("yes",)),
    (("false",), ("true",)),
    (("fail",), ("pass",)),
    (("reject",), ("accept",)),
    (("decline",), ("admit",)),
)


def _plain_word(word: str) -> str:
    return " ".join(str(word).lower().replace("_", " ").replace("-", " ").split())


def known_scale_ranks(words) -> dict[str, int] | None:
    """The rank of each word in the first known word scale that holds them all, or None."""
    plain = {w: _plain_word(w) for w in words}
    for scale in KNOWN_WORD_SCALES:
        rank = {word: i for i, tier in enumerate(scale) for word in tier}
        if plain and all(p in rank for p in plain.values()):
            return {w: rank[p] for w, p in plain.items()}
    return None


def _check_label_order(labels: dict[str, float], problems: list[str]) -> None:
    """Labels drawn from a known word scale must be numbered along it (either direction)."""
    ranks = known_scale_ranks(labels)
    if ranks is None or len(set(ranks.values())) < 2:
        return
    ordered = sorted(labels, key=lambda w: (ranks[w], labels[w]))
    steps = [(a, b) for a, b in itertools.pairwise(ordered) if ranks[a] != ranks[b]]
    signs = [(labels[b] > labels[a]) - (labels[b] < labels[a]) for a, b in steps]
    if set(signs) in ({1}, {-1}):
        return
    a, b = next(step for step, sign in zip(steps, signs) if sign != signs[0] or sign == 0)
    order = " < ".join(ordered)
    problems.append(f"[judgment] labels do not follow the order of the words ({order}): "
                    f"'{a}' = {_plain_number(labels[a])} but '{b}' = {_plain_number(labels[b])}; "
                    "number the words along the scale's order (or all in reverse), one number "
                    "per place.")


# [judgment] repeats: every presentation of a case, or only the first and one repeat.
REPEAT_MODES = ("all", "first-two")

# Every key the spec may hold, per table; used for "did you mean" suggestions.
VALID_KEYS: dict[str, tuple[str, ...]] = {
    "": ("study", "columns", "judgment", "cues", "rubric", "excluded", "phases"),
    "study": ("name", "data", "cases", "seed", "criterion_only_for_selected", "missing_words"),
    "columns": ROLES_REQUIRED + ROLES_OPTIONAL,
    "judgment": ("scale", "min", "max", "labels", "cut_off", "repeats"),
    "rubric": ("basis",),  # plus one key per cue
    "excluded": ("columns",),
    "phases": ("order", "trained"),
    "cue": ("type", "missing"),
    "data": ("path", "phase"),
}


@dataclass(frozen=True)
class JudgmentScale:
    """The judgment scale: its kind, range and optional words for values."""

    kind: str = "ordinal"
    min: float | None = None
    max: float | None = None
    labels: dict[str, float] = field(default_factory=dict)
    cut_off: float | None = None
    # How cases shown more than once are used: "first-two" (the first judgment and one
    # repeat), "all" (every presentation), or None: "all" when some case is shown more
    # than twice, else "first-two" (see calibrate.data.rules.mark_repeats).
    repeats: str | None = None

    @property
    def midpoint(self) -> float | None:
        if self.min is None or self.max is None:
            return None
        return (self.min + self.max) / 2.0


@dataclass(frozen=True)
class DataSource:
    """One judgments table; ``phase`` is set when the spec gives a phase per table."""

    path: Path
    phase: str | None = None


@dataclass(frozen=True)
class StudySpec:
    """A validated study spec. Paths are absolute (resolved against the spec's folder)."""

    name: str
    data: tuple[DataSource, ...]
    columns: dict[str, str]
    judgment: JudgmentScale
    cues: tuple[CueRule, ...]
    cases: Path | None = None
    seed: int = DEFAULT_SEED
    rubric: dict[str, float] | None = None
    rubric_basis: str = "standardized"
    excluded: tuple[str, ...] = ()
    phase_order: tuple[str, ...] | None = None
    trained: tuple[str, ...] | None = None
    criterion_only_for_selected: bool = False
    missing_words: tuple[str, ...] | None = None  # None: DEFAULT_MISSING_WORDS for numbers only
    source: Path | None = None
    # The spec file exactly as read (text and the sha256 of its bytes), kept so that
    # results.json can record what was run; None for a spec built in Python.
    source_text: str | None = field(default=None, compare=False, repr=False)
    source_sha256: str | None = field(default=None, compare=False, repr=False)

    @property
    def cue_names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.cues)

    @property
    def has_phases(self) -> bool:
        return self.phase_order is not None

    def role(self, name: str) -> str | None:
        return self.columns.get(name)

    @property
    def numeric_missing_words(self) -> tuple[str, ...]:
        """The words read as "no value" in numeric columns (cues, criterion, judgments)."""
        return DEFAULT_MISSING_WORDS if self.missing_words is None else self.missing_words

    @property
    def categorical_missing_words(self) -> tuple[str, ...]:
        """The words read as "no value" in categorical cues: only the spec's own list, so a
        level called "None" or "NA" stays a level unless the spec says otherwise."""
        return () if self.missing_words is None else self.missing_words

    def to_toml(self, *, relative_to: Path | None = None) -> str:
        """The spec as TOML text (paths relative to ``relative_to`` when given)."""
        import tomli_w

        def rel(p: Path) -> str:
            if relative_to is None:
                return str(p)
            try:
                return Path(p).resolve().relative_to(relative_to.resolve()).as_posix()
            except ValueError:
                return str(p)

        study: dict[str, Any] = {"name": self.name}
        if len(self.data) == 1 and self.data[0].phase is None:
            study["data"] = rel(self.data[0].path)
        else:
            study["data"] = [
                {"path": rel(d.path), **({"phase": d.phase} if d.phase else {})} for d in self.data
            ]
        if self.cases is not None:
            study["cases"] = rel(self.cases)
        study["seed"] = self.seed
        if self.criterion_only_for_selected:
            study["criterion_only_for_selected"] = True
        if self.missing_words is not None:
            study["missing_words"] = list(self.missing_words)
        doc: dict[str, Any] = {"study": study, "columns": dict(self.columns)}
        judgment: dict[str, Any] = {"scale": self.judgment.kind}
        for key in ("min", "max", "cut_off"):
            value = getattr(self.judgment, key)
            if value is not None:
                judgment[key] = _plain_number(value)
        if self.judgment.repeats is not None:
            judgment["repeats"] = self.judgment.repeats
        if self.judgment.labels:
            judgment["labels"] = {k: _plain_number(v) for k, v in self.judgment.labels.items()}
        doc["judgment"] = judgment
        cues: dict[str, Any] = {}
        for c in self.cues:
            cues[c.name] = c.kind if c.missing == "drop" else {"type": c.kind, "missing": c.missing}
        doc["cues"] = cues
        if self.rubric:
            doc["rubric"] = {"basis": self.rubric_basis, **self.rubric}
        if self.excluded:
            doc["excluded"] = {"columns": list(self.excluded)}
        if self.phase_order:
            phases: dict[str, Any] = {"order": list(self.phase_order)}
            if self.trained is not None:
                phases["trained"] = list(self.trained)
            doc["phases"] = phases
        return tomli_w.dumps(doc)


def _plain_number(value: float) -> int | float:
    return int(value) if float(value).is_integer() else float(value)


def _suggest(key: str, valid: tuple[str, ...] | list[str]) -> str:
    close = difflib.get_close_matches(key, list(valid), n=1, cutoff=0.6)
    if close:
        return f"did you mean '{close[0]}'?"
    return "valid keys here: " + ", ".join(sorted(valid)) + "."


def _check_keys(table: dict, section: str, problems: list[str], valid: tuple[str, ...]) -> None:
    where = f"[{section}]" if section else "the top level"
    for key in table:
        if key not in valid:
            problems.append(f"unknown key '{key}' in {where}; {_suggest(key, valid)}")


def _number(value: Any, what: str, problems: list[str]) -> float | None:
    """A finite number, or None when absent; anything else (text, true/false, inf, nan, an
    integer too large for a float) is a problem naming the key."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        problems.append(f"{what} must be a number, got {value!r}.")
        return None
    try:
        number = float(value)
    except OverflowError:
        number = math.inf
    if not math.isfinite(number):
        problems.append(f"{what} must be a finite number, got {value!r}; give an ordinary number.")
        return None
    return number


def _boolean(value: Any, what: str, problems: list[str]) -> bool:
    """A TOML true/false; text such as "no" or "false", or 0/1, is refused rather than guessed."""
    if isinstance(value, bool):
        return value
    problems.append(f"{what} must be true or false (without quotes), got {value!r}.")
    return False


def _check_column_name(name: str, what: str, problems: list[str]) -> None:
    """Names starting with '_' are calibrate's own working columns (_row, _file, ...)."""
    if name.startswith("_"):
        problems.append(f"{what} '{name}' starts with '_', which calibrate keeps for its own working "
                        "columns (such as _row and _file); rename the column in the table and the spec.")


def _parse_missing_words(raw: Any, problems: list[str]) -> tuple[str, ...] | None:
    """[study] missing_words: a list of words (text) meaning "no value"; None when absent."""
    if raw is None:
        return None
    if not isinstance(raw, list) or not all(isinstance(w, str) and w.strip() for w in raw):
        problems.append("[study] missing_words must be a list of words, e.g. missing_words = "
                        "[\"NA\", \"n/a\"] (an empty cell is always missing).")
        return None
    return tuple(w.strip() for w in raw)


def _path_problem(text: str, what: str) -> str | None:
    """A path the file system can take: no control characters (a NUL cannot be a file name)."""
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in text):
        return f"{what} {text!r} holds a control character; give a plain file path."
    return None


def _parse_data_sources(raw_data: Any, base_dir: Path, problems: list[str]) -> list[DataSource]:
    """[study] data: one path, or a list of paths or {path, phase} tables."""
    data_sources: list[DataSource] = []
    if raw_data is None:
        problems.append("[study] data is missing; give the judgments table's path.")
    elif isinstance(raw_data, str):
        data_sources.append(DataSource(path=(base_dir / raw_data)))
    elif isinstance(raw_data, list) and raw_data:
        for i, entry in enumerate(raw_data, start=1):
            if isinstance(entry, str):
                data_sources.append(DataSource(path=base_dir / entry))
            elif isinstance(entry, dict):
                _check_keys(entry, f"study.data #{i}", problems, VALID_KEYS["data"])
                if "path" not in entry:
                    problems.append(f"[study] data entry {i} has no 'path'.")
                    continue
                phase = entry.get("phase")
                data_sources.append(
                    DataSource(path=base_dir / str(entry["path"]),
                               phase=None if phase is None else str(phase))
                )
            else:
                problems.append(f"[study] data entry {i} must be a path or {{path, phase}}.")
    else:
        problems.append("[study] data must be a path or a list of {path = ..., phase = ...}.")
    with_phase = [d for d in data_sources if d.phase is not None]
    if with_phase and len(with_phase) != len(data_sources):
        problems.append("[study] data: give a phase for every table or for none.")
    bad = [_path_problem(str(d.path), "[study] data path") for d in data_sources]
    problems.extend(p for p in bad if p)
    return [d for d, p in zip(data_sources, bad) if not p]


def _parse_study(doc: dict, base_dir: Path, problems: list[str]) -> dict[str, Any]:
    """[study]: name, data, cases, seed, criterion_only_for_selected (StudySpec fields)."""
    study = doc.get("study")
    if not isinstance(study, dict):
        problems.append("the [study] table is missing; add [study] with name and data.")
        study = {}
    _check_keys(study, "study", problems, VALID_KEYS["study"])
    name_raw = study.get("name", "")
    name = name_raw.strip() if isinstance(name_raw, str) else ""
    if not isinstance(name_raw, str):
        problems.append(f"[study] name must be text, got {name_raw!r}.")
    elif not name:
        problems.append("[study] name is missing; give the study a short name.")
    data_sources = _parse_data_sources(study.get("data"), base_dir, problems)
    cases_path = study.get("cases")
    if cases_path is not None and not isinstance(cases_path, str):
        problems.append(f"[study] cases must be a path (text), got {cases_path!r}.")
        cases_path = None
    elif cases_path and _path_problem(cases_path, "[study] cases path"):
        problems.append(_path_problem(cases_path, "[study] cases path"))
        cases_path = None
    seed_raw = study.get("seed", DEFAULT_SEED)
    if isinstance(seed_raw, bool) or not isinstance(seed_raw, int) or not 0 <= seed_raw < 2**63:
        problems.append(f"[study] seed must be a whole number from 0 to 2^63 - 1, got {seed_raw!r}.")
        seed_raw = DEFAULT_SEED
    return {
        "name": name,
        "data": tuple(data_sources),
        "cases": base_dir / str(cases_path) if cases_path else None,
        "seed": int(seed_raw),
        "criterion_only_for_selected": _boolean(study.get("criterion_only_for_selected", False),
                                                "[study] criterion_only_for_selected", problems),
        "missing_words": _parse_missing_words(study.get("missing_words"), problems),
    }


def _parse_columns(doc: dict, problems: list[str]) -> dict[str, str]:
    """[columns]: rater, case and judgment are required; one role per column."""
    columns_raw = doc.get("columns")
    if not isinstance(columns_raw, dict):
        problems.append("the [columns] table is missing; name the rater, case and judgment columns.")
        columns_raw = {}
    _check_keys(columns_raw, "columns", problems, VALID_KEYS["columns"])
    columns: dict[str, str] = {}
    for role in ROLES_REQUIRED:
        if role not in columns_raw:
            problems.append(
                f"[columns] has no '{role}'; add {role} = \"<column name>\" naming the {role} column."
            )
    for role, col in columns_raw.items():
        if role in VALID_KEYS["columns"]:
            if not isinstance(col, str) or not col.strip():
                problems.append(f"[columns] {role} must be a column name (text).")
            else:
                _check_column_name(col, f"[columns] {role}", problems)
                columns[role] = col
    seen_cols: dict[str, str] = {}
    for role, col in columns.items():
        if col in seen_cols:
            problems.append(f"[columns] column '{col}' is given two roles: {seen_cols[col]} and {role}.")
        seen_cols[col] = role
    return columns


def _parse_labels(labels_raw: Any, jmin: float | None, jmax: float | None,
                  problems: list[str]) -> dict[str, float]:
    """[judgment] labels: word = number, each within min..max."""
    labels: dict[str, float] = {}
    if not isinstance(labels_raw, dict):
        problems.append("[judgment] labels must be a table of word = number.")
        return labels
    for word, value in labels_raw.items():
        v = _number(value, f"[judgment] labels.{word}", problems)
        if v is not None:
            labels[str(word)] = v
            if jmin is not None and jmax is not None and not (jmin <= v <= jmax):
                problems.append(f"[judgment] label '{word}' = {_plain_number(v)} lies outside "
                                f"min..max ({_plain_number(jmin)}..{_plain_number(jmax)}).")
    return labels


def _parse_judgment(doc: dict, problems: list[str]) -> JudgmentScale:
    """[judgment]: the scale kind, min and max (ordinal needs both, binary is 0..1), labels,
    cut_off."""
    judgment_raw = doc.get("judgment", {})
    if not isinstance(judgment_raw, dict):
        problems.append("[judgment] must be a table.")
        judgment_raw = {}
    _check_keys(judgment_raw, "judgment", problems, VALID_KEYS["judgment"])
    kind = judgment_raw.get("scale", "ordinal")
    if kind not in SCALES:
        problems.append(f"[judgment] scale must be one of {', '.join(SCALES)}; got {kind!r}. "
                        f"{_suggest(str(kind), SCALES)}")
        kind = "ordinal"
    jmin = _number(judgment_raw.get("min"), "[judgment] min", problems)
    jmax = _number(judgment_raw.get("max"), "[judgment] max", problems)
    if kind == "binary":
        jmin = 0.0 if jmin is None else jmin
        jmax = 1.0 if jmax is None else jmax
        if (jmin, jmax) != (0.0, 1.0):
            problems.append("[judgment] a binary scale runs from min = 0 to max = 1.")
    if kind == "ordinal" and (jmin is None or jmax is None):
        problems.append("[judgment] an ordinal scale needs min and max (e.g. min = 1, max = 7).")
    if jmin is not None and jmax is not None and jmin >= jmax:
        problems.append(f"[judgment] min ({_plain_number(jmin)}) must be below max "
                        f"({_plain_number(jmax)}); swap them or fix the scale.")
    labels = _parse_labels(judgment_raw.get("labels", {}), jmin, jmax, problems)
    _check_label_order(labels, problems)
    cut_off = _number(judgment_raw.get("cut_off"), "[judgment] cut_off", problems)
    repeats = judgment_raw.get("repeats")
    if repeats is not None and repeats not in REPEAT_MODES:
        problems.append(f"[judgment] repeats must be one of {', '.join(repr(m) for m in REPEAT_MODES)}; "
                        f"got {repeats!r}.")
        repeats = None
    return JudgmentScale(kind=kind, min=jmin, max=jmax, labels=labels, cut_off=cut_off,
                         repeats=repeats)


def _parse_cue(cue: str, rule: Any, columns: dict[str, str], problems: list[str]) -> CueRule | None:
    """One [cues] entry: "numeric", "categorical", or {type, missing}; None when invalid."""
    if isinstance(rule, str):
        ctype, missing = rule, "drop"
    elif isinstance(rule, dict):
        _check_keys(rule, f"cues.{cue}", problems, VALID_KEYS["cue"])
        ctype, missing = rule.get("type", "numeric"), rule.get("missing", "drop")
    else:
        problems.append(f"[cues] {cue} must be \"numeric\", \"categorical\" or a table.")
        return None
    if ctype not in CUE_KINDS:
        problems.append(f"[cues] {cue}: type must be numeric or categorical; got {ctype!r}. "
                        f"{_suggest(str(ctype), CUE_KINDS)}")
        return None
    if missing not in MISSING_RULES:
        problems.append(f"[cues] {cue}: missing must be drop or indicator; got {missing!r}.")
        return None
    if missing == "indicator" and ctype != "numeric":
        problems.append(f"[cues] {cue}: the indicator rule is for numeric cues; a categorical cue "
                        "can take 'missing' as one of its levels instead.")
        return None
    _check_column_name(cue, "[cues] cue", problems)
    separators = [sep for sep in TERM_SEPARATORS if sep in cue]
    if separators:
        problems.append(f"[cues] cue '{cue}' holds '{separators[0]}', which calibrate uses in the "
                        "names of the terms it makes (cue=level for a category, cue:missing for the "
                        "missing-value term), so its weight could be confused with one of them; "
                        "rename the column without '=' or ':' (for example with '_').")
    if cue in set(columns.values()):
        # a column given two roles is reported by [columns]; name the last one here
        role = [r for r, c in columns.items() if c == cue][-1]
        problems.append(f"[cues] '{cue}' is also named in [columns] as "
                        f"{role}; a column is either a cue or a role.")
    return CueRule(name=str(cue), kind=ctype, missing=missing)


def _parse_cues(doc: dict, columns: dict[str, str], problems: list[str]) -> tuple[CueRule, ...]:
    """[cues]: none may also be a role column; absent or empty for agreement-only data.

    A study without cues (raters x cases, nothing known about the cases) still has
    test-retest, agreement, severity, readers per file and the files view; the
    analyses that model judgments on cues are left out and say so (see ingest).
    """
    cues_raw = doc.get("cues", {})
    if not isinstance(cues_raw, dict):
        problems.append("[cues] must be a table of column = \"numeric\" or \"categorical\"; "
                        "leave it out for agreement-only data (raters x cases, no cues).")
        cues_raw = {}
    cues = (_parse_cue(cue, rule, columns, problems) for cue, rule in cues_raw.items())
    return tuple(c for c in cues if c is not None)


def _parse_rubric(doc: dict, cue_names: list[str],
                  problems: list[str]) -> tuple[dict[str, float] | None, str]:
    """[rubric]: basis plus cue = weight (zero or more, not all zero), scaled to sum to 1.
    Returns (weights per cue or None, basis)."""
    rubric = None
    basis = "standardized"
    rubric_raw = doc.get("rubric")
    if rubric_raw is None:
        return rubric, basis
    if not isinstance(rubric_raw, dict):
        problems.append("[rubric] must be a table of cue = weight.")
        return rubric, basis
    basis = rubric_raw.get("basis", "standardized")
    if basis not in RUBRIC_BASES:
        problems.append(f"[rubric] basis must be standardized or raw; got {basis!r}.")
    weights: dict[str, float] = {}
    for cue, w in rubric_raw.items():
        if cue == "basis":
            continue
        if cue not in cue_names:
            problems.append(f"[rubric] names '{cue}', which is not a cue; "
                            f"{_suggest(cue, cue_names)}")
            continue
        value = _number(w, f"[rubric] {cue}", problems)
        if value is None:
            continue
        if value < 0:
            problems.append(f"[rubric] {cue} has a negative weight ({value}); rubric weights "
                            "are shares of attention, zero or more. Reverse-score the cue instead.")
            continue
        weights[cue] = value
    total = sum(weights.values())
    if weights and total <= 0:
        problems.append("[rubric] the weights add up to zero; give at least one positive weight.")
    elif weights:
        rubric = {c: weights.get(c, 0.0) / total for c in cue_names}
    return rubric, basis


def _parse_excluded(doc: dict, cue_names: list[str], role_columns: set[str],
                    problems: list[str]) -> tuple[str, ...]:
    """[excluded] columns: attributes that must not influence judgments; never a cue or a role."""
    excluded_raw = doc.get("excluded")
    if excluded_raw is None:
        return ()
    if not isinstance(excluded_raw, dict):
        problems.append("[excluded] must be a table with columns = [...].")
        return ()
    _check_keys(excluded_raw, "excluded", problems, VALID_KEYS["excluded"])
    cols = excluded_raw.get("columns", [])
    if isinstance(cols, str):
        cols = [cols]
    if not isinstance(cols, list):
        problems.append("[excluded] columns must be a list of column names.")
        cols = []
    if not all(isinstance(c, str) and c.strip() for c in cols):
        problems.append("[excluded] columns must be a list of column names (text).")
        cols = [c for c in cols if isinstance(c, str) and c.strip()]
    for col in cols:
        _check_column_name(col, "[excluded] column", problems)
        if col in cue_names:
            problems.append(f"[excluded] '{col}' is also a cue; an attribute that must not "
                            "influence judgments cannot be a cue. Remove it from [cues] or [excluded].")
        if col in role_columns:
            problems.append(f"[excluded] '{col}' is also named in [columns].")
    excluded = tuple(str(c) for c in cols)
    if excluded and not cue_names:
        problems.append("[excluded] needs at least one cue in [cues]: the check asks whether an "
                        "attribute adds to the rater's policy on the cues. List the cues, or "
                        "remove [excluded] for agreement-only data.")
    if len(set(excluded)) != len(excluded):
        problems.append("[excluded] lists a column twice.")
    return excluded


def _parse_phases(doc: dict, problems: list[str]) -> tuple[tuple[str, ...] | None, tuple[str, ...] | None]:
    """[phases]: order (each phase once) and the trained raters. Returns (order, trained)."""
    phases_raw = doc.get("phases")
    phase_order: tuple[str, ...] | None = None
    trained: tuple[str, ...] | None = None
    if phases_raw is None:
        return phase_order, trained
    if not isinstance(phases_raw, dict):
        problems.append("[phases] must be a table with order = [...].")
        return phase_order, trained
    _check_keys(phases_raw, "phases", problems, VALID_KEYS["phases"])
    order = phases_raw.get("order")
    if not isinstance(order, list) or not order:
        problems.append("[phases] order must list the phases, e.g. order = [\"before\", \"after\"].")
    else:
        phase_order = tuple(str(p) for p in order)
        if len(set(phase_order)) != len(phase_order):
            problems.append("[phases] order lists a phase twice.")
    if "trained" in phases_raw:
        t = phases_raw["trained"]
        if not isinstance(t, list):
            problems.append("[phases] trained must be a list of rater ids.")
        else:
            trained = tuple(str(r) for r in t)
    return phase_order, trained


def _check_phase_sources(columns: dict[str, str], data: tuple[DataSource, ...],
                         phase_order: tuple[str, ...] | None, problems: list[str]) -> None:
    """Phases come from a phase column or a phase per table (not both), and need [phases]
    order exactly when they are given."""
    with_phase = [d for d in data if d.phase is not None]
    has_phase_source = "phase" in columns or bool(with_phase)
    if has_phase_source and phase_order is None and not any("[phases]" in p for p in problems):
        problems.append("the data has phases (a phase column or a phase per table) but the spec has no "
                        "[phases] order; add [phases] order = [\"before\", \"after\"] (your phase names).")
    if with_phase and phase_order is not None:
        for d in with_phase:
            if d.phase not in phase_order:
                problems.append(f"[study] data phase '{d.phase}' is not in [phases] order.")
    if "phase" in columns and with_phase:
        problems.append("give phases either as a phase column or per data table, not both.")
    if phase_order is not None and not has_phase_source:
        problems.append("[phases] is given but the data has no phase column and no phase per table; "
                        "add phase = \"<column>\" to [columns] or a phase to each [study] data entry.")


def parse_spec(doc: dict, *, base_dir: Path, source: Path | None = None) -> StudySpec:
    """Validate a parsed TOML document and build a :class:`StudySpec`.

    Each section is checked by its own function, in the order of the file; every
    problem is collected before anything is raised.

    Raises
    ------
    SpecError
        listing every problem found, each with its fix.
    """
    problems: list[str] = []
    _check_keys(doc, "", problems, VALID_KEYS[""])
    study = _parse_study(doc, base_dir, problems)
    columns = _parse_columns(doc, problems)
    scale = _parse_judgment(doc, problems)
    cues = _parse_cues(doc, columns, problems)
    cue_names = [c.name for c in cues]
    rubric, basis = _parse_rubric(doc, cue_names, problems)
    excluded = _parse_excluded(doc, cue_names, set(columns.values()), problems)
    phase_order, trained = _parse_phases(doc, problems)
    _check_phase_sources(columns, study["data"], phase_order, problems)
    if problems:
        raise SpecError(problems, path=str(source) if source else None)
    return StudySpec(**study, columns=columns, judgment=scale, cues=cues, rubric=rubric,
                     rubric_basis=basis, excluded=excluded, phase_order=phase_order,
                     trained=trained, source=source)


def read_spec(path: str | Path) -> StudySpec:
    """Read and validate a study spec from a TOML file."""
    path = Path(path)
    if path.is_dir():
        raise SpecError(f"{path} is a folder, not a spec file; give the spec's file, for example "
                        f"{path / 'study.toml'}.")
    if not path.is_file():
        raise SpecError(f"the spec file {path} does not exist. Draft one with "
                        "'calibrate init <judgments table>'.")
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise SpecError("the spec is not UTF-8 text (is it the right file?); save it as UTF-8.",
                        path=str(path)) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        hint = ""
        if "overwrite" in str(exc).lower() or "duplicate" in str(exc).lower():
            hint = " A key is listed twice (for example a cue named twice in [cues]); keep one."
        raise SpecError(f"the TOML cannot be read: {exc}.{hint}", path=str(path)) from None
    spec = parse_spec(doc, base_dir=path.resolve().parent, source=path)
    return replace(spec, source_text=text, source_sha256=hashlib.sha256(raw).hexdigest())


def spec_record(spec: StudySpec) -> dict:
    """What results.json keeps of the spec so a later reader can verify the audit: the file
    name, the sha256 of its bytes and its text as read, and the spec as parsed (the same
    TOML ``to_toml`` writes, read back: paths relative to the spec's folder)."""
    base = spec.source.resolve().parent if spec.source is not None else None
    return {"path": spec.source.name if spec.source is not None else None,
            "sha256": spec.source_sha256,
            "text": spec.source_text,
            "parsed": tomllib.loads(spec.to_toml(relative_to=base))}


def write_spec(spec: StudySpec, path: str | Path) -> None:
    """Write ``spec`` as TOML next to its data (paths relative to the spec's folder)."""
    from ..safe_files import atomic_write_text

    path = Path(path)
    atomic_write_text(path, spec.to_toml(relative_to=path.resolve().parent))
