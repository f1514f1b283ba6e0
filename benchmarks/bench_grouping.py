"""Time group_raters at several panel sizes (not a test).

Run: python benchmarks/bench_grouping.py [--full]
Invented panels: three planted policies, each rater sees 70% of the cases.
``--full`` adds the large sizes and the full-size one-policy check (1,000 panels).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

from calibrate.cues import CueRule, build_cue_design
from calibrate.grouping import group_raters


def panel(seed, n_raters, n_cases, n_cues, n_policies=3, noise=0.7, share_seen=0.7):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n_cases, n_cues))
    cases = pd.DataFrame(X, columns=[f"cue{j}" for j in range(n_cues)],
                         index=[f"case{i:05d}" for i in range(n_cases)])
    design = build_cue_design(cases, [CueRule(c) for c in cases.columns])
    policies = rng.normal(size=(n_policies, n_cues))
    seen = rng.random((n_raters, n_cases)) < share_seen
    r_idx, c_idx = np.nonzero(seen)
    truth = np.arange(n_raters) % n_policies
    y = np.einsum("mp,mp->m", X[c_idx], policies[truth[r_idx]])
    y += rng.normal(0, noise, y.size) + rng.normal(0, 1, n_raters)[r_idx]
    first = pd.DataFrame({"rater": [f"rev{r:04d}" for r in r_idx],
                          "case": [design.case_ids[c] for c in c_idx], "judgment": y})
    return design, first, truth


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--full", action="store_true")
    args = parser.parse_args()
    sizes = [(10, 60, 4), (30, 150, 6), (60, 300, 6)]
    if args.full:
        sizes += [(120, 400, 8), (250, 600, 8)]
    print(f"{'raters':>6} {'cases':>6} {'cues':>4} {'seconds':>8} {'groups':>6} "
          f"{'resamples':>9} {'ARI':>5}")
    for n_raters, n_cases, n_cues in sizes:
        design, first, truth = panel(1, n_raters, n_cases, n_cues)
        t0 = time.perf_counter()
        res = group_raters(design, first, rng=1)
        took = time.perf_counter() - t0
        print(f"{n_raters:>6} {n_cases:>6} {n_cues:>4} {took:>8.2f} {res.n_groups:>6} "
              f"{res.n_resamples:>9} {res.ari_estimate:>5.2f}")
    if args.full:
        one = 0
        t0 = time.perf_counter()
        for seed in range(1000):
            design, first, _ = panel(seed, 4 + seed % 12, 30 + seed % 60, 4, n_policies=1)
            one += group_raters(design, first, rng=seed, n_resamples=0).n_groups == 1
        print(f"one shared policy: one group in {one} of 1000 panels "
              f"({time.perf_counter() - t0:.1f} s)")


if __name__ == "__main__":
    main()
