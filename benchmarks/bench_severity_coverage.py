"""Coverage of the 95% severity-offset intervals when raters differ in how noisy they are.

Each panel: 14 raters with planted offsets (normal, SD 0.5, centred) and residual SDs
spread evenly from 0.3 to 1.2, 350 cases (case SD 1) each read by 4 raters at random
(about 100 cases a rater), and a small design of 60 cases x 3 readers (about 13).
Coverage is the share of (panel, rater) intervals holding the planted offset, over all
raters and for the noisiest and the least noisy rater, for the HC3 interval the audit
uses (HC2), HC3, and the pooled-variance one it replaced. ``--ordinal`` rounds the judgments
(shifted to a mean of 4) to 1..7; the planted offset then is the mean shift of the
rounded scores, estimated once from a large panel. A figure passes when its 99.9%
binomial interval overlaps 93-97%.

    PYTHONPATH=. python benchmarks/bench_severity_coverage.py [--panels 400]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from scipy import stats

from calibrate.agreement.offsets import severity

N_RATERS, N_CASES, READERS = 14, 350, 4
NOISE_SD = np.linspace(0.3, 1.2, N_RATERS)


def simulate(rng, offsets, n_cases=N_CASES, readers=READERS):
    truth = rng.normal(0.0, 1.0, n_cases)
    chosen = np.argsort(rng.random((n_cases, N_RATERS)), axis=1)[:, :readers]
    ci = np.repeat(np.arange(n_cases), readers)
    ri = chosen.ravel()
    y = truth[ci] + offsets[ri] + rng.normal(0.0, 1.0, ci.size) * NOISE_SD[ri]
    return pd.DataFrame({"rater": [f"r{i:02d}" for i in ri], "case": [f"c{i:05d}" for i in ci],
                         "judgment": y})


def band(hits, n, level=0.999):
    a = 1 - level
    lo = stats.beta.ppf(a / 2, hits, n - hits + 1) if hits > 0 else 0.0
    hi = stats.beta.ppf(1 - a / 2, hits + 1, n - hits) if hits < n else 1.0
    return lo, hi


def coverage(n_panels: int, seed: int, ordinal: bool, n_cases: int = N_CASES,
             readers: int = READERS) -> dict[str, np.ndarray]:
    """Hits per rater, (14,) each, for 'HC3' and 'pooled'."""
    rng = np.random.default_rng(seed)
    offsets = rng.normal(0.0, 0.5, N_RATERS)
    offsets -= offsets.mean()
    target = offsets
    if ordinal:   # the planted offset of rounded scores, from one large panel
        big = simulate(np.random.default_rng(seed + 1), offsets, n_cases=200_000)
        big["judgment"] = np.clip(np.round(big["judgment"] + 4.0), 1, 7)
        target = np.array([r.estimate for r in severity(big, scale="ordinal", scale_min=1,
                                                        scale_max=7).raters])
    hits = {"HC2": np.zeros(N_RATERS), "HC3": np.zeros(N_RATERS), "pooled": np.zeros(N_RATERS)}
    for _ in range(n_panels):
        first = simulate(rng, offsets, n_cases, readers)
        if ordinal:
            first["judgment"] = np.clip(np.round(first["judgment"] + 4.0), 1, 7)
        kw = dict(scale="ordinal" if ordinal else "continuous", scale_min=1 if ordinal else -5,
                  scale_max=7 if ordinal else 5)
        res = severity(first, robust_form="HC2", **kw)
        hc3 = severity(first, robust_form="HC3", **kw)
        est = np.array([r.estimate for r in res.raters])
        for name, se in (("HC2", [r.se for r in res.raters]), ("HC3", [r.se for r in hc3.raters]),
                         ("pooled", [r.se_pooled for r in res.raters])):
            half = 1.959964 * np.asarray(se)
            hits[name] += np.abs(est - target) <= half
    return hits


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--panels", type=int, default=400)
    parser.add_argument("--seed", type=int, default=12)
    args = parser.parse_args()
    for ordinal, n_cases, readers in ((False, N_CASES, READERS), (True, N_CASES, READERS),
                                      (False, 60, 3), (True, 60, 3)):
        start = time.perf_counter()
        hits = coverage(args.panels, args.seed, ordinal, n_cases, readers)
        print(f"{'1-7 scale' if ordinal else 'continuous'}, {n_cases} cases x {readers} readers: "
              f"{args.panels} panels, {time.perf_counter() - start:.0f} s")
        for name, h in hits.items():
            cells = []
            for label, count, n in (("all raters", h.sum(), h.size * args.panels),
                                    (f"noisiest (SD {NOISE_SD[-1]:.1f})", h[-1], args.panels),
                                    (f"least noisy (SD {NOISE_SD[0]:.1f})", h[0], args.panels)):
                lo, hi = band(int(count), n)
                cells.append(f"{label} {count / n:.1%} ({lo:.1%}-{hi:.1%})")
            print(f"  {name:<7} " + "; ".join(cells))


if __name__ == "__main__":
    main()
