"""Coverage of the 95% prediction interval of `calibrate score`, by simulation.

Each simulated rater judges `n` cases on three cues (one a 0/1 cue); their
judgment is a linear policy plus normal error, then (on the 1-7 scale) rounded
and clipped, so the ceiling and the rounding break the normal model. A new file's
interval covers if the rater's own judgment of it (same process) falls inside.
All raters are fitted in one fit_policies call.

    PYTHONPATH=. python benchmarks/score_interval_coverage.py [n_raters]
"""

from __future__ import annotations

import sys

import numpy as np
import pandas as pd

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.design.score import score_files
from calibrate.policy.fit import captured_policies, fit_policies


def coverage(n_raters: int, n_cases: int, scale: str, seed: int, n_new: int = 20,
             noise: float = 0.8, shift: float = 0.0) -> float:
    """Share of new judgments inside their 95% prediction interval.

    ``shift`` raises every cue's mean: with a 1-7 scale a shift pushes judgments
    into the ceiling.
    """
    rng = np.random.default_rng(seed)
    total = n_cases + n_new
    cases = pd.DataFrame({"a": rng.normal(0, 1, total), "b": rng.normal(0, 1, total),
                          "c": rng.integers(0, 2, total).astype(float)},
                         index=[f"k{i}" for i in range(total)])
    design = build_cue_design(cases.iloc[:n_cases], [CueRule("a"), CueRule("b"), CueRule("c")])
    weights = rng.normal([0.8, 0.5, 0.6], 0.2, size=(n_raters, 3))
    centre = 4.0 + shift

    def judge(X):
        y = centre + X @ weights.T + rng.normal(0, noise, (len(X), n_raters))
        return np.clip(np.round(y), 1, 7) if scale == "1-7" else y

    y_fit = judge(cases.iloc[:n_cases].to_numpy())
    y_new = judge(cases.iloc[n_cases:].to_numpy())
    first = pd.DataFrame({"rater": np.repeat([f"r{g}" for g in range(n_raters)], n_cases),
                          "case": np.tile(cases.index[:n_cases], n_raters),
                          "judgment": y_fit.T.ravel()})
    policy_set = fit_policies(design, first, scale="continuous", n_boot=0)
    policies = {"phases": {"all": captured_policies(policy_set, design)}}
    new = cases.iloc[n_cases:].reset_index(names="file")
    hits, seen = 0, 0
    for policy in policy_set.raters:   # scoring is per rater by design; cheap
        if "not_fitted" in policy.flags:
            continue
        g = int(policy.rater[1:])       # raters come back sorted by name
        s = score_files(policies, new, policy=policy.rater)
        hits += int(((y_new[:, g] >= s.lower) & (y_new[:, g] <= s.upper)).sum())
        seen += n_new
    return hits / seen


if __name__ == "__main__":
    n_raters = int(sys.argv[1]) if len(sys.argv) > 1 else 500
    for scale, n_cases, shift in (("continuous", 15, 0), ("continuous", 40, 0), ("1-7", 15, 0),
                                  ("1-7", 40, 0), ("1-7", 40, 2.0)):
        print(f"{scale:>10} n={n_cases:<3} shift={shift:<3} coverage={coverage(n_raters, n_cases, scale, 7, shift=shift):.3f}")
