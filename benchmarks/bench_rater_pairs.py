"""Time the rater-pairs view, policy homogeneity and drift on invented panels.

Panels of 10 / 50 / 200 / 500 raters; each rater reads 150 of 600 cases
(an incomplete design, 6 numeric cues), so a pair shares about 37 cases.
Where two readers part ways keeps at most ``DEFAULT_MAX_PAIRS`` pairs (the most
furthest apart); the screen over all pairs is timed with it. For the 10-rater
panel the exact refits are compared with a loop of statsmodels OLS over pairs
(the reference used in the tests), to show the speed-up and the agreement.

Run: .venv/bin/python benchmarks/bench_rater_pairs.py [--quick]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd
import statsmodels.api as sm

from calibrate.consistency.reading_order import drift
from calibrate.data.cues import CueRule, build_cue_design
from calibrate.panel.pairs import DEFAULT_MAX_PAIRS, compare_rater_pairs, policy_homogeneity

N_POOL, PER_RATER, N_CUES = 600, 150, 6


def panel(n_raters: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    names = [f"cue{j}" for j in range(N_CUES)]
    cases = pd.DataFrame(rng.normal(size=(N_POOL, N_CUES)), columns=names,
                         index=[f"case{i}" for i in range(N_POOL)])
    design = build_cue_design(cases, [CueRule(n) for n in names])
    rater = np.repeat(np.arange(n_raters), PER_RATER)
    case = np.concatenate([rng.choice(N_POOL, PER_RATER, replace=False) for _ in range(n_raters)])
    weights = rng.normal(size=(n_raters, N_CUES))
    noise = rng.uniform(0.3, 1.5, n_raters)
    y = np.einsum("ij,ij->i", design.matrix[case], weights[rater]) \
        + noise[rater] * rng.standard_normal(rater.size)
    first = pd.DataFrame({"rater": [f"r{r:04d}" for r in rater],
                          "case": np.asarray(design.case_ids)[case], "judgment": y})
    ordered = first.assign(position=first.groupby("rater").cumcount())
    return design, first, ordered


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def statsmodels_loop(design, first, result):
    """Refit every kept pair with statsmodels; return max |G difference|."""
    worst = 0.0
    by_rater = {r: part.set_index("case").judgment for r, part in first.groupby("rater")}
    for pair in result.pairs:
        a, b = by_rater[pair.rater_a], by_rater[pair.rater_b]
        shared = sorted(set(a.index) & set(b.index))
        X = sm.add_constant(design.matrix[design.row_of(shared)])
        fa = sm.OLS(a[shared].to_numpy(), X).fit()
        fb = sm.OLS(b[shared].to_numpy(), X).fit()
        g = np.corrcoef(fa.fittedvalues, fb.fittedvalues)[0, 1]
        worst = max(worst, abs(g - pair.g))
    return worst


def main(quick: bool) -> None:
    sizes = [10, 50, 200] if quick else [10, 50, 200, 500]
    print(f"{'raters':>7} {'pairs kept':>10} {'eligible':>9} {'rater_pairs s':>10} "
          f"{'homogeneity s':>13} {'drift s':>8}")
    for n_raters in sizes:
        design, first, ordered = panel(n_raters)
        rater_pairs, t_pairs = timed(lambda: compare_rater_pairs(design, first))
        _, t_homog = timed(lambda: policy_homogeneity(design, first, rng=1))
        _, t_drift = timed(lambda: drift(design, ordered, rng=1))
        print(f"{n_raters:>7} {rater_pairs.n_pairs_kept:>10} {rater_pairs.n_pairs_eligible:>9} "
              f"{t_pairs:>10.3f} {t_homog:>13.3f} {t_drift:>8.3f}")
        if n_raters == 10:
            worst, t_loop = timed(lambda: statsmodels_loop(design, first, rater_pairs))
            print(f"        statsmodels loop over the {rater_pairs.n_pairs_kept} pairs: "
                  f"{t_loop:.3f} s, max |G difference| {worst:.1e}")
    print(f"(pairs kept at most {DEFAULT_MAX_PAIRS}; {PER_RATER} of {N_POOL} cases per rater, "
          f"{N_CUES} cues)")


if __name__ == "__main__":
    main("--quick" in sys.argv)
