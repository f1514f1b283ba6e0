"""Time fit_policies on invented panels: 100 / 1000 / 5000 raters x 100 cases x 6 cues.

Every rater reads the same 100 cases (the shared-design path: one resampled
cue cross-product matrix per resample, shared by all raters). One extra row
times an incomplete design where every rater reads a different set of cases
(one resampling block per rater). The point fit is compared with a loop of
statsmodels OLS over raters (the reference used in the tests).

A last pair of rows times the two ways calibrate.policy.importance finds the subset
R^2 values of the dominance weights, on 200,000 stacked 6-cue systems (one
response each, as in the bootstrap of raters who read their own cases).

Measured on the 2-core development machine (other jobs running), seconds,
before -> after the bootstrap was stacked across blocks and the dominance
subsets found by the elimination tree (same draws; interval ends moved by
rounding only, at most 6e-15 on the checked panels):

    shared      100 raters x 1000 resamples    0.63 ->  0.36   (1.8x)
    shared     1000 raters x 1000 resamples    7.31 ->  3.11   (2.4x)
    shared     5000 raters x 1000 resamples   50.20 -> 15.44   (3.3x)
    own cases   100 raters x 1000 resamples    2.38 ->  0.56   (4.3x)
    own cases  1000 raters x   50 resamples    6.42 ->  1.32   (4.9x)
    own cases  1000 raters x 1000 resamples   71.45 ->  6.22  (11.5x)
    dominance subsets, 200,000 systems           3.87 ->  0.31  (12.5x, solve -> sweep)

Run: .venv/bin/python benchmarks/bench_policy.py [--quick]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd
import statsmodels.api as sm

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.policy.fit import fit_policies
from calibrate.policy.importance import dominance_weights

N_CASES, N_CUES = 100, 6


def panel(n_raters: int, *, shared: bool, seed: int = 0):
    rng = np.random.default_rng(seed)
    n_pool = N_CASES if shared else N_CASES * 4
    names = [f"cue{j}" for j in range(N_CUES)]
    cases = pd.DataFrame(rng.normal(size=(n_pool, N_CUES)), columns=names,
                         index=[f"case{i}" for i in range(n_pool)])
    design = build_cue_design(cases, [CueRule(n) for n in names])
    rater_idx = np.repeat(np.arange(n_raters), N_CASES)
    if shared:
        case_idx = np.tile(np.arange(N_CASES), n_raters)
    else:
        case_idx = np.concatenate([rng.choice(n_pool, N_CASES, replace=False)
                                   for _ in range(n_raters)])
    weights = rng.normal(size=(n_raters, N_CUES))
    y = np.einsum("mj,mj->m", design.matrix[case_idx], weights[rater_idx])
    y += rng.normal(size=y.size)
    first = pd.DataFrame({"rater": [f"r{g:05d}" for g in rater_idx],
                          "case": [f"case{i}" for i in case_idx], "judgment": y})
    return design, first


def statsmodels_loop(design, first) -> float:
    start = time.perf_counter()
    for _, rows in first.groupby("rater", sort=False):
        X = design.matrix[design.row_of(rows["case"])]
        sm.OLS(rows["judgment"].to_numpy(), sm.add_constant(X)).fit()
    return time.perf_counter() - start


def timed(design, first, n_boot) -> float:
    start = time.perf_counter()
    fit_policies(design, first, scale="continuous", n_boot=n_boot, rng=1)
    return time.perf_counter() - start


def solver_seconds(n_systems: int = 200_000) -> dict[str, float]:
    rng = np.random.default_rng(3)
    data = rng.normal(size=(2000, 40, N_CUES + 1)) @ rng.normal(size=(N_CUES + 1, N_CUES + 1))
    data -= data.mean(axis=1, keepdims=True)
    data /= np.sqrt((data**2).sum(axis=1, keepdims=True))
    corr = (np.swapaxes(data, 1, 2) @ data)[rng.integers(0, 2000, n_systems)]
    groups = [[j] for j in range(N_CUES)]
    seconds = {}
    for solver in ("solve", "sweep"):
        start = time.perf_counter()
        dominance_weights(corr[:, :N_CUES, :N_CUES], corr[:, :N_CUES, N_CUES:], groups,
                          solver=solver)
        seconds[solver] = time.perf_counter() - start
    return seconds


def main() -> None:
    quick = "--quick" in sys.argv
    sizes = [100, 1000] if quick else [100, 1000, 5000]
    print(f"{'raters':>7} {'design':>10} {'n_boot':>7} {'seconds':>9}")
    for n_raters in sizes:
        design, first = panel(n_raters, shared=True)
        for n_boot in (0, 50, 1000):
            print(f"{n_raters:>7} {'shared':>10} {n_boot:>7} {timed(design, first, n_boot):>9.2f}")
        if n_raters <= 1000:
            loop = statsmodels_loop(design, first)
            batched = timed(design, first, 0)
            print(f"{n_raters:>7}  point fit: statsmodels loop {loop:.2f} s, batched {batched:.2f} s "
                  f"(batched includes importance, LOO, RESET, VIF), ratio {loop / batched:.1f}x")
    for n_raters in [100] if quick else [100, 1000]:
        design, first = panel(n_raters, shared=False)
        for n_boot in (50, 1000):
            print(f"{n_raters:>7} {'own cases':>10} {n_boot:>7} {timed(design, first, n_boot):>9.2f}")
    seconds = solver_seconds()
    print(f"dominance subsets, 200,000 systems: one solve per subset {seconds['solve']:.2f} s, "
          f"elimination tree {seconds['sweep']:.2f} s, ratio {seconds['solve'] / seconds['sweep']:.1f}x")


if __name__ == "__main__":
    main()
