"""Write a planned exercise: one packet per rater (CSV and XLSX) and the key.

Files written into the output folder (each atomically; nothing else there is touched):

``packets/<rater>.csv`` and ``packets/<rater>.xlsx``
    display code, the cue values, and an empty ``judgment`` column. In the XLSX the
    sheet is protected (no password: it prevents slips, not tampering) and only the
    judgment cells are left open.
``key.csv``
    rater, position, display code, file, showing (1 = first, 2 = the hidden repeat).
    Keep it away from the raters.
``files.csv``
    the chosen files and their cue values (the cases table of the collected study).
``plan.json``
    the settings, the seed and the design figures; ``design.csv`` the per-cue table.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..errors import OutputExistsError
from ..safe_files import (atomic_write_bytes, atomic_write_text, dump_json, escape_formula,
                          reproducible_xlsx_bytes, safe_file_stem)
from .plan import RatingPlan

__all__ = ["PACKET_SHEET", "packet_stems", "write_plan"]

PACKET_SHEET = "packet"


def packet_stems(raters) -> dict[str, str]:
    """The file-name stem of each rater's packet (sanitised, clashes numbered)."""
    taken: set[str] = set()
    return {r: safe_file_stem(r, taken=taken) for r in raters}


def write_plan(plan: RatingPlan, out: Path | str, *, overwrite: bool = False) -> list[Path]:
    """Write the packets, the key and the plan figures into ``out``; returns the paths."""
    out = Path(out)
    if (out / "key.csv").exists() and not overwrite:
        raise OutputExistsError(f"{out} already holds a plan (key.csv); add --overwrite to replace its files.")
    (out / "packets").mkdir(parents=True, exist_ok=True)
    written = []
    for rater, stem in packet_stems(plan.packets).items():
        packet = plan.packets[rater]
        csv_path = out / "packets" / f"{stem}.csv"
        atomic_write_text(csv_path, _csv(packet))
        xlsx_path = out / "packets" / f"{stem}.xlsx"
        atomic_write_bytes(xlsx_path, _xlsx(packet, rater))
        written += [csv_path, xlsx_path]
    for name, text in (("key.csv", _csv(plan.key)), ("files.csv", _csv(plan.file_cues)),
                       ("design.csv", _csv(plan.to_frame())),
                       ("plan.json", dump_json(plan.to_dict()))):
        atomic_write_text(out / name, text)
        written.append(out / name)
    return written


def _csv(frame: pd.DataFrame) -> str:
    return frame.map(escape_formula).to_csv(index=False, lineterminator="\n")


def _xlsx(packet: pd.DataFrame, rater: str) -> bytes:
    from openpyxl import Workbook
    from openpyxl.styles import Protection

    wb = Workbook()
    ws = wb.active
    ws.title = PACKET_SHEET
    ws.append(list(packet.columns))
    judgment_col = list(packet.columns).index("judgment") + 1
    for row in packet.itertuples(index=False):
        ws.append([None if pd.isna(v) else escape_formula(v.item() if hasattr(v, "item") else v) for v in row])
    for r in range(2, len(packet) + 2):
        ws.cell(row=r, column=judgment_col).protection = Protection(locked=False)
    ws.protection.sheet = True
    ws.protection.formatColumns = False  # let raters widen columns
    wb.properties.title = f"Packet for {rater}"
    return reproducible_xlsx_bytes(wb)
