"""Simulated panels for page 1's second next step (shared by
tests/unit/test_panel_page_one.py and benchmarks/bench_next_step_cue.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.panel.pairs import policy_homogeneity
from calibrate.report.wording import CLAIM_ALPHA, cue_to_discuss


def panel(rng, n_raters: int, n_cases: int, n_cues: int, spread_on_first: float):
    """One simulated panel; every rater reads every case once (1-7, rounded, clipped)."""
    names = [f"cue{j}" for j in range(n_cues)]
    cases = pd.DataFrame(rng.normal(size=(n_cases, n_cues)), columns=names,
                         index=[f"case{i}" for i in range(n_cases)])
    design = build_cue_design(cases, [CueRule(n) for n in names])
    weights = np.tile(np.linspace(0.9, 0.3, n_cues), (n_raters, 1))
    weights[:, 0] += spread_on_first * rng.standard_normal(n_raters)
    noise = rng.uniform(0.4, 1.0, n_raters)
    level = rng.normal(4.3, 0.5, n_raters)   # high enough that 7 is a ceiling for some
    rows = []
    for r in range(n_raters):
        y = level[r] + design.matrix @ weights[r] + noise[r] * rng.standard_normal(n_cases)
        rows.append(pd.DataFrame({"rater": f"r{r:02d}", "case": design.case_ids,
                                  "judgment": np.clip(np.round(y), 1, 7)}))
    return design, pd.concat(rows, ignore_index=True)


def claim_rate(n_panels: int, *, n_raters: int, n_cases: int, n_cues: int, spread: float, seed: int,
               n_resamples: int = 499) -> tuple[float, float]:
    """(share of panels naming any cue, share naming cue0)."""
    rng = np.random.default_rng(seed)
    named = named_first = 0
    for _ in range(n_panels):
        design, first = panel(rng, n_raters, n_cases, n_cues, spread)
        result = policy_homogeneity(design, first, n_resamples=n_resamples, rng=rng)
        per_cue = {t.cue: (t.statistic, t.p_value) for t in result.per_cue}
        cue, p_adj = cue_to_discuss(per_cue)
        if p_adj is not None and p_adj < CLAIM_ALPHA:
            named += 1
            named_first += cue == "cue0"
    return named / n_panels, named_first / n_panels
