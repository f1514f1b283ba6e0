"""Small builders for hand-made study folders used across tests."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd

BASE_SPEC = """\
[study]
name = "tiny"
data = "judgments.csv"
{extra_study}
[columns]
rater = "rater"
case = "case"
judgment = "score"
{extra_columns}
[judgment]
scale = "{scale}"
min = {jmin}
max = {jmax}
{extra_judgment}
[cues]
{cues}
{extra}
"""


def write_study(folder: Path, judgments: pd.DataFrame | str, *, cases: pd.DataFrame | None = None,
                cues: str = 'x1 = "numeric"\nx2 = "numeric"', scale: str = "ordinal", jmin=1, jmax=7,
                extra_study: str = "", extra_columns: str = "", extra_judgment: str = "",
                extra: str = "") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    if isinstance(judgments, str):
        (folder / "judgments.csv").write_text(textwrap.dedent(judgments), encoding="utf-8")
    else:
        judgments.to_csv(folder / "judgments.csv", index=False)
    if cases is not None:
        cases.to_csv(folder / "cases.csv", index=False)
        extra_study = extra_study + '\ncases = "cases.csv"'
    spec = BASE_SPEC.format(extra_study=extra_study, extra_columns=extra_columns, scale=scale,
                            jmin=jmin, jmax=jmax, extra_judgment=extra_judgment, cues=cues, extra=extra)
    path = folder / "study.toml"
    path.write_text(spec, encoding="utf-8")
    return path


def simple_judgments(n_raters: int = 3, n_cases: int = 12, seed: int = 1) -> pd.DataFrame:
    """Every rater judges every case once; cues x1, x2 repeated on each row (consistent)."""
    import numpy as np

    rng = np.random.default_rng(seed)
    x1 = rng.normal(size=n_cases).round(2)
    x2 = rng.normal(size=n_cases).round(2)
    rows = []
    for r in range(n_raters):
        for c in range(n_cases):
            score = int(np.clip(np.round(4 + x1[c] + 0.5 * x2[c] + rng.normal(0, 0.5)), 1, 7))
            rows.append({"rater": f"r{r + 1}", "case": f"c{c + 1}", "score": score,
                         "x1": x1[c], "x2": x2[c]})
    return pd.DataFrame(rows)


def printed_words(code: str) -> list[str]:
    """What a fresh Python process running ``code`` prints, split into words (for checks
    of what a path imports, which the test process itself has long since loaded)."""
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True).stdout.split()
