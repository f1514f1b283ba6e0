"""Pseudonymised audits: rater ids replaced by stable codes before any analysis.

Why the ids are replaced in the *judgments* (before ``audit()``), not in the results:
every figure, table, sentence, file name and chart label is then built from the codes
alone, so no output can carry an id by a path the replacement forgot.

Why a keyed hash: a code is ``R-`` plus the first characters of HMAC-SHA256(salt, id) in
base 32. The salt is 32 random bytes kept only in the key file, so

- a rerun of the same study with the same key file gives every rater the same code (and
  the outputs the same bytes); a rater added later gets a code of their own without
  changing anyone else's;
- the codes carry nothing about the ids: not their alphabetical order (as numbering the
  sorted ids would), nor a hash anyone could recompute from a list of likely names
  (as an unkeyed hash, or one keyed by the study's seed, would).

The key file (``code,rater,report`` after one line holding the salt) is the only link
from codes back to people. It is written outside the results folder so that the folder
can be shared while the key stays with the person responsible for the data.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import hmac
import io
import os
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

from ..errors import CalibrateError, DataProblem
from ..safe_files import atomic_write_bytes, escape_formula

KEY_FIRST_LINE = "# calibrate pseudonym key"
CODE_PREFIX = "R-"
_CODE_CHARS = 6  # 32^6 = 1.07e9 codes: two of 3,000 raters share a prefix with chance ~0.4%


class PseudonymKeyError(CalibrateError):
    """The key file cannot be read or does not belong to calibrate."""


def default_key_path(out: Path) -> Path:
    """Beside the results folder, never inside it: ``<out>-key.csv``."""
    out = Path(os.path.abspath(out))
    return out.with_name(f"{out.name}-key.csv")


@dataclass
class PseudonymKey:
    """Id -> code for one study. Build with :meth:`open`, extend with :meth:`assign`."""

    path: Path
    salt: bytes
    codes: dict[str, str] = field(default_factory=dict)
    reports: dict[str, str] = field(default_factory=dict)  # code -> report file, as last written

    @classmethod
    def open(cls, path: str | Path) -> PseudonymKey:
        """Read the key file at ``path``, or start a new key (random salt) when there is none."""
        path = Path(path)
        if not path.exists():
            return cls(path=path, salt=os.urandom(32))
        try:
            text = path.read_text("utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise PseudonymKeyError(f"the pseudonym key {path} cannot be read ({exc}).") from None
        first, _, rest = text.partition("\n")
        match = re.fullmatch(re.escape(KEY_FIRST_LINE) + r"; salt ([0-9a-f]{64})\b.*", first.strip())
        if match is None:
            raise PseudonymKeyError(
                f"{path} exists but is not a calibrate pseudonym key, so it was left as it is. "
                "Give another --key-file, or move that file away.")
        key = cls(path=path, salt=bytes.fromhex(match.group(1)))
        for row in csv.DictReader(io.StringIO(rest)):
            rater = _unescape(row.get("rater", ""))
            key.codes[rater] = row["code"]
            key.reports[row["code"]] = row.get("report", "") or ""
        return key

    def _code(self, rater: str, taken: set[str]) -> str:
        digest = hmac.new(self.salt, rater.encode("utf-8"), hashlib.sha256).digest()
        letters = base64.b32encode(digest).decode("ascii").rstrip("=")
        for n in range(_CODE_CHARS, len(letters) + 1):
            code = CODE_PREFIX + letters[:n]
            if code.casefold() not in taken:
                return code
        raise AssertionError("a 256-bit digest repeated")  # pragma: no cover

    def assign(self, raters) -> dict[str, str]:
        """Codes for ``raters`` (existing codes kept, new ids given new ones); id -> code."""
        taken = {c.casefold() for c in self.codes.values()}
        for rater in sorted(set(map(str, raters))):
            if rater not in self.codes:
                code = self._code(rater, taken)
                self.codes[rater] = code
                taken.add(code.casefold())
        return {r: self.codes[r] for r in raters}

    def key_bytes(self) -> bytes:
        """The key file: the salt line, then one row per code in code order."""
        buf = io.StringIO()
        buf.write(f"{KEY_FIRST_LINE}; salt {self.salt.hex()}; keep this file apart from the "
                  "results: it turns the codes back into rater ids\n")
        writer = csv.writer(buf, lineterminator="\n")
        writer.writerow(["code", "rater", "report"])
        for rater, code in sorted(self.codes.items(), key=lambda item: item[1]):
            writer.writerow([code, escape_formula(rater), self.reports.get(code, "")])
        return buf.getvalue().encode("utf-8")

    def write(self) -> None:
        atomic_write_bytes(self.path, self.key_bytes())


def _unescape(cell: str) -> str:
    """Undo :func:`escape_formula` on a key cell (an id such as '=x' was written as "'=x")."""
    if cell.startswith("'") and cell[1:2] in ("=", "+", "-", "@", "\t", "\r"):
        return cell[1:]
    return cell


def id_replacer(codes: dict[str, str]):
    """A function replacing every whole-word occurrence of an id in a text by its code."""
    if not codes:
        return lambda text: text
    ids = sorted(codes, key=len, reverse=True)  # longest first: 'ann-2' before 'ann'
    pattern = re.compile(r"(?<!\w)(?:" + "|".join(map(re.escape, ids)) + r")(?!\w)")
    return lambda text: pattern.sub(lambda m: codes[m.group(0)], text) if isinstance(text, str) else text


def mentions_an_id(text: str | None, codes: dict[str, str]) -> bool:
    return bool(text) and id_replacer(codes)(text) != text


def pseudonymise_table(table, key: PseudonymKey):
    """The JudgmentTable with every rater id replaced by its code (the input is not changed).

    Rater columns of every phase, the raters fitted and left out, the spec's trained
    raters, and warning texts that name a rater are all replaced; the spec's text is
    dropped from what results.json records when it names a rater (its sha256 stays).
    """
    raters = sorted({r for ph in table.phases for r in ph.first["rater"].astype(str)}
                    | {r for ph in table.phases for r in ph.ordered["rater"].astype(str)}
                    | set(table.spec.trained or ()))
    codes = key.assign(raters)
    swap = id_replacer(codes)

    def frame(df):
        if "rater" not in df.columns:
            return df
        out = df.copy()
        out["rater"] = out["rater"].astype(str).map(lambda r: codes.get(r, r))
        return out

    phases = tuple(replace(ph, first=frame(ph.first), repeats=frame(ph.repeats),
                           ordered=frame(ph.ordered),
                           fit_raters=tuple(codes.get(r, r) for r in ph.fit_raters),
                           too_few={codes.get(r, r): n for r, n in ph.too_few.items()})
                   for ph in table.phases)
    spec = table.spec
    spec = replace(spec, trained=None if spec.trained is None else tuple(codes.get(r, r) for r in spec.trained),
                   source_text=None if mentions_an_id(spec.source_text, codes) else spec.source_text)
    warnings = tuple(DataProblem(swap(w.message), file=swap(w.file), row=w.row, column=w.column,
                                 severity=w.severity) for w in table.warnings)
    inputs = tuple({**entry, "path": swap(entry["path"])} for entry in table.inputs)
    return replace(table, spec=spec, phases=phases, warnings=warnings, inputs=inputs), codes
