"""Coverage of the figures made from every presentation of a case shown many times.

Simulated experiments (tests/unit/presentation_simulation.py): panels of 29 raters,
3 cues, 14 cases, each case shown 10 times; 7 panels = 203 raters per setting. Counted:

- the policy weights' 95% intervals as calibrate makes them with
  ``[judgment] repeats = "all"`` (OLS of each case's mean judgment on the cues,
  ``fit_policies``), against the true weights;
- for comparison, OLS on all 140 presentations with statsmodels' cluster-robust
  covariance by case (``cov_type="cluster"``, CR1 with its small-sample factor and
  t(G - 1) reference), and with the plain OLS covariance that counts presentations;
- the consistency intervals (``presentation_consistency``): ICC(C,1) and ICC(A,1)
  F-based (the ICC(C,1) one is the interval the audit shows beside the mean pairwise r),
  and a BCa bootstrap over cases of the mean pairwise r itself, against the population
  correlation of two showings;
- the size of the ``low_retest`` test over showings (one-sided F test of ICC(C,1) >= .70
  at the per-rater 2.5%) on raters whose population consistency is exactly .70;
- the size of the two drift tests at 5% (unadjusted) on every judgment in reading order
  (each round of showings in a fresh random order; no drift planted).

The weights are judged on the panel's 14 cases (fixed cues, as regression conditions on
them); the consistency figures on raters with cases of their own (independent trials).
Each hit rate has its 99.9% Clopper-Pearson interval. ~10 s on 2 cores (``--panels 40``
about a minute).

    PYTHONPATH=. python benchmarks/bench_presentations.py [--panels 7] [--rounded]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import beta

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "unit"))
from presentation_simulation import (CUES, TRUE_WEIGHTS, experiment, noise_for,  # noqa: E402
                                     population_consistency)

from calibrate.consistency.presentations import low_consistency_p, presentation_consistency  # noqa: E402
from calibrate.consistency.reading_order import drift  # noqa: E402
from calibrate.data.cues import CueRule, build_cue_design  # noqa: E402
from calibrate.policy.fit import fit_policies  # noqa: E402


def clopper_pearson(hits: int, n: int, level: float = 0.999) -> tuple[float, float]:
    a = (1 - level) / 2
    low = beta.ppf(a, hits, n - hits + 1) if hits > 0 else 0.0
    high = beta.ppf(1 - a, hits + 1, n - hits) if hits < n else 1.0
    return float(low), float(high)


def policy_hits_on_means(judgments: pd.DataFrame, cases: pd.DataFrame, scale: str) -> np.ndarray:
    """Hits of calibrate's own intervals: the policy fitted to each case's mean judgment."""
    means = judgments.groupby(["rater", "case"], as_index=False)["judgment"].mean()
    design = build_cue_design(cases, [CueRule(c) for c in CUES])
    fitted = fit_policies(design, means, scale="continuous", n_boot=0)
    return np.array([[p.ci_low[c] <= w <= p.ci_high[c] for c, w in zip(CUES, TRUE_WEIGHTS)]
                     for p in fitted.raters])


def policy_hits_statsmodels(judgments: pd.DataFrame, cases: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Hits of OLS on every presentation: cluster-robust by case (CR1), and plain OLS."""
    import statsmodels.api as sm

    cluster, plain = [], []
    for _, sub in judgments.groupby("rater", sort=True):
        X = sm.add_constant(cases.loc[sub["case"], list(CUES)].to_numpy())
        groups = pd.factorize(sub["case"])[0]
        fit_c = sm.OLS(sub["judgment"].to_numpy(), X).fit(cov_type="cluster", cov_kwds={"groups": groups},
                                                          use_t=True)
        fit_p = sm.OLS(sub["judgment"].to_numpy(), X).fit()
        for fit, out in ((fit_c, cluster), (fit_p, plain)):
            ci = fit.conf_int(0.05)[1:]
            out.append((ci[:, 0] <= TRUE_WEIGHTS) & (TRUE_WEIGHTS <= ci[:, 1]))
    return np.array(cluster), np.array(plain)


def run(n_panels: int, rounded: bool, seed: int = 16) -> dict:
    rng = np.random.default_rng(seed)
    hits: dict[str, list] = {k: [] for k in ("means", "cluster_cr1", "plain_ols", "icc_c1", "icc_a1",
                                              "mean_r_bca")}
    rho = population_consistency()
    t0 = time.perf_counter()
    for _ in range(n_panels):
        judgments, cases = experiment(rng, rounded=rounded)
        hits["means"].append(policy_hits_on_means(judgments, cases, "continuous"))
        cl, pl = policy_hits_statsmodels(judgments, cases)
        hits["cluster_cr1"].append(cl)
        hits["plain_ols"].append(pl)
        if not rounded:
            # consistency is defined over random cases: each rater gets cases of their own
            res = presentation_consistency(experiment(rng, own_cases=True)[0], rng=rng, n_boot=1999)
            for name, lo, hi in (("icc_c1", "icc_c1_ci_low", "icc_c1_ci_high"),
                                 ("icc_a1", "icc_a1_ci_low", "icc_a1_ci_high"),
                                 ("mean_r_bca", "mean_r_ci_low", "mean_r_ci_high")):
                hits[name].append(np.array([getattr(r, lo) <= rho <= getattr(r, hi) for r in res.values()]))
    if not rounded:
        hits["low_retest_size"] = []
        for _ in range(n_panels):
            judgments, _cases = experiment(rng, noise_sd=noise_for(0.70), own_cases=True)
            res = presentation_consistency(judgments, rng=rng, n_boot=0)
            hits["low_retest_size"].append(np.array([
                low_consistency_p(r.f_c1, r.n_cases, r.n_presentations) < 0.025 for r in res.values()]))
    hits["drift_leniency_size"], hits["drift_consistency_size"] = [], []
    for _ in range(n_panels):
        judgments, cases = experiment(rng, rounded=rounded)
        design = build_cue_design(cases, [CueRule(c) for c in CUES])
        ordered = judgments.sort_values(["rater", "sequence"]).assign(position=lambda d: d["sequence"] - 1)
        res = drift(design, ordered[["rater", "case", "judgment", "position"]], rng=rng)
        hits["drift_leniency_size"].append(np.array([r.p_value < 0.05 for r in res.raters]))
        hits["drift_consistency_size"].append(np.array([r.consistency_p_value < 0.05 for r in res.raters]))
    out = {"seconds": time.perf_counter() - t0}
    for name, parts in hits.items():
        if parts:
            flat = np.concatenate([np.ravel(p) for p in parts])
            out[name] = (float(flat.mean()), int(flat.sum()), len(flat), *clopper_pearson(int(flat.sum()), len(flat)))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--panels", type=int, default=7)
    args = parser.parse_args()
    for rounded in (False, True):
        res = run(args.panels, rounded)
        print(f"{'1-7 rounded and clipped' if rounded else 'continuous'}: {args.panels} panels x 29 raters "
              f"({res.pop('seconds'):.1f} s)")
        for name, (rate, hit, n, lo, hi) in res.items():
            print(f"  {name:24s} {rate:.3f}  ({hit}/{n}; 99.9% CP {lo:.3f}-{hi:.3f})")


if __name__ == "__main__":
    main()
