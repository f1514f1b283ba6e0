"""Invented panels with planted policies for the policy-capture tests."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueRule, build_cue_design

MIXED_RULES = [
    CueRule("grades"),
    CueRule("essay"),
    CueRule("track", kind="categorical"),
    CueRule("test", missing="indicator"),
]


def mixed_panel(seed: int = 0, *, n_cases: int = 90, n_raters: int = 6, binary: bool = False):
    """Correlated numeric cues, a 3-level categorical cue, a test-optional score.

    Raters see different subsets of the cases (incomplete design); the last
    rater never sees track level 'arts', so that dummy cannot get a weight.
    """
    rng = np.random.default_rng(seed)
    grades = rng.normal(3.0, 0.5, n_cases)
    essay = 0.6 * (grades - 3.0) / 0.5 + rng.normal(0, 0.8, n_cases)
    track = rng.choice(["science", "arts", "trade"], n_cases, p=[0.5, 0.3, 0.2])
    test = np.where(rng.random(n_cases) < 0.25, np.nan, 500 + 80 * rng.normal(size=n_cases))
    ids = [f"case{i:03d}" for i in range(n_cases)]
    cases = pd.DataFrame({"grades": grades, "essay": essay, "track": track, "test": test},
                         index=ids)
    design = build_cue_design(cases, MIXED_RULES)
    rows = []
    for r in range(n_raters):
        if r == n_raters - 1:
            seen = np.flatnonzero(track != "arts")
        elif r % 2:
            seen = np.sort(rng.choice(n_cases, size=int(0.7 * n_cases), replace=False))
        else:
            seen = np.arange(n_cases)
        w = rng.normal(size=design.n_columns)
        X = design.matrix[seen]
        spread = np.where(X.std(axis=0) > 0, X.std(axis=0), 1.0)
        signal = (X - X.mean(axis=0)) / spread @ w
        if binary:
            prob = 1.0 / (1.0 + np.exp(-0.8 * signal))
            judgment = (rng.random(seen.size) < prob).astype(float)
        else:
            judgment = 4.0 + signal + rng.normal(0, 0.5 + 0.4 * r, seen.size)
        rows.append(pd.DataFrame({"rater": f"reader{r}", "case": [ids[i] for i in seen],
                                  "judgment": judgment}))
    return design, pd.concat(rows, ignore_index=True)


def rater_matrix(design, first: pd.DataFrame, rater: str, columns=None):
    """The rater's own design rows and judgments, as a reference fit would see them."""
    mine = first[first["rater"] == rater]
    X = design.matrix[design.row_of(mine["case"])]
    names = list(design.columns)
    if columns is not None:
        keep = [names.index(c) for c in columns]
        X, names = X[:, keep], list(columns)
    return X, mine["judgment"].to_numpy(dtype=float), names


def independent_cue_panel(seed: int, *, n_designs: int, raters_per_design: int,
                          n_cases: int, beta, noise_sd: float):
    """Independent standard-normal cues; each design block is read by several raters.

    Population R^2 is beta'beta / (beta'beta + noise_sd^2) and the population
    general dominance weight of cue j is beta_j^2 / var(y) (independent cues).
    """
    rng = np.random.default_rng(seed)
    beta = np.asarray(beta, dtype=float)
    names = [f"cue{j}" for j in range(beta.size)]
    cases, rows = [], []
    for d in range(n_designs):
        X = rng.normal(size=(n_cases, beta.size))
        ids = [f"set{d}-case{i}" for i in range(n_cases)]
        cases.append(pd.DataFrame(X, columns=names, index=ids))
        for r in range(raters_per_design):
            y = X @ beta + noise_sd * rng.normal(size=n_cases)
            rows.append(pd.DataFrame({"rater": f"set{d}-reader{r}", "case": ids, "judgment": y}))
    design = build_cue_design(pd.concat(cases), [CueRule(n) for n in names])
    return design, pd.concat(rows, ignore_index=True)
