"""Safe writing: atomic files and folders, file-name sanitising, spreadsheet escaping.

Nothing is ever half-written: a file goes to a temporary name in the same folder
and is renamed into place; an output folder is built beside its final name and
swapped in at the end.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
import tempfile
import unicodedata
import zipfile
from pathlib import Path
from typing import Any

# What a spreadsheet would run as a formula at the start of a cell.
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


PROCESS_UMASK = _current_umask()  # read once: os.umask can only be read by setting it


def atomic_write_bytes(path: Path, data: bytes) -> None:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o666 & ~PROCESS_UMASK)  # mkstemp makes 0600; outputs are ordinary files
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def atomic_write_text(path: Path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))


def dump_json(obj: Any, *, compact: bool = False) -> str:
    """Deterministic JSON: sorted keys would reorder meaningful lists, so keep insertion
    order (fixed by the code) and forbid NaN (converted to null upstream). Indented for
    reading, or ``compact`` (no spaces or line breaks: about a third smaller)."""
    if compact:
        return json.dumps(obj, separators=(",", ":"), ensure_ascii=False, allow_nan=False) + "\n"
    return json.dumps(obj, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(path: Path, obj: Any) -> None:
    atomic_write_text(path, dump_json(obj))


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


_STEM_BYTES = 200  # file systems allow 255 bytes a name; room left for "_12" and ".pdf"


def _stem_char(ch: str, previous: str) -> str:
    """Letters and digits of any script stay (so 王小明 gives 王小明.pdf), as do '.', '-', '_'
    and combining marks after a kept letter (Devanagari vowel signs); all else becomes '_'."""
    if ch.isalnum() or ch in "._-":
        return ch
    if unicodedata.category(ch).startswith("M") and previous and previous.isalnum():
        return ch
    return "_"


def safe_file_stem(raw: str, *, taken: set[str] | None = None) -> str:
    """A readable, safe file-name stem from a rater id.

    Letters and digits of every script are kept (after NFC normalisation); path
    separators, spaces, punctuation, control and bidi characters become '_'; leading
    dots are removed; an empty result becomes 'rater'; names are capped at 200 bytes of
    UTF-8. With ``taken``, a clash (two ids that sanitise alike, ignoring case) gets a
    numbered suffix and the new name is added to ``taken``. The index.csv of a results
    folder maps every id to its file, so a changed name is always found.
    """
    chars: list[str] = []
    for ch in unicodedata.normalize("NFC", str(raw)):
        chars.append(_stem_char(ch, chars[-1] if chars else ""))
    text = re.sub(r"_+", "_", "".join(chars)).strip("._-")
    while len(text.encode("utf-8")) > _STEM_BYTES:
        text = text[:-1]
    text = text.rstrip("._-") or "rater"
    if text.upper() in {"CON", "PRN", "AUX", "NUL"} or re.fullmatch(r"(?i)(COM|LPT)\d", text):
        text = f"rater_{text}"
    if taken is not None:
        base, i = text, 2
        while text.casefold() in taken:
            text = f"{base}_{i}"
            i += 1
        taken.add(text.casefold())
    return text


def escape_formula(value: Any) -> Any:
    """Make a text cell safe for spreadsheets: text starting with = + - @ (or a tab/CR)
    gets a leading apostrophe so it is shown, not run. Numbers stay numbers."""
    if isinstance(value, str) and value.startswith(FORMULA_START):
        return "'" + value
    return value


_FIXED_DATE = (2000, 1, 1, 0, 0, 0)


def reproducible_xlsx_bytes(wb) -> bytes:
    """An openpyxl workbook saved with fixed document and zip member dates so equal tables give equal bytes."""
    import datetime as dt

    fixed = dt.datetime(2000, 1, 1)
    wb.properties.created = fixed
    wb.properties.modified = fixed
    buf = io.BytesIO()
    wb.save(buf)
    src = zipfile.ZipFile(io.BytesIO(buf.getvalue()))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            member = zipfile.ZipInfo(info.filename, date_time=_FIXED_DATE)
            member.compress_type = zipfile.ZIP_DEFLATED
            member.external_attr = 0o644 << 16
            content = src.read(info.filename)
            if info.filename == "docProps/core.xml":
                # openpyxl stamps the save time into the document properties
                content = re.sub(rb"(<dcterms:(?:created|modified)[^>]*>)[^<]*", rb"\g<1>2000-01-01T00:00:00Z",
                                 content)
            dst.writestr(member, content)
    return out.getvalue()


# Characters that change what a terminal shows rather than being shown: C0/C1 controls
# (ESC starts colour, cursor and title sequences), DEL, and the Unicode format characters
# that reorder or hide text (bidi embeddings, overrides and isolates, marks, zero-width).
_FORMAT_CHARS = {0x061C, 0x200B, 0x200C, 0x200D, 0x200E, 0x200F, 0x2028, 0x2029, 0x2060, 0xFEFF,
                 *range(0x202A, 0x202F), *range(0x2066, 0x206A)}


def _shown_char(ch: str, keep: str) -> str:
    code = ord(ch)
    if ch in keep:
        return ch
    if code < 0x20 or 0x7F <= code < 0xA0:
        return {"\n": "\\n", "\r": "\\r", "\t": "\\t", "\x1b": "\\e"}.get(ch, f"\\x{code:02x}")
    if code in _FORMAT_CHARS:
        return f"\\u{code:04x}"
    return ch


def terminal_text(value: Any, *, keep_lines: bool = True) -> str:
    """Text safe to print on a terminal: control and bidi/format characters become visible
    escapes (ESC as ``\\e``, U+202E as ``\\u202e``), so an id or file name can never move the
    cursor, recolour the screen, fake a line or reverse the text around it.

    ``keep_lines`` keeps the newlines (and tabs) of a message the tool itself composed;
    pass False for a single value such as a rater id or a path.
    """
    keep = "\n\t" if keep_lines else ""
    text = str(value)
    if text.isprintable() and not any(ord(c) in _FORMAT_CHARS for c in text):
        return text
    return "".join(_shown_char(ch, keep) for ch in text)
