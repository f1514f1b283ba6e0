"""The error and warning family of calibrate.

Every problem a user can cause is raised as a :class:`CalibrateError` subclass
with a message that says what is wrong, where (file, row, column) and how to fix
it. The CLI maps these to exit code 2 and one clear paragraph; it never shows a
traceback for them.
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass


class CalibrateError(Exception):
    """Base class for every error a user can cause."""


class SpecError(CalibrateError):
    """The study spec (TOML) is malformed or inconsistent."""

    def __init__(self, problems: list[str] | str, *, path: str | None = None):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        self.path = path
        where = f"in {path}" if path else "in the study spec"
        if len(self.problems) == 1:
            text = f"Problem {where}: {self.problems[0]}"
        else:
            text = f"{len(self.problems)} problems {where}:\n" + "\n".join(
                f"  - {p}" for p in self.problems
            )
        super().__init__(text)


@dataclass(frozen=True)
class DataProblem:
    """One problem found in an input table, located as precisely as possible.

    ``row`` is the 1-based line number a person sees in a spreadsheet or text
    editor (the header is line 1, so the first data row is row 2).
    """

    message: str
    file: str | None = None
    row: int | None = None
    column: str | None = None
    severity: str = "error"  # "error" stops the run; "warning" is carried into the results
    # A warning's stable code (see calibrate.notes.NOTE_TITLES) and what it is about, so
    # that notes of one kind are grouped by their code, never by their wording.
    kind: str | None = None
    rater: str | None = None
    case: str | None = None
    phase: str | None = None

    def location(self) -> str:
        parts = []
        if self.file:
            parts.append(self.file)
        if self.row is not None:
            parts.append(f"row {self.row}")
        if self.column:
            parts.append(f"column '{self.column}'")
        return ", ".join(parts)

    def __str__(self) -> str:
        where = self.location()
        return f"{where}: {self.message}" if where else self.message

    def to_dict(self) -> dict:
        return {
            "severity": self.severity,
            "message": self.message,
            "file": self.file,
            "row": self.row,
            "column": self.column,
            "kind": self.kind,
            "rater": self.rater,
            "case": self.case,
            "phase": self.phase,
        }


class DataError(CalibrateError):
    """The data cannot be analysed; carries every problem found, not just the first."""

    def __init__(self, problems: list[DataProblem] | str):
        if isinstance(problems, str):
            problems = [DataProblem(problems)]
        self.problems = list(problems)
        shown = self.problems[:50]
        lines = [f"  - {p}" for p in shown]
        if len(self.problems) > len(shown):
            lines.append(f"  ... and {len(self.problems) - len(shown)} more")
        head = (
            "The data has 1 problem:" if len(self.problems) == 1
            else f"The data has {len(self.problems)} problems:"
        )
        super().__init__(head + "\n" + "\n".join(lines))


class DegenerateFitError(CalibrateError):
    """A model cannot be fitted (constant judgments, fewer cases than terms, ...)."""


class OutputExistsError(CalibrateError):
    """The output folder exists and --overwrite was not given (or it is not ours to replace)."""


class OutputLockedError(CalibrateError):
    """Another live run is writing into the same output folder."""


class OutputPlaceError(CalibrateError):
    """The output place cannot or must not take a results folder (inputs, mount, not writable)."""


def check_seed(seed, *, what: str = "the spec's [study] seed") -> None:
    """A resampling seed a caller passed: None, or a whole number from 0 to 2^63 - 1 (as the spec's)."""
    whole = isinstance(seed, numbers.Integral) and not isinstance(seed, bool)   # numpy integers too
    if seed is not None and not (whole and 0 <= int(seed) < 2**63):
        raise CalibrateError(f"The seed must be a whole number from 0 to 2^63 - 1 (or None for {what}); "
                             f"got {seed!r}.")


class CalibrateWarning(UserWarning):
    """Base class for warnings about the data or a fit that the user should see."""


class DataQualityWarning(CalibrateWarning):
    """Something in the data weakens the results (few cases, missing values, ...)."""


class FitWarning(CalibrateWarning):
    """A fit is unreliable (collinear cues, separation, constant judgments, ...)."""
