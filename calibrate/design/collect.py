"""Read completed packets back against the plan's key.

Each packet is matched to a rater by its display codes (they are unique across the
whole plan), never by its file name alone, so a packet saved under the wrong name
is still read as the rater who filled it, and a packet renamed for one rater but
holding another's codes is reported. Every problem names the file, row and column.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..data.ingest import read_table
from ..errors import CalibrateError, DataError, DataProblem, OutputExistsError
from ..result_base import ResultMixin
from ..safe_files import atomic_write_text, escape_formula
from .packets import packet_stems

__all__ = ["CollectedPackets", "collect_packets", "write_collected"]


@dataclass(frozen=True)
class CollectedPackets(ResultMixin):
    """The judgments read from the packets, in long form, and the files' cues."""

    judgments: pd.DataFrame   # rater, file, judgment, position
    files: pd.DataFrame       # file + cue columns
    cues: tuple[str, ...]
    scale: str
    scale_min: float
    scale_max: float
    warnings: tuple[str, ...] = ()
    cue_kinds: dict[str, str] = field(default_factory=dict)   # cue -> numeric | categorical (plan.json)

    def to_frame(self) -> pd.DataFrame:
        return self.judgments

    def to_dict(self) -> dict:
        return {"n_judgments": len(self.judgments), "raters": sorted(self.judgments["rater"].unique().tolist()),
                "cues": list(self.cues), "cue_kinds": dict(self.cue_kinds), "scale": self.scale, "min": self.scale_min, "max": self.scale_max,
                "warnings": list(self.warnings)}


def collect_packets(plan_folder: Path | str, packets: list[Path], *, scale: str = "ordinal",
                    scale_min: float = 1, scale_max: float = 7) -> CollectedPackets:
    """Check completed packets (CSV or XLSX, any mix) against the key of ``plan_folder``."""
    plan_folder = Path(plan_folder)
    for name in ("key.csv", "files.csv", "plan.json"):
        if not (plan_folder / name).is_file():
            raise CalibrateError(f"{plan_folder} has no {name}; give the folder 'calibrate plan' wrote.")
    if scale not in ("continuous", "ordinal", "binary"):
        raise CalibrateError(f"The scale must be continuous, ordinal or binary; got {scale!r}.")
    if not scale_min < scale_max:
        raise CalibrateError(f"The scale minimum ({scale_min:g}) must be below its maximum ({scale_max:g}).")
    key = pd.read_csv(plan_folder / "key.csv", dtype=str, keep_default_na=False)
    # files.csv is the plan's own: a missing cue was written as an empty cell, and a
    # file id "NA" is an id, so only empty cells are missing.
    files = pd.read_csv(plan_folder / "files.csv", dtype={"file": str}, keep_default_na=False,
                        na_values=[""])
    plan = json.loads((plan_folder / "plan.json").read_text(encoding="utf-8"))
    cues = tuple(plan["cues"])
    kinds = {c: plan.get("cue_kinds", {}).get(c, "numeric") for c in cues}
    owner = dict(zip(key["display_code"], key["rater"]))
    stems = {stem.lower(): rater for rater, stem in packet_stems(key["rater"].drop_duplicates()).items()}
    problems: list[DataProblem] = []
    frames: dict[str, pd.DataFrame] = {}
    source_of: dict[str, str] = {}
    for path in packets:
        path = Path(path)
        if not path.is_file():
            problems.append(DataProblem("The packet does not exist.", file=str(path)))
            continue
        table = read_table(path, id_columns=("display_code",))
        missing_cols = [c for c in ("display_code", "judgment") if c not in table.columns]
        if missing_cols:
            problems.append(DataProblem(f"The packet lacks column(s) {', '.join(missing_cols)}.", file=path.name))
            continue
        codes = table["display_code"].astype(str).str.strip().str.lstrip("'")
        raters = {owner.get(c) for c in codes}
        unknown = [i for i, c in enumerate(codes) if c not in owner]
        for i in unknown:
            problems.append(DataProblem(f"Display code '{codes.iloc[i]}' is not in the key (an extra row?).",
                                        file=path.name, row=int(table["_row"].iloc[i]), column="display_code"))
        raters.discard(None)
        if len(raters) != 1:
            if raters:
                problems.append(DataProblem(
                    f"The packet mixes rows of raters {', '.join(sorted(raters))}; each packet is one rater's.",
                    file=path.name))
            continue
        rater = raters.pop()
        named_for = stems.get(path.stem.lower())
        if named_for is not None and named_for != rater:
            problems.append(DataProblem(
                f"The packet is named for '{named_for}' but holds the codes of '{rater}': the wrong rater's "
                "packet was saved under this name.", file=path.name))
            continue
        if rater in frames:
            problems.append(DataProblem(f"A second packet for '{rater}' (the first was {source_of[rater]}).",
                                        file=path.name))
            continue
        y = pd.to_numeric(table["judgment"], errors="coerce")
        for i in np.flatnonzero(y.isna().to_numpy()):
            raw = table["judgment"].iloc[i]
            what = "is empty" if pd.isna(raw) or str(raw).strip() == "" else f"'{raw}' is not a number"
            problems.append(DataProblem(f"The judgment {what}.", file=path.name,
                                        row=int(table["_row"].iloc[i]), column="judgment"))
        outside = np.flatnonzero(((y < scale_min) | (y > scale_max)).to_numpy())
        for i in outside:
            problems.append(DataProblem(f"The judgment {y.iloc[i]:g} is outside the scale "
                                        f"{scale_min:g}-{scale_max:g}.", file=path.name,
                                        row=int(table["_row"].iloc[i]), column="judgment"))
        dup = codes[codes.duplicated()]
        for c in dup.unique():
            problems.append(DataProblem(f"Display code '{c}' appears twice.", file=path.name, column="display_code"))
        expected = set(key.loc[key["rater"] == rater, "display_code"])
        for c in sorted(expected - set(codes)):
            problems.append(DataProblem(f"The row with display code '{c}' is missing from '{rater}''s packet.",
                                        file=path.name, column="display_code"))
        frames[rater] = pd.DataFrame({"display_code": codes.to_numpy(), "judgment": y.to_numpy()})
        source_of[rater] = path.name
    if problems:
        raise DataError(problems)
    not_given = tuple(f"No packet from '{r}' was given; the study leaves that rater out."
                      for r in sorted(set(key["rater"]) - set(frames)))
    if not frames:
        raise CalibrateError("No packet was read.")
    filled = pd.concat(frames.values(), ignore_index=True)
    long = key.merge(filled, on="display_code", how="inner")
    long["position"] = long["position"].astype(int)
    judgments = long[["rater", "file", "judgment", "position"]].sort_values(["rater", "position"],
                                                                          ignore_index=True)
    return CollectedPackets(judgments=judgments, files=files, cues=cues, cue_kinds=kinds, scale=scale,
                            scale_min=float(scale_min), scale_max=float(scale_max), warnings=not_given)


def _toml_string(text: str) -> str:
    return json.dumps(str(text), ensure_ascii=False)  # a JSON string is a valid TOML basic string


def write_collected(collected: CollectedPackets, out: Path | str, *, name: str = "Collected packets",
                    overwrite: bool = False) -> Path:
    """Write judgments.csv, files.csv and study.toml into ``out``; returns the spec's path."""
    out = Path(out)
    spec = out / "study.toml"
    if spec.exists() and not overwrite:
        raise OutputExistsError(f"{spec} already exists; add --overwrite to replace the collected files.")
    out.mkdir(parents=True, exist_ok=True)
    for file_name, frame in (("judgments.csv", collected.judgments), ("files.csv", collected.files)):
        atomic_write_text(out / file_name, frame.map(escape_formula).to_csv(index=False, lineterminator="\n"))
    lines = [
        "# Written by 'calibrate collect' from the completed packets; check it, then run 'calibrate audit'.",
        "[study]", f"name = {_toml_string(name)}", 'data = "judgments.csv"', 'cases = "files.csv"', "",
        "[columns]", 'rater = "rater"', 'case = "file"', 'judgment = "judgment"', 'sequence = "position"', "",
        "[judgment]", f'scale = "{collected.scale}"', f"min = {collected.scale_min:g}",
        f"max = {collected.scale_max:g}", "", "[cues]",
        *[f'{_toml_string(c)} = "{collected.cue_kinds.get(c, "numeric")}"' for c in collected.cues], "",
    ]
    atomic_write_text(spec, "\n".join(lines))
    return spec
