"""Write the corpus of nasty inputs: one small folder per case, each with its `expect.toml`.

Run from the repository root to rebuild it (`python tests/data/nasty/make_corpus.py`); the
files are committed, so the tests never depend on this script, and it is deterministic
(seeded), so a rebuild gives the same bytes. tests/e2e/test_nasty_corpus.py runs each
case through `calibrate check`, `calibrate audit --no-pdf` and, where asked, `calibrate
init`, and pins the exit code and a key phrase of the message. All data is invented.

expect.toml of a case:
    spec   = the spec file to give (default "study.toml"; "." is the case folder itself)
    exit   = the exit code of check and audit (0 or 2)
    phrase = a phrase the output must hold (check and audit alike)
    [init] table = the table init drafts from; exit; phrase (a phrase of the output or
           of the drafted spec)
"""

from __future__ import annotations

import datetime
import io
import random
import re
import shutil
import zipfile
from pathlib import Path

HERE = Path(__file__).resolve().parent

CUES = 'x1 = "numeric"\nx2 = "numeric"'
SPEC = """\
[study]
name = "nasty"
data = "{data}"
{study}
[columns]
rater = "{rater}"
case = "case"
judgment = "score"
{columns}
[judgment]
{judgment}

[cues]
{cues}
{extra}"""
ORDINAL = "scale = \"ordinal\"\nmin = 1\nmax = 7"


def rows(n_raters: int = 3, n_cases: int = 12, seed: int = 5, rater: str = "rater") -> list[dict]:
    """Invented judgments: every rater reads every case once; two numeric cues per case."""
    rng = random.Random(seed)
    x1 = [round(rng.gauss(0, 1), 2) for _ in range(n_cases)]
    x2 = [round(rng.gauss(0, 1), 2) for _ in range(n_cases)]
    out = []
    for r in range(n_raters):
        for c in range(n_cases):
            score = min(7, max(1, round(4 + x1[c] + 0.5 * x2[c] + rng.gauss(0, 0.5))))
            out.append({rater: f"r{r + 1}", "case": f"c{c + 1}", "score": score,
                        "x1": x1[c], "x2": x2[c]})
    return out


def csv_text(table: list[dict], sep: str = ",") -> str:
    header = list(table[0])
    lines = [sep.join(header)] + [sep.join(str(row[h]) for h in header) for row in table]
    return "\n".join(lines) + "\n"


def toml_value(value) -> str:
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    return repr(value)


def case(name: str, *, exit: int, phrase: str, table: list[dict] | None = None,
         data_bytes: bytes | None = None, data: str = "judgments.csv", study: str = "",
         columns: str = "", judgment: str = ORDINAL, cues: str = CUES, extra: str = "",
         rater: str = "rater", spec_text: str | bytes | None = None, spec: str = "study.toml",
         init: dict | None = None, files: dict[str, bytes] | None = None) -> None:
    folder = HERE / name
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir()
    if data_bytes is None:
        data_bytes = csv_text(table if table is not None else rows(rater=rater)).encode()
    (folder / data).write_bytes(data_bytes)
    for fname, content in (files or {}).items():
        (folder / fname).parent.mkdir(parents=True, exist_ok=True)
        (folder / fname).write_bytes(content)
    if spec_text is None:
        spec_text = SPEC.format(data=data, study=study, columns=columns, judgment=judgment,
                                cues=cues, extra=extra, rater=rater)
    if spec != ".":
        target = folder / spec
        target.write_bytes(spec_text if isinstance(spec_text, bytes) else spec_text.encode())
    lines = [f"spec = {toml_value(spec)}", f"exit = {exit}", f"phrase = {toml_value(phrase)}"]
    if init:
        lines += ["", "[init]"] + [f"{k} = {toml_value(v)}" for k, v in init.items()]
    (folder / "expect.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")


def with_value(column: str, cases: set[str], value, table: list[dict] | None = None) -> list[dict]:
    table = rows() if table is None else table
    return [{**r, column: value} if r["case"] in cases else r for r in table]


def x2_renamed(name: str) -> list[dict]:
    """The invented rows with cue column x2 renamed."""
    return [{**{k: v for k, v in r.items() if k != "x2"}, name: r["x2"]} for r in rows()]


def spec_with(data: str = "judgments.csv") -> str:
    """The spec every case starts from, naming ``data``."""
    return SPEC.format(data=data, study="", columns="", judgment=ORDINAL, cues=CUES, extra="",
                       rater="rater")


def xlsx_bytes(table: list[dict]) -> bytes:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(list(table[0]))
    for row in table:
        sheet.append(list(row.values()))
    book.properties.created = book.properties.modified = datetime.datetime(2026, 1, 1)
    buffer = io.BytesIO()
    book.save(buffer)
    fixed = io.BytesIO()  # the zip entries again with a fixed date, so a rebuild is byte-identical
    with zipfile.ZipFile(buffer) as src, zipfile.ZipFile(fixed, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            content = src.read(info.filename)
            if info.filename == "docProps/core.xml":  # openpyxl stamps the save time here
                content = re.sub(rb"(<dcterms:modified[^>]*>)[^<]*", rb"\g<1>2026-01-01T00:00:00Z",
                                 content)
            dst.writestr(zipfile.ZipInfo(info.filename, date_time=(2026, 1, 1, 0, 0, 0)),
                         content, compress_type=zipfile.ZIP_DEFLATED)
    return fixed.getvalue()


def main() -> None:
    rng = random.Random(13)
    noise = bytes(rng.randrange(256) for _ in range(1500))
    for old in HERE.iterdir():
        if old.is_dir():
            shutil.rmtree(old)
    # non-finite and overflowing numbers, refused where they enter
    case("inf_cue", exit=2, phrase="cue value 'inf' of case 'c2' is not a finite number",
         table=with_value("x1", {"c2"}, "inf"))
    case("overflow_cue", exit=2, phrase="cue value '1e400' of case 'c3' is not a finite number",
         table=with_value("x1", {"c3"}, "1e400"))
    case("huge_integer_cue", exit=2, phrase="is not a finite number (infinite, or too large to hold)",
         table=with_value("x2", {"c4"}, "9" * 400))
    case("inf_judgment_open_scale", exit=2, phrase="judgment '-inf' is not a finite number",
         table=[{**r, "score": "-inf"} if i == 5 else r for i, r in enumerate(rows())],
         judgment='scale = "continuous"')
    case("inf_criterion", exit=2, phrase="criterion 'Infinity' of case 'c1' is not a finite number",
         table=[{**r, "outcome": "Infinity" if r["case"] == "c1" else 3} for r in rows()],
         columns='criterion = "outcome"')
    case("inf_sequence", exit=2, phrase="sequence 'inf' is neither a finite number nor a date-time",
         table=[{**r, "order": "inf" if i == 0 else i} for i, r in enumerate(rows())],
         columns='sequence = "order"')
    zoned = [{**r, "read_at": f"2024-05-01 10:{i % 60:02d}" + ("+02:00" if i == 7 else "")}
             for i, r in enumerate(rows())]
    case("sequence_mixed_time_zones", exit=2, phrase="the sequence date-times mix time zones",
         table=zoned, columns='sequence = "read_at"')
    cases_rows = [{"case": f"c{i}", "x1": x, "x2": 1.5} for i, x in
                  enumerate(["0.5", "1.5", "inf", "2", "NA", "3", "1", "2", "0", "4", "2", "1"], 1)]
    cases_rows[0]["x2"] = 0.5
    judged = [{k: v for k, v in r.items() if k not in ("x1", "x2")} for r in rows()]
    case("cases_table_with_inf", exit=2,
         phrase="cases.csv, row 4, column 'x1': cue value 'inf' of case 'c3' is not a finite number",
         table=judged, study='cases = "cases.csv"',
         files={"cases.csv": csv_text(cases_rows).encode()})
    case("cases_table_header_doubled", exit=2, phrase="the header names column 'x1' twice",
         table=judged, study='cases = "cases.csv"',
         files={"cases.csv": b"case,x1,x1\nc1,1,2\n"})
    # missing-value words: explicit, never applied to ids nor silently to categorical levels
    case("na_rater_id", exit=0, phrase="The data can be analysed",
         table=[{**r, "rater": "NA" if r["rater"] == "r1" else r["rater"]} for r in rows()])
    levels = {f"c{i}": lv for i, lv in enumerate(["None", "Some", "Many"] * 4, start=1)}
    case("none_is_a_level", exit=0, phrase="x2=None",
         table=[{**r, "x2": levels[r["case"]]} for r in rows()],
         cues='x1 = "numeric"\nx2 = "categorical"')
    case("missing_words_from_the_spec", exit=0, phrase="cue 'x2' is missing for 4 case(s)",
         table=[{**r, "x2": {"None": "unknown"}.get(levels[r["case"]], levels[r["case"]])}
                for r in rows()],
         cues='x1 = "numeric"\nx2 = "categorical"', study='missing_words = ["unknown"]')
    case("na_in_numeric_cue", exit=0, phrase="cue 'x1' is missing for 1 case(s)",
         table=with_value("x1", {"c5"}, "NA"))
    # names that collide with generated terms or internal columns
    case("cue_named_like_missing_term", exit=2, phrase="[cues] cue 'x2:missing' holds ':'",
         table=x2_renamed("x2:missing"),
         cues='x1 = "numeric"\n"x2:missing" = "numeric"')
    case("cue_named_like_level_term", exit=2, phrase="[cues] cue 'lvl=hi' holds '='",
         table=x2_renamed("lvl=hi"),
         cues='x1 = "numeric"\n"lvl=hi" = "numeric"')
    case("cue_named_row", exit=2, phrase="[cues] cue '_row' starts with '_'",
         table=x2_renamed("_row"),
         cues='x1 = "numeric"\n_row = "numeric"')
    case("rater_column_named_file", exit=2, phrase="[columns] rater '_file' starts with '_'",
         rater="_file")
    # spec values
    case("string_boolean", exit=2, phrase="criterion_only_for_selected must be true or false",
         study='criterion_only_for_selected = "no"')
    case("scale_min_nan", exit=2, phrase="[judgment] min must be a finite number",
         judgment='scale = "ordinal"\nmin = nan\nmax = 7')
    case("cut_off_inf", exit=2, phrase="[judgment] cut_off must be a finite number",
         judgment=ORDINAL + "\ncut_off = inf")
    case("rubric_weight_inf", exit=2, phrase="[rubric] x1 must be a finite number",
         extra="\n[rubric]\nx1 = inf\nx2 = 1\n")
    case("rubric_weight_nan", exit=2, phrase="[rubric] x2 must be a finite number",
         extra="\n[rubric]\nx1 = 1\nx2 = nan\n")
    case("name_not_text", exit=2, phrase="[study] name must be text",
         spec_text=spec_with().replace('name = "nasty"', "name = { a = 1 }"))
    case("continuous_only_min", exit=0, phrase="The data can be analysed",
         judgment='scale = "continuous"\nmin = 1')
    case("continuous_only_max", exit=0, phrase="The data can be analysed",
         judgment='scale = "continuous"\nmax = 7')
    case("below_an_only_min", exit=2, phrase="lies outside the scale 2..",
         judgment='scale = "continuous"\nmin = 2')
    words = {1: "poor", 2: "poor", 3: "fair", 4: "good", 5: "good", 6: "great", 7: "great"}
    worded = [{**r, "score": words[r["score"]]} for r in rows()]
    case("labels_out_of_order", exit=2, phrase="labels do not follow the order of the words",
         table=worded,
         judgment='scale = "ordinal"\nmin = 1\nmax = 4\nlabels = { fair = 1, good = 2, great = 3, poor = 4 }',
         init={"table": "judgments.csv", "exit": 0,
               "phrase": 'labels = { "poor" = 1, "fair" = 2, "good" = 3, "great" = 4 }'})
    odd = {1: "brisk", 2: "brisk", 3: "calm", 4: "calm", 5: "keen", 6: "keen", 7: "keen"}
    case("unknown_words_numbered_alphabetically", exit=2, phrase="is not a number",
         table=[{**r, "score": odd[r["score"]]} for r in rows()],
         init={"table": "judgments.csv", "exit": 0,
               "phrase": "# CHECK: these words are numbered in alphabetical order"})
    # files that cannot be read
    case("xlsx_random_bytes", exit=2, phrase="not a readable XLSX workbook", data="judgments.xlsx",
         data_bytes=noise, init={"table": "judgments.xlsx", "exit": 2,
                                 "phrase": "not a readable XLSX workbook"})
    case("xlsx_truncated", exit=2, phrase="not a readable XLSX workbook", data="judgments.xlsx",
         data_bytes=xlsx_bytes(rows())[:1500])
    hollow = io.BytesIO()  # a zip that opens, without the workbook's parts
    with zipfile.ZipFile(hollow, "w") as z:
        z.writestr(zipfile.ZipInfo("[Content_Types].xml", date_time=(2026, 1, 1, 0, 0, 0)), "<x/>")
    case("xlsx_without_its_sheets", exit=2, phrase="not a readable XLSX workbook",
         data="judgments.xlsx", data_bytes=hollow.getvalue())
    case("xlsx_empty", exit=2, phrase="not a readable XLSX workbook", data="judgments.xlsx",
         data_bytes=b"")
    case("xls_old_format", exit=2, phrase="'.xls' files are not read", data="judgments.xls",
         data_bytes=noise[:200])
    case("parquet_garbage", exit=2, phrase="not a readable Parquet file", data="judgments.parquet",
         data_bytes=noise, init={"table": "judgments.parquet", "exit": 2,
                                 "phrase": "not a readable Parquet file"})
    long_rows = rows() * 60
    latin = csv_text([{**r, "note": "plain"} for r in long_rows]).encode()
    latin += "r1,c1,4,0.1,0.2,caf\xe9\n".encode("latin-1")  # past the first 64 KB
    case("latin1_past_64kb", exit=2, phrase="not UTF-8 text (byte 0xe9 on line 2162",
         data_bytes=latin, init={"table": "judgments.csv", "exit": 2, "phrase": "not UTF-8 text"})
    case("header_only_without_cues", exit=2, phrase="the table has a header but no rows",
         data_bytes=b"rater,case,score\n",
         init={"table": "judgments.csv", "exit": 2, "phrase": "has a header but no rows"})
    case("empty_file", exit=2, phrase="the file is empty", data_bytes=b"")
    case("random_bytes_csv", exit=2, phrase="not UTF-8 text", data_bytes=noise)
    case("nul_bytes_csv", exit=2, phrase="holds binary data, not text",
         data_bytes=b"rater,case,score\x00\x00\n")
    dup = csv_text(rows()).replace("x1,x2", "x1,x1", 1).encode()
    case("duplicate_column_names", exit=2, phrase="the header names column 'x1' twice", data_bytes=dup)
    ragged = csv_text(rows()) + "r1,c1,3,0.5,0.5,9,9\n"
    case("ragged_row", exit=2, phrase="the table cannot be read", data_bytes=ragged.encode())
    case("byte_order_mark", exit=0, phrase="The data can be analysed",
         data_bytes=b"\xef\xbb\xbf" + csv_text(rows()).encode())
    case("semicolon_delimited", exit=0, phrase="The data can be analysed",
         data_bytes=csv_text(rows(), sep=";").encode())
    case("very_long_ids", exit=2, phrase="is longer than 100 characters",
         table=[{**r, "rater": r["rater"] + "-" + "long" * 300} for r in rows()])
    case("ids_at_the_length_limit", exit=0, phrase="The data can be analysed",
         table=[{**r, "rater": (r["rater"] + "-" + "long" * 30)[:100]} for r in rows()])
    case("id_with_a_line_break", exit=2, phrase="holds a line break, tab or other control character",
         data_bytes=csv_text(rows()).replace("r2,c3,", '"r2\nsecond",c3,', 1).encode())
    case("cue_all_missing", exit=2, phrase="cue 'x2' has no value in any judged case",
         table=with_value("x2", {f"c{i}" for i in range(1, 13)}, ""))
    case("no_judgments_at_all", exit=2, phrase="no row has a judgment",
         table=[{**r, "score": ""} for r in rows()])
    # the spec itself
    case("spec_random_bytes", exit=2, phrase="the spec is not UTF-8 text", spec_text=noise)
    case("spec_not_toml", exit=2, phrase="the TOML cannot be read",
         spec_text="This is a note, not a spec.\n")
    case("spec_names_a_missing_table", exit=2, phrase="gone.csv does not exist",
         spec_text=spec_with("gone.csv"))
    case("spec_names_a_folder", exit=2, phrase="is a folder, not a table",
         spec_text=spec_with("tables"), files={"tables/readme.txt": b"empty\n"})
    case("spec_path_with_a_nul", exit=2, phrase="holds a control character; give a plain file path",
         spec_text=spec_with().replace('data = "judgments.csv"', 'data = "judgments\\u0000.csv"'))
    case("spec_is_a_folder", exit=2, phrase="is a folder, not a spec file", spec=".")


if __name__ == "__main__":
    main()
