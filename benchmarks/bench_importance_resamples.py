"""Coverage of the cue-importance intervals from all 1,000 resamples and from the first 250.

Large panels (more than ``policy.fit.IMPORTANCE_FULL_UP_TO`` raters) get their importance
intervals from the first ``IMPORTANCE_REDUCED_RESAMPLES`` of the same resamples; this checks
that the BCa interval of a share still covers as the full one does. Planted truth as in
``tests/unit/test_policy_coverage.py``: independent standard-normal cues, weights
.5/.4/.3/.2/.1, population R_s = .80, so cue j's true share of R^2 is
``beta_j^2 / sum(beta^2)``; raters in blocks of 25 reading the same cases.

    PYTHONPATH=. python benchmarks/bench_importance_resamples.py [n_raters] [n_cases]
"""

from __future__ import annotations

import sys
import time

import numpy as np

from calibrate.policy.fit import fit_policies
from tests.policy_panels import independent_cue_panel

BETA = np.array([0.5, 0.4, 0.3, 0.2, 0.1])
TRUE_R = 0.8


def coverage(policies, truth) -> tuple[float, float]:
    """(share of (rater, cue) intervals covering the truth, mean interval width)."""
    lo = np.array([[p.importance_ci[c][0] for c in policies.cues] for p in policies.raters])
    hi = np.array([[p.importance_ci[c][1] for c in policies.cues] for p in policies.raters])
    return float(np.mean((lo <= truth) & (truth <= hi))), float(np.mean(hi - lo))


def main(n_raters: int = 500, n_cases: int = 80) -> None:
    noise_sd = float(np.sqrt(BETA @ BETA * (1 / TRUE_R**2 - 1)))
    design, first = independent_cue_panel(17, n_designs=n_raters // 25, raters_per_design=25,
                                          n_cases=n_cases, beta=BETA, noise_sd=noise_sd)
    truth = BETA**2 / (BETA @ BETA)
    for n_boot in (1000, 250):
        start = time.process_time()
        # the same seed: the 250 are the first 250 of the 1,000 (the reduced form's draws)
        fitted = fit_policies(design, first, scale="continuous", n_boot=n_boot, rng=1)
        share, width = coverage(fitted, truth)
        print(f"{n_raters} raters x {n_cases} cases, {n_boot:5d} resamples: importance share "
              f"intervals cover {share:.1%} ({len(fitted.raters) * truth.size} intervals), "
              f"mean width {width:.3f}; {time.process_time() - start:.1f} s CPU", flush=True)


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
