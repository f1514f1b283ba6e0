"""Size and coverage of the tests behind `calibrate compare` (figures in DEVELOPERS.md).

Run: PYTHONPATH=. python benchmarks/bench_training.py [--quick]

1. Fisher z on two retest correlations with no true change: share of p < .05 over 2,000
   comparisons (1-7 ratings with a ceiling; 25 vs 40 pairs, and 12 vs 12).
2. The case-bootstrap interval of a change in R_s: coverage of the true change and size
   under no change over 500 simulated rater pairs of phases (1-7 with ceiling 60 vs 60
   cases, few cases 25 vs 25, unequal 40 vs 120, binary 80 vs 80).
3. Difference in differences (Welch t on per-rater changes): coverage of the true effect
   over 200 simulated panels of 7 trained + 7 controls, and how often it includes zero
   when there is only a practice effect shared by both arms (100 panels).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "unit"))

from training_simulation import NOISE_GRID, judgments, population_rs, rows_for, rs_draws  # noqa: E402

from calibrate.training.phases import _policy_draws  # noqa: E402
from calibrate.training.tests_of_change import (bootstrap_difference, fisher_z_difference,  # noqa: E402
                                                welch_difference)


def fisher_size(rng, runs, n1, n2, noise=0.7):
    hits = 0
    for _ in range(runs):
        rs = []
        for n in (n1, n2):
            true = rng.normal(0, 1, n)
            a = np.clip(np.round(4.8 + 1.2 * (true + rng.normal(0, noise, n))), 1, 7)
            b = np.clip(np.round(4.8 + 1.2 * (true + rng.normal(0, noise, n))), 1, 7)
            rs.append(np.corrcoef(a, b)[0, 1])
        hits += fisher_z_difference(rs[0], n1, rs[1], n2)[1] < 0.05
    return hits / runs


def rs_change(rng, pairs, n_a, n_b, noise_a, noise_b, n_boot, binary=False, chunk=50):
    truth = population_rs(noise_b, binary=binary) - population_rs(noise_a, binary=binary)
    covered = rejected = total = 0
    for start in range(0, pairs, chunk):
        g = min(chunk, pairs - start)
        da = rs_draws(rng, [noise_a] * g, n_a, n_boot, binary=binary)
        db = rs_draws(rng, [noise_b] * g, n_b, n_boot, binary=binary)
        low, high, p = bootstrap_difference(da[:, 1:], db[:, 1:])
        ok = np.isfinite(low)
        covered += int(((low <= truth) & (truth <= high))[ok].sum())
        rejected += int((p < 0.05)[ok].sum())
        total += int(ok.sum())
    return truth, covered / total, rejected / total


def panel_changes(rng, noise_a, noise_b, n):
    """Per-rater point change in R_s (no resamples needed for the Welch route)."""
    a = _policy_draws(rows_for(rng, noise_a, n), np.arange(len(noise_a)), None, None, None, 1, rng)[0]["r"][:, 0]
    b = _policy_draws(rows_for(rng, noise_b, n), np.arange(len(noise_b)), None, None, None, 1, rng)[0]["r"][:, 0]
    return b - a


def did(rng, panels, *, practice=0.85, training=0.7, n=60, per_arm=7):
    pop = np.array([population_rs(s, n=60_000) for s in NOISE_GRID])
    true_rs = lambda s: np.interp(s, NOISE_GRID, pop)  # noqa: E731
    # Population mean changes over the rater distribution (noise SD uniform on 0.4-1.2).
    grid = np.linspace(0.4, 1.2, 401)
    effect = (np.mean(true_rs(grid * practice * training) - true_rs(grid))
              - np.mean(true_rs(grid * practice) - true_rs(grid)))
    covered = zero_in = 0
    for _ in range(panels):
        s_t, s_c = rng.uniform(0.4, 1.2, per_arm), rng.uniform(0.4, 1.2, per_arm)
        d_t = panel_changes(rng, s_t, s_t * practice * training, n)
        d_c = panel_changes(rng, s_c, s_c * practice, n)
        w = welch_difference(d_t, d_c)
        covered += w["ci_low"] <= effect <= w["ci_high"]
        zero_in += w["ci_low"] <= 0 <= w["ci_high"]
    return effect, covered / panels, zero_in / panels


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    rng = np.random.default_rng(20261202)
    scale = 5 if args.quick else 1
    t0 = time.perf_counter()
    for n1, n2 in ((25, 40), (12, 12)):
        print(f"Fisher z size, retest pairs {n1} vs {n2}: {fisher_size(rng, 2000 // scale, n1, n2):.3f}")
    boot = 1000 // scale
    for label, n_a, n_b, binary in (("1-7 ceiling", 60, 60, False), ("few cases", 25, 25, False),
                                    ("unequal cases", 40, 120, False), ("binary", 80, 80, True)):
        _, _, size = rs_change(rng, 500 // scale, n_a, n_b, 0.8, 0.8, boot, binary)
        truth, cover, _ = rs_change(rng, 500 // scale, n_a, n_b, 0.9, 0.6, boot, binary)
        print(f"R_s change bootstrap, {label} ({n_a} vs {n_b}): size {size:.3f}; "
              f"true change {truth:+.3f} covered {cover:.3f}")
    effect, cover, _ = did(rng, 200 // scale)
    print(f"Difference in differences (Welch), true effect {effect:+.3f}: covered {cover:.3f}")
    _, _, zero_in = did(rng, 100 // scale, training=1.0)
    print(f"Practice effect only: interval includes zero in {zero_in:.3f} of panels")
    print(f"({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
