"""Notes (warnings) grouped by kind: one line per kind with a count and a few examples.

Every warning the audit records carries a stable ``kind`` beside its text. A warning of the
data layer gets its kind where it is made (``Collector.warn(kind=...)``, one code of
:data:`NOTE_TITLES` per input rule). A note of an analysis gets ``<analysis>:<words>``: the
analysis that wrote it and the first words of its wording with every quoted name and number
taken out, so the 29 notes "Rater 'p01': 4.7 cases per weight ..." of one panel share one
kind whatever the rater and the figure. Readers (the panel summary's data-quality section,
the command line) show one line per kind; the full list stays in results.json and in the
``notes`` table.

Old results folders without a ``kind`` are grouped by the same wording rule, so a report
rebuilt from them still groups.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import pandas as pd

#: The data layer's warning kinds and their plain titles (one per input rule that warns).
NOTE_TITLES = {
    "duplicate_rows": "Rows identical to an earlier row were dropped as duplicates",
    "no_judgment": "Rows without a judgment were dropped",
    "criterion_missing": "The outcome is missing for some cases (they leave the lens model only)",
    "cue_missing": "A cue is missing for some cases",
    "later_presentations_dropped": "Third and later showings of a case were dropped "
                                   "(only the first showing and its repeat are used)",
    "too_few_cases": "Raters with too few usable cases for a policy fit",
    "empty_phase": "Phases without judgments",
    "every_presentation_used": "Cases shown more than twice: every showing is used "
                               "(policy on each case's mean judgment, consistency over all showings)",
    "no_cues": "The study lists no cues (agreement-only: the analyses that fit judgments on cues are skipped)",
}

#: Plain names of the analyses whose notes are coded ``<analysis>:<words>``.
ANALYSIS_WORDS = {
    "policies": "Fitting the policies", "retest": "Test-retest", "agreement": "Panel agreement",
    "peer_agreement": "Agreement with the other readers", "severity": "Severity",
    "gstudy": "Readers per file", "files": "Files", "lens": "Lens model",
    "alignment": "Rubric alignment", "excluded": "Excluded attributes",
    "cutoffs": "Cut-off check", "drift": "Drift over the reading order",
    "rater_pairs": "Rater pairs", "homogeneity": "Policies alike", "grouping": "Policy groups",
}

_QUOTED = re.compile(r"'[^']*'|\"[^\"]*\"")
_NUMBER = re.compile(r"[-+]?\d[\d,]*(?:\.\d+)?(?:e[-+]?\d+)?", re.IGNORECASE)
_WORD = re.compile(r"[a-z_]+")


def wording_code(message: str, *, words: int = 6) -> str:
    """The first ``words`` words of a message with quoted names and numbers taken out,
    joined by hyphens: the same for two notes that differ only in names and figures."""
    bare = _NUMBER.sub(" ", _QUOTED.sub(" ", str(message).lower()))
    return "-".join(_WORD.findall(bare)[:words]) or "note"


def analysis_note(analysis: str, message: str, *, phase: str | None, rater: str | None = None) -> dict:
    """One analysis note as a results.json warning: the text, where it arose and its kind.

    The message keeps the wording readers know ("policies (before): Rater 'r1': ...");
    the kind codes the analysis and the wording of the note alone (``message`` without
    the rater's name), so every rater's note of one sort has the same kind.
    """
    where = f"{analysis} ({phase})" if phase is not None else analysis
    message = str(message)
    if rater is not None:
        own = f"Rater '{rater}': "
        message = message[len(own):] if message.startswith(own) else message  # named once
    text = f"Rater '{rater}': {message}" if rater is not None else message
    return {"severity": "warning", "message": f"{where}: {text}", "file": None, "row": None,
            "column": None, "kind": f"{analysis}:{wording_code(message)}", "rater": rater,
            "case": None, "phase": phase}


def _kind_of(note: Mapping) -> str:
    kind = note.get("kind")
    return str(kind) if kind else f"note:{wording_code(note.get('message', ''))}"


def _subject(note: Mapping, *, with_phase: bool) -> str | None:
    """What a note is about, in a few words ("rater 'r1', case 'c2'"), or None; the phase is
    named only when the kind arose in more than one."""
    bits = [f"{what} '{note[what]}'" for what in ("rater", "case") if note.get(what) is not None]
    if with_phase and note.get("phase") is not None and bits:
        bits.append(f"phase '{note['phase']}'")
    return ", ".join(bits) or None


def _where(note: Mapping) -> str:
    """The note's file, row and column, as ``DataProblem.location`` writes them."""
    bits = [str(note["file"])] if note.get("file") else []
    if note.get("row") is not None:
        bits.append(f"row {note['row']}")
    if note.get("column"):
        bits.append(f"column '{note['column']}'")
    return ", ".join(bits)


def note_title(kind: str) -> str | None:
    """The plain title of a kind, or None for an analysis note (its first text serves)."""
    if kind in NOTE_TITLES:
        return NOTE_TITLES[kind]
    return None


@dataclass(frozen=True)
class NoteGroup:
    """All notes of one kind, in the order they were recorded."""

    kind: str
    count: int
    first_message: str
    subjects: tuple[str, ...]     # what each note is about, when it names a rater or case
    phases: tuple[str, ...]       # the named phases it arose in
    first_where: str = ""         # file, row and column of the first note, as recorded

    @property
    def title(self) -> str:
        known = note_title(self.kind)
        if known is not None:
            return known
        analysis = self.kind.split(":", 1)[0]
        return ANALYSIS_WORDS.get(analysis, analysis.replace("_", " ").capitalize())

    def line(self, *, examples: int = 3) -> str:
        """One line: the whole note when it is alone; else its title, the count, a few of
        the raters or cases it concerns and the first note in full."""
        first = f"{self.first_where}: {self.first_message}" if self.first_where else self.first_message
        analysis = self.kind.split(":", 1)[0]
        if analysis in ANALYSIS_WORDS and first.startswith(analysis):
            # the prefix analysis_note wrote ("gstudy (before): ") in plain words
            head, _, rest = first.partition(": ")
            first = f"{ANALYSIS_WORDS[analysis]}{head[len(analysis):]}: {rest}"
        if self.count == 1:
            return first
        about = ""
        if self.subjects:
            shown = "; ".join(self.subjects[:examples])
            more = len(self.subjects) - min(examples, len(self.subjects))
            about = f" ({shown}" + (f"; and {more} more" if more else "") + ")"
        return f"{self.title}: {self.count} notes{about}. The first: {first}"

    def to_dict(self) -> dict:
        return {"kind": self.kind, "count": self.count, "title": self.title,
                "first_message": self.first_message, "first_where": self.first_where, "subjects": list(self.subjects),
                "phases": list(self.phases)}


def group_notes(notes: Iterable[Mapping]) -> tuple[NoteGroup, ...]:
    """Notes grouped by kind, kinds in the order first seen (the order of results.json)."""
    order: dict[str, list[Mapping]] = {}
    for note in notes:
        order.setdefault(_kind_of(note), []).append(note)
    groups = []
    for kind, members in order.items():
        phases = tuple(dict.fromkeys(str(m["phase"]) for m in members if m.get("phase") is not None))
        subjects = tuple(s for m in members if (s := _subject(m, with_phase=len(phases) > 1)) is not None)
        groups.append(NoteGroup(kind=kind, count=len(members), first_message=str(members[0].get("message", "")),
                                subjects=subjects, phases=phases, first_where=_where(members[0])))
    return tuple(groups)


NOTES_COLUMNS = ("phase", "kind", "rater", "case", "file", "row", "column", "message")


def notes_frame(notes: Iterable[Mapping], *, unnamed_phase: str | None = None) -> pd.DataFrame:
    """Every note, one row each, with its kind: the ``notes`` table. ``unnamed_phase``: the
    label of the one phase of a study without phases, given to every note (as in the other
    tables); in a study with phases a note about no one phase keeps an empty phase."""
    rows = [{**{c: n.get(c) for c in NOTES_COLUMNS}, "kind": _kind_of(n)} for n in notes]
    frame = pd.DataFrame(rows, columns=list(NOTES_COLUMNS))
    if unnamed_phase is not None:
        frame["phase"] = unnamed_phase
    frame["row"] = frame["row"].astype("Int64")
    return frame
