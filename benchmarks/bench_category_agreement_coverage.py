"""Coverage of the case-bootstrap (BCa) intervals of Fleiss' kappa and Gwet's AC1.

The data users have: a 1-7 scale with a ceiling (latent case level + a fixed offset per
rater + noise, shifted up so that many judgments pile up at 7, rounded and clipped), or
binary decisions (the same latent judgment above a cut); few cases; an incomplete design
(each case read by 3 of 6 raters at random) or a complete one. The raters' offsets are
fixed across simulated panels, as the interval holds the readers as they are. The
population value of each coefficient is computed once from 400,000 simulated cases on
the same raters. A coverage figure passes when its 99.9% Clopper-Pearson interval
overlaps the 93-97% band; "below" and "above" are the shares of intervals that miss
with the population value below their lower end or above their upper end (a skewed
miss shows a bias the interval does not correct).

    PYTHONPATH=. python benchmarks/bench_category_agreement_coverage.py [--panels 1000] [--boot 500]

``--jackknife`` scores the reduced form of very many files instead (the normal interval
from the jackknife standard error) on more files per panel (300 and 2,000).
"""

from __future__ import annotations

import argparse
import time

import sys
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "unit"))

from category_simulation import simulate, truth  # noqa: E402

from calibrate.agreement.categories import category_agreement  # noqa: E402


def run(n_cases, readers, binary, panels, n_boot, rng, jackknife=False):
    true_values = truth(readers, binary)
    below, above = np.zeros(2), np.zeros(2)
    for _ in range(panels):
        data = simulate(rng, n_cases, readers, binary)
        found = category_agreement(data, categories=[0, 1] if binary else range(1, 8), n_boot=n_boot, rng=rng,
                                   jackknife=jackknife)
        below += [t < c.ci_low for c, t in zip(found, true_values)]
        above += [t > c.ci_high for c, t in zip(found, true_values)]
    return true_values, panels - below - above, below, above


def clopper_pearson(k, n, level=0.999):
    a = (1 - level) / 2
    lo = stats.beta.ppf(a, k, n - k + 1) if k > 0 else 0.0
    hi = stats.beta.ppf(1 - a, k + 1, n - k) if k < n else 1.0
    return lo, hi


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--panels", type=int, default=1000)
    parser.add_argument("--boot", type=int, default=500)
    parser.add_argument("--jackknife", action="store_true", help="score the jackknife interval")
    args = parser.parse_args()
    rng = np.random.default_rng(20261203)
    print(f"{'design':<34} {'coefficient':<14} {'truth':>7} {'coverage':>9} {'below':>6} {'above':>6}  verdict")
    designs = ((30, 3, False), (30, 6, False), (80, 3, False), (30, 3, True), (80, 3, True))
    if args.jackknife:
        designs = ((300, 3, False), (2000, 3, False), (300, 3, True), (2000, 3, True))
    for n_cases, readers, binary in designs:
        start = time.perf_counter()
        true_values, hits, below, above = run(n_cases, readers, binary, args.panels, args.boot, rng,
                                              args.jackknife)
        design = f"{'binary' if binary else '1-7'} {n_cases} cases, {readers} of 6 read each"
        for j, (name, t) in enumerate(zip(("Fleiss' kappa", "Gwet's AC1"), true_values)):
            lo, hi = clopper_pearson(int(hits[j]), args.panels)
            verdict = "pass" if hi >= 0.93 and lo <= 0.97 else "FAIL"
            print(f"{design:<34} {name:<14} {t:7.3f} {hits[j] / args.panels:9.3f} "
                  f"{below[j] / args.panels:6.3f} {above[j] / args.panels:6.3f}  {verdict}")
        print(f"  ({time.perf_counter() - start:.1f} s)")


if __name__ == "__main__":
    main()
