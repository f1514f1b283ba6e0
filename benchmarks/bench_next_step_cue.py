"""Size and power of page 1's second next step ("agree how much <cue> should count").

The step names a cue as differing between raters only when the smallest per-cue
p-value of the policy homogeneity test, Holm-adjusted over the cues, is below .05
(`calibrate.report.wording.cue_to_discuss` / `step_cue`). Simulated on the data users
have: 1-7 judgments rounded and clipped at the ends (ceilings), few cases per rater,
3 or 5 numeric cues.

- Size: every rater shares one set of weights (each with their own noise and level);
  the share of panels in which the step names a cue should stay at or below 5%.
- Power: one cue's weight varies between raters (SD 0.5 of the common weight); the share
  of panels in which the step names that cue.

Run: .venv/bin/python benchmarks/bench_next_step_cue.py [--quick]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.cue_step_panels import claim_rate  # noqa: E402


def main(quick: bool) -> None:
    n_panels = 40 if quick else 400
    for n_raters, n_cases, n_cues in ((8, 30, 3), (12, 40, 5), (5, 20, 3)):
        start = time.perf_counter()
        size, _ = claim_rate(n_panels, n_raters=n_raters, n_cases=n_cases, n_cues=n_cues, spread=0.0, seed=1)
        _, power = claim_rate(n_panels, n_raters=n_raters, n_cases=n_cases, n_cues=n_cues,
                              spread=0.5 * 0.9, seed=2)
        print(f"{n_raters} raters x {n_cases} cases, {n_cues} cues: names a cue under one shared policy "
              f"{100 * size:.1f}% of {n_panels} panels; names the varying cue {100 * power:.1f}% "
              f"({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main("--quick" in sys.argv)
