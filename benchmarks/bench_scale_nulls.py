"""Size and power of the curvature test whose null respects a rounded 1-7 scale.

Linear raters: latent judgment = mean + X b + noise (three standard-normal cues,
b = (.5, .4, .3), noise SD 1, 40 cases each), rounded and clipped to 1..7; the share
of raters with p < .05 is the test's size. Judged by whether its 99.9% binomial
interval overlaps the 4-6% band. Power: the same raters with a planted curve,
latent + 0.25 * (X b)^2. The classical RESET F p-value is printed beside it.

    PYTHONPATH=. python benchmarks/bench_scale_nulls.py
"""

from __future__ import annotations

import time

import numpy as np
from scipy import stats

from calibrate.policy import diagnostics as dg
from calibrate.policy.linalg import grouped_sscp, ols_from_sscp

WEIGHTS = np.array([0.5, 0.4, 0.3])


def one_setting(rng, *, n_raters, n_cases, mean, curve, noise=1.0, n_sim=199, block=250):
    hits = classical_hits = 0
    for start in range(0, n_raters, block):
        G = min(block, n_raters - start)
        X = rng.standard_normal((G * n_cases, 3))
        groups = np.repeat(np.arange(G), n_cases)
        signal = X @ WEIGHTS
        latent = mean + signal + curve * signal**2 + noise * rng.standard_normal(G * n_cases)
        y = np.clip(np.round(latent), 1, 7)
        _, p = dg.scale_reset_p(X, y, groups, G, scale_min=1, scale_max=7, n_sim=n_sim, rng=rng)
        fit = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, G), np.arange(3), 3)
        fitted = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
        classical = dg.reset_test(X, y, fitted, groups, G, fit).p_value
        hits += int((p < 0.05).sum())
        classical_hits += int((classical < 0.05).sum())
    return hits, classical_hits


def main(n_raters: int = 1000, seed: int = 2026, n_cases: int = 40, noise: float = 1.0):
    rng = np.random.default_rng(seed)
    print(f"{n_raters} raters x {n_cases} cases, noise SD {noise}")
    for label, mean, curve in (("linear, mean 2.5", 2.5, 0.0), ("linear, mean 4.0", 4.0, 0.0),
                               ("linear, mean 5.5", 5.5, 0.0), ("curve 0.25, mean 4.0", 4.0, 0.25)):
        t0 = time.perf_counter()
        hits, classical = one_setting(rng, n_raters=n_raters, n_cases=n_cases, mean=mean, curve=curve,
                                     noise=noise)
        ci = stats.binomtest(hits, n_raters).proportion_ci(0.999, method="exact")
        print(f"{label:22s}: p < .05 for {hits / n_raters:.3f} (99.9% {ci.low:.3f}-{ci.high:.3f}); "
              f"classical RESET {classical / n_raters:.3f}; {time.perf_counter() - t0:.0f}s", flush=True)


if __name__ == "__main__":
    main()
    main(n_cases=100, noise=0.5)
