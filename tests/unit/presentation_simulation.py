"""Simulated experiments in which every case is shown many times (shared by the tests of
consistency over presentations and by benchmarks/bench_presentations.py).

Each panel has its own cases: three cues drawn from independent normals. Rater ``i``
judges case ``c`` at presentation ``j`` as

    y = 4 + X_c . TRUE_WEIGHTS + u_ic + e_icj,   u ~ N(0, CASE_SD^2), e ~ N(0, NOISE_SD^2)

``u`` is the rater's own reading of the case beyond the cues (the same at every showing,
which is why presentations of one case are not independent); ``e`` the noise of one
showing. Optionally rounded and clipped to the 1-7 scale.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

CUES = ("record", "essay", "interview")
TRUE_WEIGHTS = np.array([0.6, 0.4, 0.2])
CUE_SD = 1.0
CASE_SD = 0.4
NOISE_SD = 0.6


def signal_variance() -> float:
    """Variance of a case's judgment that every showing shares (cues and the rater's reading)."""
    return float(TRUE_WEIGHTS @ TRUE_WEIGHTS) * CUE_SD**2 + CASE_SD**2


def population_consistency(noise_sd: float = NOISE_SD) -> float:
    """The correlation of two presentations of a random case (= ICC(C,1) = ICC(A,1) here)."""
    return signal_variance() / (signal_variance() + noise_sd**2)


def noise_for(consistency: float) -> float:
    """The showing noise SD that gives this population consistency."""
    return float(np.sqrt(signal_variance() * (1.0 - consistency) / consistency))


def experiment(rng: np.random.Generator, *, n_raters: int = 29, n_cases: int = 14,
               n_presentations: int = 10, rounded: bool = False,
               noise_sd: float = NOISE_SD, own_cases: bool = False) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """(judgments: rater, case, nth, sequence, judgment; cases: case index, cue columns).

    ``own_cases``: every rater gets cases of their own (new cue values), so that raters are
    independent trials of the consistency figures, which are defined over random cases;
    no cases table is returned then (the same case ids hold different cues)."""
    shape = (n_raters, n_cases, len(CUES)) if own_cases else (1, n_cases, len(CUES))
    cues = rng.normal(0.0, CUE_SD, size=shape)
    case_ids = [f"s{c + 1:02d}" for c in range(n_cases)]
    cases = None if own_cases else pd.DataFrame(cues[0], columns=list(CUES), index=pd.Index(case_ids, name="case"))
    u = rng.normal(0.0, CASE_SD, size=(n_raters, n_cases, 1))
    e = rng.normal(0.0, noise_sd, size=(n_raters, n_cases, n_presentations))
    y = 4.0 + (cues @ TRUE_WEIGHTS)[:, :, None] + u + e
    if rounded:
        y = np.clip(np.round(y), 1, 7)
    r_idx, c_idx, j_idx = np.meshgrid(np.arange(n_raters), np.arange(n_cases), np.arange(n_presentations),
                                      indexing="ij")
    # each rater reads the cases in a fresh random order within each round of presentations
    order = np.argsort(rng.random((n_raters, n_presentations, n_cases)), axis=2)
    position = np.empty((n_raters, n_cases, n_presentations), dtype=int)
    for j in range(n_presentations):
        position[np.arange(n_raters)[:, None], order[:, j, :], j] = j * n_cases + np.arange(n_cases)[None, :]
    judgments = pd.DataFrame({
        "rater": np.array([f"p{i + 1:02d}" for i in range(n_raters)])[r_idx.ravel()],
        "case": np.array(case_ids)[c_idx.ravel()],
        "nth": j_idx.ravel(),
        "sequence": position.ravel() + 1,
        "judgment": y.ravel(),
    })
    return judgments, cases
