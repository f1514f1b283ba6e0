"""Coverage of alpha's interval in the reduced form of large panels: 100 simulated panels.

Large panels (more than 80,000 judgments) get alpha's parametric-bootstrap interval from
fewer simulated panels (``calibrate.agreement.icc.simulated_panel_count``: 100 at 400,000
judgments). This scores that interval where it applies, on large panels: each replicate
draws a new panel of ``--raters`` raters who all read the same ``--cases`` files
(case variance 1, rater variance 0.2, residual 0.5, normal), and asks whether the 95%
percentile interval from ``--draws`` simulated panels holds the population value
sigma2_c / (sigma2_c + sigma2_r + sigma2_e) of interval alpha (= ICC(A,1)). The normal
interval from the same draws' spread is scored beside it. A coverage figure passes when
its 99.9% Clopper-Pearson interval overlaps the 93-97% band.

    PYTHONPATH=. python benchmarks/bench_agreement_reduced.py [--replicates 300] [--raters 400]
        [--cases 200] [--draws 100]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from scipy import stats

from calibrate.agreement.icc import _percentile_interval, alpha_parametric_draws, krippendorff_alpha
from calibrate.agreement.offsets import check_first, crossed_layout, fit_additive
from calibrate.agreement.readers import henderson_components

CASE_VAR, RATER_VAR, RESIDUAL_VAR = 1.0, 0.2, 0.5


def clopper_pearson(k, n, level=0.999):
    a = (1 - level) / 2
    lo = stats.beta.ppf(a, k, n - k + 1) if k > 0 else 0.0
    hi = stats.beta.ppf(1 - a, k + 1, n - k) if k < n else 1.0
    return lo, hi


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--replicates", type=int, default=300)
    parser.add_argument("--raters", type=int, default=400)
    parser.add_argument("--cases", type=int, default=200)
    parser.add_argument("--draws", type=int, default=100)
    parser.add_argument("--seed", type=int, default=20261203)
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    truth = CASE_VAR / (CASE_VAR + RATER_VAR + RESIDUAL_VAR)
    R, C = args.raters, args.cases
    ri = np.tile(np.arange(R), C)
    ci = np.repeat(np.arange(C), R)
    names = np.array([f"r{i:04d}" for i in range(R)])
    cases = np.array([f"c{i:04d}" for i in range(C)])
    hits = np.zeros(2)
    start = time.perf_counter()
    for _ in range(args.replicates):
        y = (rng.normal(0, np.sqrt(CASE_VAR), C)[ci] + rng.normal(0, np.sqrt(RATER_VAR), R)[ri]
             + rng.normal(0, np.sqrt(RESIDUAL_VAR), ri.size))
        first = pd.DataFrame({"rater": names[ri], "case": cases[ci], "judgment": y})
        layout = crossed_layout(check_first(first))
        estimate = krippendorff_alpha(layout.case_index, layout.y, level="interval").estimate
        comps = henderson_components(fit_additive(layout))
        draws = alpha_parametric_draws(layout, comps, "interval", None, args.draws, rng)
        low, high = (float(v[0]) for v in _percentile_interval(draws[:, None], 0.95))
        half = 1.959963984540054 * float(np.std(draws, ddof=1))
        hits += [low <= truth <= high, estimate - half <= truth <= estimate + half]
    n = args.replicates
    print(f"{R} raters x {C} files, {args.draws} simulated panels, {n} replicates "
          f"({time.perf_counter() - start:.0f} s), truth {truth:.4f}")
    for name, h in zip(("percentile", "normal (draws' SD)"), hits):
        lo, hi = clopper_pearson(int(h), n)
        verdict = "pass" if hi >= 0.93 and lo <= 0.97 else "FAIL"
        print(f"  {name:<20} {h / n:6.3f} ({lo:.3f}-{hi:.3f}) {verdict}")


if __name__ == "__main__":
    main()
