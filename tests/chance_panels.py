"""Invented panels of ordinary raters, written as whole study folders for ``calibrate.audit``.

An ordinary rater follows a straight-line policy (weights close to the panel's, no
offset of their own), judges on a 1-7 scale rounded to whole points and clipped at the
ends (a ceiling at 7 for a mean of 4.5), reads the cases in their own order with
hidden repeats, shows no drift, no cut-off and no use of the excluded attribute. Any
flag such a rater gets that is not a data condition is a chance flag. Shared by
``tests/unit/test_chance_flags.py`` and ``benchmarks/bench_chance_flags.py``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

# Flags that state a condition of the data, never the outcome of a test or a rule.
DATA_CONDITIONS = frozenset({"too_few_cases", "not_fitted", "few_cases", "separation"})

CUE_NAMES = ("quality", "fit", "evidence", "clarity")
BASE_WEIGHTS = np.array([0.7, 0.5, 0.4, 0.3])   # scale points per cue SD

SPEC = """\
[study]
name = "ordinary panel"
data = "judgments.csv"
cases = "cases.csv"
seed = {seed}

[columns]
rater = "rater"
case = "case"
judgment = "score"
sequence = "position"

[judgment]
scale = "ordinal"
min = 1
max = 7

[cues]
{cues}

[excluded]
columns = ["home_region"]
"""


def ordinary_panel(seed: int, *, n_raters: int = 15, n_cases: int = 60, repeat_share: float = 0.15,
                   mean: float = 4.5, noise_sd: float = 0.5, weight_sd: float = 0.1,
                   readers_per_case: int | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(cases, judgments) of one panel of ordinary raters.

    ``n_cases`` per rater; with ``readers_per_case`` the pool has
    ``n_cases * n_raters / readers_per_case`` cases and each rater reads a random
    ``n_cases`` of them (an incomplete design); otherwise everyone reads every case.
    Hidden repeats come back at least 10 positions after the first reading.
    """
    rng = np.random.default_rng(seed)
    pool = n_cases if readers_per_case is None else int(round(n_cases * n_raters / readers_per_case))
    z = rng.standard_normal((pool, len(CUE_NAMES)))
    cues = np.round(5 + 2 * z, 1)   # cues as a file would show them (0-10 scores, one decimal)
    z = (cues - 5) / 2
    cases = pd.DataFrame(cues, columns=list(CUE_NAMES))
    cases.insert(0, "case", [f"file{i:04d}" for i in range(pool)])
    cases["home_region"] = rng.choice(["north", "south"], size=pool, p=[0.3, 0.7])
    rows = []
    for r in range(n_raters):
        seen = np.arange(pool) if readers_per_case is None else rng.choice(pool, n_cases, replace=False)
        seen = rng.permutation(seen)
        order = list(seen)
        n_rep = int(round(repeat_share * len(seen)))
        for f in rng.choice(seen[: max(len(seen) - 10, 1)], size=n_rep, replace=False):
            first = order.index(f)
            order.insert(int(rng.integers(first + 10, len(order) + 1)), f)
        weights = BASE_WEIGHTS + weight_sd * rng.standard_normal(BASE_WEIGHTS.size)
        latent = mean + z[order] @ weights + noise_sd * rng.standard_normal(len(order))
        score = np.clip(np.round(latent), 1, 7).astype(int)
        rows.append(pd.DataFrame({"rater": f"reader{r:02d}", "case": cases["case"].to_numpy()[order],
                                  "score": score, "position": np.arange(1, len(order) + 1)}))
    return cases, pd.concat(rows, ignore_index=True)


def write_ordinary_panel(folder: Path, seed: int, **options) -> Path:
    """Write one ordinary panel as a study folder; returns the spec's path."""
    folder.mkdir(parents=True, exist_ok=True)
    cases, judgments = ordinary_panel(seed, **options)
    cases.to_csv(folder / "cases.csv", index=False)
    judgments.to_csv(folder / "judgments.csv", index=False)
    spec = folder / "study.toml"
    spec.write_text(SPEC.format(seed=seed, cues="\n".join(f'{c} = "numeric"' for c in CUE_NAMES)),
                    encoding="utf-8")
    return spec


def chance_flags(results: dict) -> dict[str, list[str]]:
    """Per rater (``rater@phase``), the flags that are not data conditions."""
    out = {}
    for e in results["raters"]:
        flags = [f for f in e["flags"] if f not in DATA_CONDITIONS]
        if flags:
            out[f"{e['rater']}@{e['phase']}"] = flags
    return out
