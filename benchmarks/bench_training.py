"""Size and coverage of the tests behind `calibrate compare` (figures in DEVELOPERS.md).

Run: PYTHONPATH=. python benchmarks/bench_training.py [--quick] [--rs-only] [--effect-only]
[--size-pairs N] (--rs-only: part 2 alone; --effect-only: part 3 alone; --size-pairs: rater
pairs of phases for the size under no change in part 2, 500 by default)

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
3. The training effect on R_s, over 2,000 simulated panels of 7 trained + 7 controls per
   design (1-7 with ceiling 60 vs 60 cases, few cases 25 vs 25, unequal 40 vs 120 and
   120 vs 40, binary 80 vs 80): the difference in differences (Welch t on the per-rater
   changes in adjusted R_s), the ANCOVA on raw R_s (compare before) and the ANCOVA on
   adjusted R_s (compare now), on the same panels: coverage of the true effect, how often
   the interval excludes zero when only a practice effect is shared by both arms, and the
   same when the trained arm is the 7 raters who started lowest (regression to the mean).
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

from training_simulation import NOISE_GRID, population_rs, rows_for, rs_draws  # noqa: E402

from calibrate.lens.model import dependent_correlation_test  # noqa: E402
from calibrate.training.panel_change import detectable_change, detectable_correlation_change  # noqa: E402
from calibrate.training.phases import _policy_draws, wherry_adjusted_r  # noqa: E402
from calibrate.training.tests_of_change import (ancova_difference, bootstrap_difference,  # noqa: E402
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


def phase_rs(rng, noises, n, binary=False):
    """(raw R_s, Wherry-adjusted R_s) of raters with these noise SDs on n cases each."""
    out = _policy_draws(rows_for(rng, noises, n, binary=binary), np.arange(len(noises)), None, None, None,
                        1, rng)[0]
    return out["r"][:, 0], out["r_adjusted"][:, 0]


ARM_DESIGNS = (("1-7 ceiling", 60, 60, False), ("few cases", 25, 25, False),
               ("unequal cases", 40, 120, False), ("unequal cases", 120, 40, False),
               ("binary", 80, 80, True))


def did(rng, panels, n_a, n_b, binary=False, *, practice=0.85, training=0.7, per_arm=7,
        trained_started_worst=False):
    """Difference in differences over simulated panels of ``per_arm`` trained + ``per_arm``
    controls (noise SD uniform on 0.4-1.2; phase b multiplies it by ``practice`` for all and by
    ``training`` too for the trained): Welch's t on the changes in adjusted R_s (as compare
    reads them), the ANCOVA on raw R_s (compare before) and the ANCOVA on adjusted R_s (compare
    now), each: (coverage of the true effect, share of intervals excluding zero, mean
    estimate). ``trained_started_worst``: the trained arm is the ``per_arm`` raters of the
    panel with the lowest R_s in phase a (regression to the mean; only practice then).
    Returns (true effect, {method: (coverage, excludes zero, mean estimate)})."""
    pop = np.array([population_rs(s, binary=binary, n=60_000) for s in NOISE_GRID])

    def true_rs(s):
        return np.interp(s, NOISE_GRID, pop)
    # Population mean changes over the rater distribution; the truth is zero when the arms
    # are chosen by their start (every rater then changes by practice alone).
    grid = np.linspace(0.4, 1.2, 401)
    effect = 0.0 if trained_started_worst else (
        np.mean(true_rs(grid * practice * training) - true_rs(grid))
        - np.mean(true_rs(grid * practice) - true_rs(grid)))
    k = 2 * per_arm
    noise = rng.uniform(0.4, 1.2, (panels, k))
    raw_a, adj_a = (v.reshape(panels, k) for v in phase_rs(rng, noise.ravel(), n_a, binary))
    if trained_started_worst:
        trained = np.zeros((panels, k), dtype=bool)
        np.put_along_axis(trained, np.argsort(raw_a, axis=1)[:, :per_arm], True, axis=1)
        factor = np.full((panels, k), practice)
    else:
        trained = np.arange(k)[None, :] < per_arm
        trained = np.broadcast_to(trained, (panels, k))
        factor = np.where(trained, practice * training, practice)
    raw_b, adj_b = (v.reshape(panels, k) for v in phase_rs(rng, (noise * factor).ravel(), n_b, binary))
    hits = {m: [0, 0, 0.0, 0] for m in ("Welch", "ANCOVA raw", "ANCOVA adjusted")}
    for i in range(panels):
        t, c = trained[i], ~trained[i]
        arm = t.astype(float)
        change = adj_b[i] - adj_a[i]
        for m, out in (("Welch", welch_difference(change[t], change[c])),
                       ("ANCOVA raw", ancova_difference(raw_a[i], raw_b[i], arm)),
                       ("ANCOVA adjusted", ancova_difference(adj_a[i], adj_b[i], arm))):
            if not np.isfinite(out["ci_low"]):
                continue
            h = hits[m]
            h[0] += out["ci_low"] <= effect <= out["ci_high"]
            h[1] += not (out["ci_low"] <= 0 <= out["ci_high"])
            h[2] += out["estimate"]
            h[3] += 1
    return effect, {m: (h[0] / h[3], h[1] / h[3], h[2] / h[3]) for m, h in hits.items()}


def did_part(rng, panels):
    """Part 3: the training effect's Welch and ANCOVA intervals on the same simulated panels,
    for each design: coverage of a true effect, excluding zero under practice alone (size),
    and size when the trained are the raters who started worst (regression to the mean)."""
    for label, n_a, n_b, binary in ARM_DESIGNS:
        effect, alt = did(rng, panels, n_a, n_b, binary)
        _, null = did(rng, panels, n_a, n_b, binary, training=1.0)
        _, worst = did(rng, panels, n_a, n_b, binary, trained_started_worst=True)
        line = [f"{m}: covered {alt[m][0]:.3f} (mean {alt[m][2]:+.3f}), size {null[m][1]:.3f}, "
                f"started worst {worst[m][1]:.3f} (mean {worst[m][2]:+.3f})" for m in alt]
        print(f"Training effect, {label} ({n_a} vs {n_b}), true {effect:+.3f}: " + " | ".join(line), flush=True)


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
    parser.add_argument("--effect-only", action="store_true")
    parser.add_argument("--size-pairs", type=int, default=500)
    args = parser.parse_args()
    rng = np.random.default_rng(20261202)
    scale = 5 if args.quick else 1
    t0 = time.perf_counter()
    if args.effect_only:
        did_part(rng, 2000 // scale)
        print(f"({time.perf_counter() - t0:.0f} s)")
        return
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
    did_part(rng, 2000 // scale)
    print(f"({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
