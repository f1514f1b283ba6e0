"""Coverage of the recovered weights' 95% CIs on a planned design.

200 simulated raters each read the 40 files a plan chose from a correlated pool
(three 1-7 cues, r = .5) plus hidden repeats; each judges by a known linear policy
plus normal error, optionally rounded and clipped to 1-7. All raters are fitted in
one fit_policies call (first judgments only).

    PYTHONPATH=. python benchmarks/plan_weight_coverage.py
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.design.plan import plan_exercise
from calibrate.policy.fit import fit_policies

CUES = ("grades", "essay", "interview")
TRUE = np.array([0.5, 0.3, 0.2])


def weight_coverage(n_raters: int = 200, files_per_rater: int = 40, rounded: bool = True, seed: int = 0,
                    method: str = "uncorrelated", noise: float = 0.6) -> float:
    rng = np.random.default_rng(seed)
    cov = np.full((3, 3), 0.5) + 0.5 * np.eye(3)
    X = np.clip(np.round(4 + 1.5 * rng.multivariate_normal(np.zeros(3), cov, 400)), 1, 7)
    pool = pd.DataFrame({"file": [f"p{i}" for i in range(400)], **dict(zip(CUES, X.T))})
    raters = [f"r{i:03d}" for i in range(n_raters)]
    plan = plan_exercise(pool, raters, files_per_rater, method=method, seed=seed)
    first = plan.key[plan.key.showing == 1][["rater", "file"]].rename(columns={"file": "case"})
    cues = pool.set_index("file").loc[first["case"], list(CUES)].to_numpy()
    y = 1 + cues @ TRUE + rng.normal(0, noise, len(first))
    first = first.assign(judgment=np.clip(np.round(y), 1, 7) if rounded else y)
    design = build_cue_design(plan.file_cues.set_index("file"), [CueRule(c) for c in CUES])
    fitted = fit_policies(design, first, scale="ordinal" if rounded else "continuous", n_boot=0)
    hits = [(p.ci_low[c] <= w <= p.ci_high[c]) for p in fitted.raters for c, w in zip(CUES, TRUE)]
    return float(np.mean(hits))


if __name__ == "__main__":
    for rounded in (False, True):
        for method in ("uncorrelated", "representative"):
            print(f"rounded={rounded!s:5} {method:>14} coverage={weight_coverage(rounded=rounded, method=method):.3f}")
