"""Small studies unlike the demo, for checks that must hold on every shape of study:
long rater names with many cues, and binary decisions with an outcome."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from tests.helpers import write_study


def long_names_many_cues_study(folder: Path) -> Path:
    """Eight raters with long hyphenated names, ten cues, hidden repeats, on a 1-7 scale."""
    rng = np.random.default_rng(5)
    n_cases, n_cues = 70, 10
    cues = rng.normal(size=(n_cases, n_cues)).round(2)
    names = ["Maximiliana-Featherstonehaugh", "Bartholomew-Oyelaran-Smythe", "Wilhelmina-Kowalczykowska",
             "Theodosia-Papadimitriou", "Rr", "Anastasios-Vanderhoeven", "Guinevere-Abernathy-Ito",
             "Quentin-Montgomery-Achterberg"]
    weights = rng.uniform(-0.4, 1.0, size=(len(names), n_cues))
    rows = []
    for r, name in enumerate(names):
        order = list(rng.permutation(n_cases)) + list(rng.choice(n_cases, size=12, replace=False))
        for seq, c in enumerate(order):
            latent = 4 + 0.5 * cues[c] @ weights[r] + rng.normal(0, 0.7)
            rows.append({"rater": name, "case": f"case-{c + 1:03d}", "score": int(np.clip(round(latent), 1, 7)),
                         "seq": seq, **{f"cue_number_{k + 1}": cues[c, k] for k in range(n_cues)}})
    cue_lines = "\n".join(f'cue_number_{k + 1} = "numeric"' for k in range(n_cues))
    return write_study(folder, pd.DataFrame(rows), cues=cue_lines, extra_columns='sequence = "seq"')


def binary_study(folder: Path) -> Path:
    """Six raters deciding admit / decline on three cues, with an outcome for every case."""
    rng = np.random.default_rng(9)
    n_cases = 60
    x = rng.normal(size=(n_cases, 3)).round(3)
    outcome = (x @ [1.0, 0.5, 0.2] + rng.normal(0, 0.8, n_cases)).round(3)
    rows = []
    for r in range(6):
        for c in rng.choice(n_cases, size=48, replace=False):
            latent = x[c] @ [1.0, 0.6 - 0.2 * r, 0.3] + rng.normal(0, 0.6)
            rows.append({"rater": f"reader{r + 1}", "case": f"f{c + 1}", "score": "admit" if latent > 0 else "decline",
                         "x1": x[c, 0], "x2": x[c, 1], "x3": x[c, 2], "outcome": outcome[c]})
    return write_study(folder, pd.DataFrame(rows), scale="binary", jmin=0, jmax=1,
                       cues='x1 = "numeric"\nx2 = "numeric"\nx3 = "numeric"',
                       extra_columns='criterion = "outcome"',
                       extra_judgment='labels = { admit = 1, decline = 0 }')
