"""The workbook's read-me sheet: every column of every table the audit writes has a sentence
of its own, not its name spelled out again.

Built from the demo (criterion, rubric, excluded attribute, phases, repeats) and from a binary
study (odds ratios, Tjur's R²), so that every column the audit writes appears at least once.
"""

from __future__ import annotations

import io
import re

import pytest
from openpyxl import load_workbook

from calibrate.analyses import audit
from calibrate.data import write_demo
from calibrate.output.columns import TABLE_COLUMN_NOTES, column_description
from calibrate.output.workbook import NO_DESCRIPTION, README_SHEET, workbook_bytes
from calibrate.writing import TABLE_DESCRIPTIONS
from tests.varied_studies import binary_study

# Words that add nothing to a column's name: a description made of the name's words and these
# only ("Icc a1 (see the README's table list).") says nothing the header does not.
FILLER = frozenset("""a an the of in on for to and or per by with as is are be its it this that see
readme readme's s table tables list column columns value values number figure row rows""".split())
# Words a description must add beyond its column's name and the filler above.
LEAST_NEW_WORDS = 3


def _words(text: str) -> list[str]:
    return re.findall(r"[a-z0-9²']+", text.lower().replace("_", " "))


def says_more_than_its_name(column: str, description: str) -> bool:
    name = set(_words(column))
    new = [w for w in _words(description) if w not in name and w not in FILLER]
    return len(new) >= LEAST_NEW_WORDS


def test_the_repeat_check_catches_a_description_that_only_spells_out_the_name():
    assert not says_more_than_its_name("icc_a1", "Icc a1 (see the README's table list).")
    assert not says_more_than_its_name("n_readers", "Number of readers.")
    assert says_more_than_its_name("n_readers", "Raters who judged the file in the phase (first judgments).")


@pytest.fixture(scope="module")
def workbooks(tmp_path_factory):
    base = tmp_path_factory.mktemp("readme")
    demo = audit(write_demo(base / "demo").spec, n_boot=100)
    binary = audit(binary_study(base / "binary"), n_boot=100)
    return {"demo": demo.tables, "binary": binary.tables}


def _readme_rows(tables) -> list[tuple[str, str, str]]:
    wb = load_workbook(io.BytesIO(workbook_bytes(tables, TABLE_DESCRIPTIONS)), read_only=True)
    return [(r[0], r[1], r[2]) for r in wb[README_SHEET].iter_rows(min_row=2, values_only=True) if r[1]]


@pytest.mark.parametrize("study", ["demo", "binary"])
def test_every_column_has_a_sentence_of_its_own(workbooks, study):
    tables = workbooks[study]
    missing = [f"{t}.{c}" for t, frame in tables.items() for c in map(str, frame.columns)
               if column_description(t, c) is None]
    assert not missing, ("no description in calibrate/output/columns.py for: " + ", ".join(missing)
                         + " (add a sentence to TABLE_COLUMN_NOTES[table] or COLUMN_NOTES)")
    rows = _readme_rows(tables)
    assert len(rows) == sum(len(f.columns) for f in tables.values())
    assert not [r for r in rows if r[2] == NO_DESCRIPTION]
    thin = [f"{sheet}.{column}: {text!r}" for sheet, column, text in rows
            if not says_more_than_its_name(column, text)]
    assert not thin, "descriptions that only repeat the column's name: " + "; ".join(thin)


def test_every_described_table_is_one_the_audit_writes(workbooks):
    written = set(workbooks["demo"]) | set(workbooks["binary"])
    assert set(TABLE_COLUMN_NOTES) <= written, set(TABLE_COLUMN_NOTES) - written
