"""Invented panels for the rater_pairs, homogeneity and drift tests (planted truths).

Each rater judges a random subset of a shared pool of cases (an incomplete
design) with a linear policy plus normal noise; a test plants what it checks
(different weights, unequal noise, a trend over the reading order).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueDesign, CueRule, build_cue_design


def case_pool(rng: np.random.Generator, n_cases: int, *, categorical: bool = True,
              missing_share: float = 0.0) -> CueDesign:
    """Two correlated numeric cues on different scales and, optionally, a 3-level category.

    ``missing_share`` blanks that share of the first cue, which has a ``drop`` rule.
    """
    z = rng.multivariate_normal([0, 0], [[1, .35], [.35, 1]], size=n_cases)
    cases = pd.DataFrame({"record": 70 + 8 * z[:, 0], "essay": 3 + 1.2 * z[:, 1]},
                         index=[f"file{i:04d}" for i in range(n_cases)])
    rules = [CueRule("record"), CueRule("essay")]
    if categorical:
        cases["letter"] = rng.choice(["solid", "strong", "weak"], size=n_cases, p=[.5, .3, .2])
        rules.append(CueRule("letter", "categorical"))
    if missing_share:
        cases.loc[rng.random(n_cases) < missing_share, "record"] = np.nan
    return build_cue_design(cases, rules)


def first_judgments(rng: np.random.Generator, design: CueDesign, *, per_rater: list[int] | int,
                    weights: np.ndarray, noise: np.ndarray | float,
                    n_raters: int | None = None) -> pd.DataFrame:
    """One first judgment per (rater, case); ``weights`` is (p,) shared or (K, p) per rater."""
    weights = np.asarray(weights, dtype=float)
    if n_raters is None:
        n_raters = weights.shape[0] if weights.ndim == 2 else len(np.atleast_1d(per_rater))
    per_rater = np.broadcast_to(np.asarray(per_rater), (n_raters,))
    weights = np.broadcast_to(weights, (n_raters, design.n_columns))
    noise = np.broadcast_to(np.asarray(noise, dtype=float), (n_raters,))
    X = np.nan_to_num(design.matrix)
    ids = np.asarray(design.case_ids)
    frames = []
    for r in range(n_raters):
        rows = rng.choice(X.shape[0], int(per_rater[r]), replace=False)
        y = 0.3 * r + X[rows] @ weights[r] + noise[r] * rng.standard_normal(rows.size)
        frames.append(pd.DataFrame({"rater": f"reader{r:03d}", "case": ids[rows], "judgment": y}))
    return pd.concat(frames, ignore_index=True)
