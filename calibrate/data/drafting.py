"""Draft a study spec from the tables a user has (``calibrate init``).

Every guess is written with a comment for the user to check, and the draft is meant to
pass ``calibrate check`` as it stands:

- roles (rater, case, judgment, sequence, phase, criterion) are guessed from column
  names, the judgment also from its numeric type; the scale and its ends from the
  judgments' values;
- with a cases table (``cases=``), its columns are read on the judged cases only, so a
  column that is the same for every judged case (for example the round of a one-round
  table) is recognised as constant;
- a column is left out of the cues, with a comment saying why, when it is constant, when
  it looks like an id (every value distinct, or an id-like name with distinct whole
  numbers), or when it is free text;
- a column whose name or values suggest a protected or sensitive attribute
  (:data:`SENSITIVE_WORDS`, our own short list) is never proposed as a cue: it goes to
  ``[excluded]`` with a CHECK comment, so that the audit tests that it does not sway
  the judgments; the user decides whether it belongs there or nowhere.
"""

from __future__ import annotations

import re
from typing import Any

import pandas as pd

from .spec import DEFAULT_SEED, ROLES_REQUIRED, known_scale_ranks

__all__ = ["ID_WORDS", "SENSITIVE_VALUES", "SENSITIVE_WORDS", "draft_spec", "sensitive_columns"]

# Name words that suggest a protected or sensitive attribute (our own list; matched
# against the words of a column name, so "age" finds "age" and "applicant_age" but not
# "page" or "average").
SENSITIVE_WORDS = ("gender", "sex", "ethnicity", "ethnic", "race", "religion", "religious", "age",
                   "disability", "disabled", "nationality", "national", "citizenship", "region",
                   "alumni", "alumnus", "legacy", "birth", "dob", "marital", "pregnancy", "caste")
# Values that mark a column as a gender-like attribute whatever it is called.
SENSITIVE_VALUES = frozenset({"male", "female", "man", "woman", "men", "women", "non-binary", "nonbinary"})
# Name words of id-like columns: with distinct whole numbers they are ids, not cues.
ID_WORDS = ("id", "code", "number", "no", "num", "index", "row", "key", "uuid")

_ROLE_HINTS = {
    "rater": ("rater", "reviewer", "reader", "grader", "judge", "assessor", "scorer", "marker",
              "evaluator", "examiner"),
    "case": ("case", "applicant", "candidate", "file", "essay_id", "student", "item", "subject",
             "id", "application"),
    "judgment": ("judgment", "judgement", "rating", "score", "grade", "decision", "verdict", "mark",
                 "evaluation", "rank"),
    "sequence": ("sequence", "order", "read_order", "position", "timestamp", "time", "seq", "when"),
    "phase": ("phase", "session", "wave", "round_name", "stage", "period"),
    "criterion": ("criterion", "outcome", "result", "first_year_result", "performance", "truth",
                  "key", "expert_score"),
}
_JUDGMENT_ROLES = ("rater", "case", "judgment", "sequence", "phase")


def _name_words(name: str) -> list[str]:
    """The words of a column name: split at non-letters and at lower-to-upper changes."""
    spaced = re.sub(r"([a-z])([A-Z])", r"\1 \2", str(name))
    return [w for w in re.split(r"[^A-Za-z]+", spaced.lower()) if w]


def sensitive_columns(table: pd.DataFrame, columns: list[str]) -> list[str]:
    """The columns whose name words or values suggest a protected or sensitive attribute."""
    found = []
    for c in columns:
        words = set(_name_words(c))
        values = {str(v).strip().lower() for v in table[c].dropna().unique()[:50]}
        if words & set(SENSITIVE_WORDS) or (values and values & SENSITIVE_VALUES
                                            and len(values - SENSITIVE_VALUES) <= 2):
            found.append(c)
    return found


def _guess_role(columns: list[str], role: str, taken: set[str]) -> str | None:
    hints = _ROLE_HINTS[role]
    lowered = {c: c.lower().strip() for c in columns if c not in taken}
    for hint in hints:  # exact names first, in order of preference
        for col, low in lowered.items():
            if low == hint:
                return col
    for hint in hints:
        for col, low in lowered.items():
            if hint in low and len(hint) > 2:
                return col
    return None


def _guess_scale(values: pd.Series, numeric: bool) -> tuple[str, Any, Any, dict, bool]:
    """The judgment scale a column looks like: (kind, min, max, labels, labels_need_check).

    Numbers: 0/1 is binary, up to 11 whole values ordinal, else continuous. Words from a
    known word scale (KNOWN_WORD_SCALES) are numbered in its order, lowest 1 (two words:
    binary, the higher word 1). Other words are numbered alphabetically, which says
    nothing about their meaning, so the draft marks them for the user to renumber.
    """
    if numeric:
        nums = pd.to_numeric(values)
        distinct = sorted(nums.unique())
        if set(distinct) <= {0, 1}:
            return "binary", 0, 1, {}, False
        if all(float(v).is_integer() for v in distinct) and len(distinct) <= 11:
            return "ordinal", int(min(distinct)), int(max(distinct)), {}, False
        return "continuous", float(nums.min()), float(nums.max()), {}, False
    words = sorted({str(v).strip() for v in values.unique()})
    ranks = known_scale_ranks(words)
    if ranks is not None:
        words = sorted(words, key=lambda w: (ranks[w], w))
    if len(words) == 2:
        if ranks is None:
            yes = [w for w in words if w.lower() in ("admit", "yes", "accept", "pass", "1", "true")]
            words = [w for w in words if w not in yes[:1]] + yes[:1]
        return "binary", 0, 1, {words[1]: 1, words[0]: 0}, ranks is None
    return "ordinal", 1, len(words), {w: i + 1 for i, w in enumerate(words)}, ranks is None


def _is_numeric(values: pd.Series) -> bool:
    values = values.dropna()
    return bool(len(values)) and bool(pd.to_numeric(values, errors="coerce").notna().all())


def _why_not_a_cue(name: str, values: pd.Series, numeric: bool) -> str | None:
    """Why a leftover column is no cue (constant, id-like, free text), or None for a cue."""
    present = values.dropna()
    if present.nunique() <= 1:
        return "the same in every judged case (constant), so its weight cannot be estimated"
    distinct_per_row = present.nunique() == len(present)
    if numeric:
        nums = pd.to_numeric(present)
        whole = bool((nums == nums.round()).all())
        if distinct_per_row and whole and set(_name_words(name)) & set(ID_WORDS):
            return "looks like an id (a distinct whole number in every case)"
        return None
    if distinct_per_row:
        return "looks like an id or free text (a different value in every case)"
    if present.nunique() > max(12, len(present) // 20):
        return "looks like free text (too many different values for a category)"
    return None


def _guess_cues(per_case: pd.DataFrame, columns: list[str]) -> tuple[list[tuple[str, str, str | None]],
                                                                      list[tuple[str, str]]]:
    """(cues as (name, kind, missing rule or None), left-out columns as (name, reason))."""
    cues, left_out = [], []
    for c in columns:
        numeric = _is_numeric(per_case[c])
        reason = _why_not_a_cue(c, per_case[c], numeric)
        if reason is not None:
            left_out.append((c, reason))
        elif numeric:
            cues.append((c, "numeric", "indicator" if per_case[c].isna().any() else None))
        else:
            cues.append((c, "categorical", None))
    return cues, left_out


def _judgment_lines(scale: str, jmin, jmax, labels: dict, labels_unsure: bool, q) -> list[str]:
    """The draft's [judgment] table; words numbered only alphabetically get a CHECK line."""
    lines = ["", "[judgment]   # CHECK: the scale (guessed from the judgments' values)", f"scale = {q(scale)}"]
    if jmin is not None:
        lines += [f"min = {jmin}", f"max = {jmax}"]
    if labels_unsure:
        lines.append("# CHECK: these words are numbered in alphabetical order, which says nothing "
                     "about their meaning;")
        lines.append("# renumber them so that the numbers follow the scale (a better judgment higher).")
    if labels:
        lines.append("labels = { " + ", ".join(f"{q(k)} = {v}" for k, v in labels.items()) + " }")
    return lines


def _q(text: str) -> str:
    return '"' + str(text).replace("\\", "\\\\").replace('"', '\\"') + '"'


def _per_case_values(table: pd.DataFrame, cases: pd.DataFrame | None, case_col: str | None,
                     columns: list[str]) -> pd.DataFrame:
    """One row per judged case: the judgments table's leftover columns (first value per case)
    or the cases table restricted to the judged cases."""
    if cases is not None:
        if case_col is None:
            return cases[columns]
        judged = set(table[case_col].dropna().astype(str))
        return cases.loc[cases[case_col].astype(str).isin(judged).to_numpy(), columns]
    if case_col is None:
        return table[columns]
    return table.drop_duplicates(subset=[case_col])[columns]


def _criterion_lines(table, cases, case_col, criterion) -> list[str]:
    """A CHECK line when the criterion is missing for some judged cases (often known only
    for the selected ones, which the lens model must be told)."""
    if criterion is None:
        return []
    values = _per_case_values(table, cases, case_col, [criterion])[criterion]
    missing = int(values.isna().sum())
    if not missing:
        return []
    return [f"# CHECK: the criterion '{criterion}' is missing for {missing} of {len(values)} judged cases;",
            "# if it is known only for the cases that were selected (admitted, hired), say so:",
            "# criterion_only_for_selected = true"]


def _cue_lines(cues, left_out, sensitive) -> list[str]:
    """The draft's [cues] (with the columns left out and why), rubric hint and [excluded]."""
    lines = ["", "[cues]   # CHECK: numeric or categorical; remove columns that are not cues"]
    for name, kind, missing in cues:
        if missing:
            lines.append(f"{_q(name)} = {{ type = \"numeric\", missing = \"indicator\" }}  "
                         "# has missing values: 'indicator' keeps those cases, 'drop' removes them")
        else:
            lines.append(f"{_q(name)} = {_q(kind)}")
    for name, reason in left_out:
        lines.append(f"# {_q(name)} left out: {reason}")
    lines += ["", "# [rubric]              # optional: the weights the panel is meant to use",
              "# basis = \"standardized\""]
    if sensitive:
        lines += ["", "[excluded]   # CHECK: these columns look like protected or sensitive attributes, so they",
                  "# are not cues; listed here, the audit tests that they do not sway the judgments.",
                  "# Keep them here, or remove them, as the institution's policies and the law allow.",
                  "columns = [" + ", ".join(_q(c) for c in sensitive) + "]"]
    else:
        lines += ["# [excluded]            # optional: attributes that must not influence judgments",
                  "# columns = []"]
    return lines


def draft_spec(table: pd.DataFrame, *, data_name: str, study_name: str,
               cases: pd.DataFrame | None = None, cases_name: str | None = None) -> str:
    """Draft a spec (TOML text with comments) from a judgments table and, optionally, a
    cases table of cues per case joined on the case id (see the module doc)."""
    columns = [c for c in table.columns if not str(c).startswith("_")]
    taken: set[str] = set()
    roles: dict[str, str | None] = {}
    for role in _JUDGMENT_ROLES + (("criterion",) if cases is None else ()):
        roles[role] = _guess_role(columns, role, taken)
        if roles[role]:
            taken.add(roles[role])
    if roles["judgment"] is None:
        candidates = [c for c in columns if c not in taken and _is_numeric(table[c])]
        roles["judgment"] = candidates[-1] if candidates else None
        if roles["judgment"]:
            taken.add(roles["judgment"])
    case_col = roles["case"]
    if cases is not None:
        if case_col is not None and case_col not in cases.columns:
            from ..errors import CalibrateError

            raise CalibrateError(
                f"the cases table {cases_name or ''} has no column '{case_col}', the case id of the "
                "judgments table; the two tables are joined on a column of the same name, so rename "
                "one of them.")
        case_columns = [c for c in cases.columns if not str(c).startswith("_") and c != case_col]
        roles["criterion"] = _guess_role(case_columns, "criterion", set())
        leftovers = [c for c in case_columns if c != roles["criterion"]]
        per_case = _per_case_values(table, cases, case_col, leftovers)
    else:
        leftovers = [c for c in columns if c not in taken]
        per_case = _per_case_values(table, None, case_col, leftovers)
    sensitive = sensitive_columns(per_case, leftovers)
    cues, left_out = _guess_cues(per_case, [c for c in leftovers if c not in sensitive])
    jcol = roles["judgment"]
    scale, jmin, jmax, labels, labels_unsure = (
        ("continuous", None, None, {}, False) if jcol is None
        else _guess_scale(table[jcol].dropna(), _is_numeric(table[jcol])))
    lines = [
        "# Draft study spec written by 'calibrate init'. Check every line marked CHECK,",
        "# then run 'calibrate check' on this file.",
        "",
        "[study]",
        f"name = {_q(study_name)}",
        f"data = {_q(data_name)}",
        (f"cases = {_q(cases_name)}" if cases is not None
         else "# cases = \"cases.csv\"        # optional: a table of cues per case, joined on the case id"),
        f"seed = {DEFAULT_SEED}",
        *_criterion_lines(table, cases, case_col, roles["criterion"]),
        "",
        "[columns]   # CHECK: which column plays which role",
    ]
    for role in ("rater", "case", "judgment", "sequence", "phase", "criterion"):
        col = roles[role]
        if col is None:
            lines.append(f"{role} = \"\"   # CHECK: not found; name the {role} column" if role in ROLES_REQUIRED
                         else f"# {role} = \"\"   # optional")
        else:
            lines.append(f"{role} = {_q(col)}")
    lines += _judgment_lines(scale, jmin, jmax, labels, labels_unsure, _q)
    lines += _cue_lines(cues, left_out, sensitive)
    if roles["phase"]:
        phases = [str(v) for v in pd.unique(table[roles["phase"]].dropna())]
        lines += ["", "[phases]   # CHECK: the order of the phases",
                  "order = [" + ", ".join(_q(p) for p in phases) + "]"]
    return "\n".join(lines) + "\n"
