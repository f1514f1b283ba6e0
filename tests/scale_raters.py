"""Invented linear raters on each judgment scale, for the size and power of the
"straight line?" tests (tests/unit/test_scale_nulls.py, test_cutoff_check.py and
benchmarks/bench_scale_nulls.py).

Each rater has their own cases: three standard-normal cues, latent judgment
``mean + X b + noise`` with b = (.5, .4, .3) and noise SD 1. On "ordinal" the latent
judgment is rounded and clipped to 1..7; on "binary" the decision is 1 when it is above 0
(a probit rater, so the tests' logistic null is not the generating model); on
"continuous" it is the judgment. Plants: "curve" adds 0.25 (X b)^2; "cutoff" gives every
case with cue 1 below -0.25 (about 40% of cases) ``mean - 1.5 + noise`` whatever the cues
say (declined on 0/1).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.lens.cutoffs import cutoff_check

WEIGHTS = np.array([0.5, 0.4, 0.3])
CUT_AT, CUT_DROP = -0.25, 1.5


def scale_raters(rng: np.random.Generator, kind: str, mean: float, n_raters: int, n_cases: int,
                 plant: str = "none") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(X, y, groups) of ``n_raters`` raters, rows sorted by rater."""
    m = n_raters * n_cases
    X = rng.standard_normal((m, 3))
    signal = X @ WEIGHTS
    noise = rng.standard_normal(m)
    latent = mean + signal + noise
    if plant == "curve":
        latent = latent + 0.25 * signal**2
    elif plant == "cutoff":
        latent = np.where(X[:, 0] < CUT_AT, mean - CUT_DROP + noise, latent)
    if kind == "ordinal":
        y = np.clip(np.round(latent), 1, 7)
    elif kind == "binary":
        y = (latent > 0).astype(float)
        if plant == "cutoff":
            y[X[:, 0] < CUT_AT] = 0.0
    else:
        y = latent
    return X, y, np.repeat(np.arange(n_raters), n_cases)


def cutoff_p_values(kind: str, X: np.ndarray, y: np.ndarray, groups: np.ndarray, rng,
                    n_sim: int = 999) -> np.ndarray:
    """The cut-off check's p-value per rater, run as the audit runs it (1-7 ends passed)."""
    ids = [f"c{i:06d}" for i in range(y.size)]
    cases = pd.DataFrame(X, columns=["cue1", "cue2", "cue3"], index=pd.Index(ids, name="case"))
    design = build_cue_design(cases, [CueRule("cue1"), CueRule("cue2"), CueRule("cue3")])
    first = pd.DataFrame({"rater": [f"r{g:05d}" for g in groups], "case": ids, "judgment": y})
    bounds = {"scale_min": 1, "scale_max": 7} if kind == "ordinal" else {}
    result = cutoff_check(design, first, rng=rng, scale=kind, n_sim=n_sim, **bounds)
    return np.array([r.p_value for r in result.raters])


def overlaps_band(p: np.ndarray, low: float = 0.04, high: float = 0.06) -> tuple[int, float, float]:
    """(hits, interval low, interval high): p < .05 count and its 99.9% Clopper-Pearson interval."""
    from scipy import stats

    hits = int(np.sum(p < 0.05))
    ci = stats.binomtest(hits, p.size).proportion_ci(confidence_level=0.999, method="exact")
    return hits, float(ci.low), float(ci.high)
