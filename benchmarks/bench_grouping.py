"""Time group_raters at several panel sizes, and measure the number-of-groups rule (not a test).

Run: python benchmarks/bench_grouping.py [--full] [--audit-panels] [--rule [N]]
``--rule`` measures the number-of-groups rule on N invented 1-7 panels per setting
(default 200; tests/unit/grouping_panels.py builds them): a lone rater with the
reversed policy among 24 and 99, one-policy panels of 25 and 100 (also with each
rater's weights off by SD 0.1), and two groups of 10 + 10. Figures in DEVELOPERS.md.
Invented panels: three planted policies, each rater sees 70% of the cases.
``--null-panels [N] [--null-sizes "30;29,1;15,15"]`` measures the rule's size and power
with 50 and with 20 simulated one-policy panels (the reduced form above 1,000 raters) on
the same N invented panels and draws per setting (figures in DEVELOPERS.md).
``--full`` adds the large sizes and the full-size one-policy check (1,000 panels).
``--audit-panels`` times the panels of benchmarks/bench_audit.py as the audit hands
them over (each rater with own weights judges 100 of 20 x raters cases; 6 cues, one
of them categorical).

Measured on the 2-core machine (seconds, seed 1), before and after the merge
engine kept each row's cheapest merge, computed a pair's cost only when a lower
bound could not rule it out, dropped dead groups' slots and reused its matrices.
Same merges and digits: GroupingResult.to_dict() JSON byte-identical on every
panel below (the one-policy ones checked on every 7th) and on the demo.

    panel                          before    after   ratio
    10 raters x 60 cases             0.07     0.07     1.0
    30 raters x 150 cases            0.52     0.39     1.3
    60 raters x 300 cases            1.74     0.90     1.9
    120 raters x 400 cases           3.48     1.45     2.4
    250 raters x 600 cases          13.30     3.71     3.6
    1,000 one-policy panels          8.05     8.6      0.94  (4 to 15 raters each)
    audit panel, 100 raters          5.90     2.37     2.5
    audit panel, 300 raters         33.4      5.78     5.8
    audit panel, 1,000 raters      459       32.0     14.3

After the keep-apart rule (side loss, whole-tree simulated test; stability resamples
apply the same rule, so each builds its whole tree): 10 raters 0.17 s, 30 raters
0.62 s, 60 raters 1.51 s (was 0.90 s); the large sizes are not re-measured yet.
``--rule 100 --rule-only`` (seed 20261202; figures in DEVELOPERS.md): lone rater kept
apart 96% among 24 and 95% among 99; one policy, one group 95% at 25 and 97% at 100;
10 + 10 found exactly 98%.

In the whole audit (benchmarks/bench_audit.py --full) the grouping step went from
6.8 s to 2.3 s (100 raters), 30 s to 6.4 s (300) and 454 s to 32 s (1,000).
At 1,000 raters most of what is left is the number-of-groups test (4 levels x 50
simulated panels, each grouped from 1,000 raters down), then 20 case resamples.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "unit"))

from grouping_panels import lone_rater_kept_apart, scale_panel

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.panel.grouping import group_raters

#: The earlier rule also required a merge to cost more than this of the whole panel's R^2.
OLD_PANEL_R2_THRESHOLD = 0.01


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


def audit_panels(sizes=(100, 300, 1000)):
    """The whole-audit benchmark's panels, as the audit hands them to group_raters."""
    import tempfile
    from pathlib import Path

    from bench_audit import make_panel

    from calibrate.data.ingest import load_study

    for n_raters in sizes:
        with tempfile.TemporaryDirectory() as tmp:
            table = load_study(make_panel(Path(tmp), n_raters, 20 * n_raters, 100))
        design, phase = table.design, table.phases[0]
        complete = set(np.asarray(design.case_ids)[design.complete_rows()])
        first = phase.first.loc[phase.first["rater"].isin(phase.fit_raters)
                                & phase.first["case"].isin(complete),
                                ["rater", "case", "judgment"]].reset_index(drop=True)
        t0 = time.perf_counter()
        res = group_raters(design, first, rng=1)
        took = time.perf_counter() - t0
        print(f"audit panel {n_raters:>5} raters: {took:7.2f} s, {res.n_groups} groups, "
              f"{res.n_resamples} resamples")


def share_with_interval(hits: int, n: int) -> str:
    """'93.5% (88.9-96.6%)': the share and its 99.9% Clopper-Pearson interval."""
    low = stats.beta.ppf(0.0005, hits, n - hits + 1) if hits else 0.0
    high = stats.beta.ppf(0.9995, hits + 1, n - hits) if hits < n else 1.0
    return f"{hits / n:.1%} ({low:.1%}-{high:.1%})"


def rule_settings():
    """(name, sizes, jitter, what counts as right) of every measured setting."""
    def one_group(result, truth):
        return result.n_groups == 1

    def two_found(result, truth):
        planted = [truth[r] for r in result.raters]
        found = [result.rater_group[r] for r in result.raters]
        return result.n_groups == 2 and stats.contingency.crosstab(planted, found)[1].min() == 0

    return [
        ("lone rater among 24", [24, 1], 0.0, lone_rater_kept_apart),
        ("lone rater among 99", [99, 1], 0.0, lone_rater_kept_apart),
        ("one policy, 25 raters", [25], 0.0, one_group),
        ("one policy, 100 raters", [100], 0.0, one_group),
        ("one policy +-0.1, 25 raters", [25], 0.1, one_group),
        ("one policy +-0.1, 100 raters", [100], 0.1, one_group),
        ("two groups, 10 + 10", [10, 10], 0.0, two_found),
    ]


def measure_rule(n_panels: int, *, parts: bool = True, jitter: bool = True) -> None:
    """Share of panels the rule gets right, per setting, with the parts of the rule apart.

    Also reported: the share right with the simulated test alone (threshold 0), and
    for the lone rater the share of panels where the merge that absorbs them costs
    no more than 0.01 of the whole panel's R^2 (the earlier rule's threshold, which
    then absorbed them whatever the simulated test said).
    """
    print(f"{'setting':<30} {'rule right':>22} {'test alone right':>22} "
          f"{'old threshold absorbs':>22} {'s/panel':>8}")
    for name, sizes, weight_sd, right in rule_settings():
        if weight_sd and not jitter:
            continue
        hits = alone_hits = old_absorbs = 0
        t0 = time.perf_counter()
        for seed in range(n_panels):
            design, first, truth = scale_panel(20261202 + seed, sizes, jitter=weight_sd)
            result = group_raters(design, first, rng=seed, n_resamples=0)
            hits += right(result, truth)
            if parts:
                alone = group_raters(design, first, rng=seed, n_resamples=0, threshold=0.0)
                alone_hits += right(alone, truth)
            if sizes[-1] == 1:
                lone = next(r for r, g in truth.items() if g == 1)
                step = next(m for m in result.merges if lone in m.merged_a + m.merged_b)
                old_absorbs += step.r2_drop <= OLD_PANEL_R2_THRESHOLD
        took = (time.perf_counter() - t0) / n_panels
        old = share_with_interval(old_absorbs, n_panels) if sizes[-1] == 1 else "-"
        alone = share_with_interval(alone_hits, n_panels) if parts else "-"
        print(f"{name:<30} {share_with_interval(hits, n_panels):>22} "
              f"{alone:>22} {old:>22} {took:>8.2f}",
              flush=True)


def measure_null_panels(n_panels: int, counts: tuple[int, ...], sizes_list) -> None:
    """The rule's size and power with each number of simulated one-policy panels.

    Same invented panels and seed for every count: the first n of the simulated panels
    are the same draws whatever the count, so the counts are compared on paired data.
    Size: share of one-policy panels split into two or more groups. Power: the lone
    rater of the reversed policy kept apart, or the two planted halves found exactly.
    """
    def split(result, truth):
        return result.n_groups >= 2

    def two_found(result, truth):
        planted = [truth[r] for r in result.raters]
        found = [result.rater_group[r] for r in result.raters]
        return result.n_groups == 2 and stats.contingency.crosstab(planted, found)[1].min() == 0

    print(f"{'setting':<34} " + " ".join(f"{f'{c} panels':>22}" for c in counts)
          + f" {'both agree':>11} {'s/panel':>8}")
    for sizes in sizes_list:
        if len(sizes) == 1:
            name, right = f"one policy, {sizes[0]} raters: split", split
        elif sizes[-1] == 1:
            name, right = f"lone rater among {sizes[0]}: kept apart", lone_rater_kept_apart
        else:
            name, right = f"two groups {sizes[0]} + {sizes[1]}: found", two_found
        hits = {c: 0 for c in counts}
        agree = 0
        t0 = time.process_time()
        for seed in range(n_panels):
            design, first, truth = scale_panel(20261203 + seed, sizes)
            verdicts = []
            for c in counts:
                result = group_raters(design, first, rng=seed, n_resamples=0, n_null=c,
                                      scale_down=False)
                verdicts.append(bool(right(result, truth)))
                hits[c] += verdicts[-1]
            agree += len(set(verdicts)) == 1
        took = (time.process_time() - t0) / n_panels
        print(f"{name:<34} " + " ".join(f"{share_with_interval(hits[c], n_panels):>22}"
                                        for c in counts)
              + f" {agree / n_panels:>11.1%} {took:>8.2f}", flush=True)


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--full", action="store_true")
    parser.add_argument("--audit-panels", action="store_true")
    parser.add_argument("--rule", type=int, nargs="?", const=200, default=None)
    parser.add_argument("--rule-only", action="store_true",
                        help="with --rule: skip the test-alone rerun and the +-0.1 settings")
    parser.add_argument("--null-panels", type=int, nargs="?", const=100, default=None,
                        help="measure the rule's size and power with 50 and 20 simulated "
                             "panels on N invented panels per setting (default 100)")
    parser.add_argument("--null-sizes", default="100;99,1;50,50",
                        help="with --null-panels: settings, ';' between them")
    args = parser.parse_args()
    if args.null_panels:
        settings = [[int(x) for x in part.split(",")] for part in args.null_sizes.split(";")]
        measure_null_panels(args.null_panels, (50, 20), settings)
        return
    if args.audit_panels:
        audit_panels()
        return
    if args.rule:
        measure_rule(args.rule, parts=not args.rule_only, jitter=not args.rule_only)
        return
    sizes = [(10, 60, 4), (30, 150, 6), (60, 300, 6)]
    if args.full:
        sizes += [(120, 400, 8), (250, 600, 8)]
    print(f"{'raters':>6} {'cases':>6} {'cues':>4} {'seconds':>8} {'groups':>6} "
          f"{'resamples':>9} {'ARI':>5}")
    for n_raters, n_cases, n_cues in sizes:
        design, first, _ = panel(1, n_raters, n_cases, n_cues)
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
