"""Size and coverage of the tests behind `calibrate compare` (figures in DEVELOPERS.md).

Run: PYTHONPATH=. python benchmarks/bench_training.py [--quick] [--rs-only] [--size-pairs N]
(--rs-only: part 2 alone; --size-pairs: rater pairs of phases for the size under no change
in part 2, 500 by default)

1. Fisher z on two retest correlations with no true change: share of p < .05 over 2,000
   comparisons (1-7 ratings with a ceiling; 25 vs 40 pairs, and 12 vs 12).
   Williams' T2 (Steiger 1980) on two r_a of one rater who judged the same cases against
   the same outcome in both phases, no true change: share of p < .05 over 2,000.
2. The case-bootstrap interval of a change in R_s: coverage of the true change and size
   under no change over 500 simulated rater pairs of phases (1-7 with ceiling 60 vs 60
   cases, few cases 25 vs 25, unequal 40 vs 120 and 120 vs 40, binary 80 vs 80), on
   Wherry's adjusted R_s as `compare` reads it (each phase's interval on Fisher's z scale,
   combined by Zou's method), with the percentile interval of the difference of draws
   (the method before) and the raw R_s beside for 40 vs 120.
3. Difference in differences (Welch t on per-rater changes in adjusted R_s): coverage of
   the true effect over 200 simulated panels of 7 trained + 7 controls, and how often it
   includes zero when there is only a practice effect shared by both arms (100 panels).
4. The smallest detectable change (2.80 x the SE of the change): a true change of that
   size is detected (p < .05) in about 80% of 500 simulated comparisons, for R_s (60 vs
   60 cases) and for a retest correlation (25 vs 40 pairs, Fisher z).
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

from calibrate.lens.model import dependent_correlation_test  # noqa: E402
from calibrate.training.panel_change import detectable_change, detectable_correlation_change  # noqa: E402
from calibrate.training.phases import _policy_draws, wherry_adjusted_r  # noqa: E402
from calibrate.training.tests_of_change import (bootstrap_difference,  # noqa: E402
                                                correlation_bootstrap_difference, fisher_z_difference,
                                                welch_difference)

P = 4  # cues of the simulated raters (training_simulation.WEIGHTS)


def retest_pair(rng, n, noise):
    true = rng.normal(0, 1, n)
    a = np.clip(np.round(4.8 + 1.2 * (true + rng.normal(0, noise, n))), 1, 7)
    b = np.clip(np.round(4.8 + 1.2 * (true + rng.normal(0, noise, n))), 1, 7)
    return np.corrcoef(a, b)[0, 1]


def dependent_size(rng, runs, n, noise=0.9):
    """One rater judges the same n cases in both phases (a case effect shared: r_kh > 0)
    against the same outcome; no true change in r_a."""
    hits = 0
    for _ in range(runs):
        case = rng.normal(0, 1, n)
        outcome = 0.6 * case + rng.normal(0, 0.8, n)
        a = np.clip(np.round(4.8 + 1.2 * (case + rng.normal(0, noise, n))), 1, 7)
        b = np.clip(np.round(4.8 + 1.2 * (case + rng.normal(0, noise, n))), 1, 7)
        r_a, r_b, r_ab = (np.corrcoef(u, v)[0, 1] for u, v in ((outcome, a), (outcome, b), (a, b)))
        hits += dependent_correlation_test(r_b, r_a, r_ab, n)[2] < 0.05
    return hits / runs


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


def rs_change(rng, pairs, n_a, n_b, noise_a, noise_b, n_boot, binary=False, chunk=50, adjusted=True,
              truth=None, methods=("fisher_z",)):
    """(true change, coverage, share p < .05, median detectable) of the R_s change interval;
    with several methods (``fisher_z`` as compare reads it, ``percentile`` as before), one
    (coverage, share p < .05) per method, each on the same simulated raters."""
    if truth is None:
        truth = population_rs(noise_b, binary=binary) - population_rs(noise_a, binary=binary)
    covered = dict.fromkeys(methods, 0)
    rejected = dict.fromkeys(methods, 0)
    total = dict.fromkeys(methods, 0)
    detectable = []
    for start in range(0, pairs, chunk):
        g = min(chunk, pairs - start)
        da = rs_draws(rng, [noise_a] * g, n_a, n_boot, binary=binary)
        db = rs_draws(rng, [noise_b] * g, n_b, n_boot, binary=binary)
        if adjusted:
            da, db = wherry_adjusted_r(da, n_a, P), wherry_adjusted_r(db, n_b, P)
        detectable += [detectable_change(np.nanstd(d, ddof=1)) for d in db[:, 1:] - da[:, 1:]]
        for method in methods:
            if method == "fisher_z":
                low, high, p = correlation_bootstrap_difference(da[:, 0], da[:, 1:], db[:, 0], db[:, 1:])
            else:
                low, high, p = bootstrap_difference(da[:, 1:], db[:, 1:])
            ok = np.isfinite(low)
            covered[method] += int(((low <= truth) & (truth <= high))[ok].sum())
            rejected[method] += int((p < 0.05)[ok].sum())
            total[method] += int(ok.sum())
    if len(methods) > 1:
        return truth, {m: (covered[m] / total[m], rejected[m] / total[m]) for m in methods}
    m = methods[0]
    return truth, covered[m] / total[m], rejected[m] / total[m], float(np.nanmedian(detectable))


def noise_for_rs(target, binary=False):
    """The rater noise SD whose population R_s is ``target`` (interpolated on the grid)."""
    pop = np.array([population_rs(s, binary=binary, n=60_000) for s in NOISE_GRID])
    return float(np.interp(target, pop[::-1], NOISE_GRID[::-1]))


def detectable_power(rng, runs, n_boot):
    """Does a true change as large as the reported detectable change get detected 80% of
    the time? R_s, 60 vs 60 cases from noise 1.0: the target is moved until the true change
    equals the median detectable change reported under it (three steps), then the share of
    p < .05 is read. Retest r, 25 vs 40 pairs: the detectable rise from the true r."""
    start = population_rs(1.0)
    det = rs_change(rng, runs // 2, 60, 60, 1.0, 1.0, n_boot)[3]
    for _ in range(3):
        target = noise_for_rs(start + det)
        truth = population_rs(target) - start
        _, _, power, det = rs_change(rng, runs, 60, 60, 1.0, target, n_boot, truth=truth)
    rs_line = (f"R_s 60 vs 60 from {start:.2f}: true change {truth:+.3f}, median detectable reported "
               f"{det:.3f}; detected in {power:.3f}")
    noise = 0.65
    r0 = retest_pair(np.random.default_rng(4), 400_000, noise)
    det_r = detectable_correlation_change(r0, np.sqrt(1 / 22 + 1 / 37))
    grid = np.linspace(0.05, 0.65, 121)
    pop = np.array([retest_pair(np.random.default_rng(5), 100_000, s) for s in grid])
    noise_b = float(np.interp(r0 + det_r, pop[::-1], grid[::-1]))
    truth_r = retest_pair(np.random.default_rng(6), 400_000, noise_b) - r0
    hits = sum(fisher_z_difference(retest_pair(rng, 25, noise), 25, retest_pair(rng, 40, noise_b), 40)[1] < 0.05
               for _ in range(runs))
    return rs_line + (f"\nRetest r 25 vs 40 pairs from {r0:.2f}: detectable rise {det_r:.3f}; true change "
                      f"{truth_r:+.3f} detected in {hits / runs:.3f}")


def panel_changes(rng, noise_a, noise_b, n):
    """Per-rater point change in adjusted R_s, as compare reads it (no resamples needed
    for the Welch route)."""
    a, b = (_policy_draws(rows_for(rng, s, n), np.arange(len(s)), None, None, None, 1, rng)[0]["r_adjusted"][:, 0]
            for s in (noise_a, noise_b))
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


def rs_part(rng, scale, size_pairs):
    """Part 2: size and coverage of the change in R_s, the method compare uses (Fisher z
    within each phase, Zou's combination) beside the percentile interval of the difference
    of draws (the method before), both on the same simulated raters."""
    boot = 1000 // scale
    both = ("fisher_z", "percentile")
    for label, n_a, n_b, binary in (("1-7 ceiling", 60, 60, False), ("few cases", 25, 25, False),
                                    ("unequal cases", 40, 120, False), ("unequal cases", 120, 40, False),
                                    ("binary", 80, 80, True)):
        _, null = rs_change(rng, size_pairs, n_a, n_b, 0.8, 0.8, boot, binary, methods=both)
        truth, alt = rs_change(rng, 500 // scale, n_a, n_b, 0.9, 0.6, boot, binary, methods=both)
        line = [f"{m}: size {null[m][1]:.3f} (no change covered {null[m][0]:.3f}); "
                f"true change {truth:+.3f} covered {alt[m][0]:.3f}" for m in both]
        print(f"R_s change (adjusted), {label} ({n_a} vs {n_b}): " + " | ".join(line), flush=True)
    truth, cover, _, _ = rs_change(rng, 500 // scale, 40, 120, 0.9, 0.6, boot, adjusted=False,
                                   methods=("percentile",))
    print(f"R_s change (raw, percentile), 40 vs 120: true change {truth:+.3f} covered {cover:.3f}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--rs-only", action="store_true")
    parser.add_argument("--size-pairs", type=int, default=500)
    args = parser.parse_args()
    rng = np.random.default_rng(20261202)
    scale = 5 if args.quick else 1
    t0 = time.perf_counter()
    if args.rs_only:
        rs_part(rng, scale, args.size_pairs // scale)
        print(f"({time.perf_counter() - t0:.0f} s)")
        return
    for n1, n2 in ((25, 40), (12, 12)):
        print(f"Fisher z size, retest pairs {n1} vs {n2}: {fisher_size(rng, 2000 // scale, n1, n2):.3f}")
    for n in (40, 120):
        print(f"Williams' T2 size, same {n} cases and outcome: {dependent_size(rng, 2000 // scale, n):.3f}")
    rs_part(rng, scale, args.size_pairs // scale)
    boot = 1000 // scale
    print(detectable_power(rng, 500 // scale, boot))
    effect, cover, _ = did(rng, 200 // scale)
    print(f"Difference in differences (Welch), true effect {effect:+.3f}: covered {cover:.3f}")
    _, _, zero_in = did(rng, 100 // scale, training=1.0)
    print(f"Practice effect only: interval includes zero in {zero_in:.3f} of panels")
    print(f"({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
