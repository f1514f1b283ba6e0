"""How often the model-versus-rater verdict names a winner when there is none, and its power.

Each simulated rater judges their own cases (three independent standard-normal cues):
judgment = X b_s + e, criterion = X b_e + u, with corr(e, u) set so that, in the
population, corr(judgment, criterion) equals corr(X b_s, criterion) = 0.70 exactly (the
rater's unmodelled knowledge C makes up precisely for their inconsistency). Under that
null a winner ("model_better" or "rater_better") is a false claim. A second setting
plants a model that is truly better (corr(e, u) = 0, r_a = 0.59 against 0.70).
All raters of a setting run through one batched ``lens_model`` call.

    PYTHONPATH=. python benchmarks/bench_model_vs_rater.py
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
from scipy import stats

from calibrate.data.cues import CueRule, build_cue_design
from calibrate.lens.model import lens_model

B_E = np.array([0.5, 0.4, 0.3])          # var(X b_e) = 0.50, var(u) = 0.50
B_S = np.array([0.4, 0.4, 0.2])          # var(X b_s) = 0.36, var(e) = 0.36
SD_E, SD_U = 0.6, np.sqrt(0.5)


def _corr_e_u_for_equality() -> float:
    cov_sc = float(B_S @ B_E)
    validity = cov_sc / np.sqrt(B_S @ B_S)            # corr(X b_s, c), var(c) = 1
    needed = validity * np.sqrt(B_S @ B_S + SD_E**2) - cov_sc
    return needed / (SD_E * SD_U)


def simulate(rng, n_raters: int, n_cases: int, rho_eu: float):
    X = rng.standard_normal((n_raters * n_cases, 3))
    z1, z2 = rng.standard_normal((2, X.shape[0]))
    e = SD_E * z1
    u = SD_U * (rho_eu * z1 + np.sqrt(1 - rho_eu**2) * z2)
    ids = [f"k{i:06d}" for i in range(X.shape[0])]
    cases = pd.DataFrame(X, columns=["a", "b", "c"], index=pd.Index(ids, name="case"))
    design = build_cue_design(cases, [CueRule(c, "numeric") for c in cases.columns])
    first = pd.DataFrame({"rater": np.repeat([f"r{i:05d}" for i in range(n_raters)], n_cases),
                          "case": ids, "judgment": X @ B_S + e})
    criterion = pd.Series(X @ B_E + u, index=ids)
    return lens_model(design, first, criterion)


def main(n_raters: int = 2000, seed: int = 20260) -> None:
    rng = np.random.default_rng(seed)
    rho = _corr_e_u_for_equality()
    print(f"corr(e, u) for population equality: {rho:.3f}")
    for label, rho_eu in (("null (equal)", rho), ("model truly better", 0.0)):
        for n_cases in (25, 45, 100):
            t0 = time.perf_counter()
            result = simulate(rng, n_raters, n_cases, rho_eu)
            seconds = time.perf_counter() - t0
            verdicts = pd.Series([r.model_vs_rater.verdict for r in result.raters]).value_counts()
            winner = int(verdicts.get("model_better", 0) + verdicts.get("rater_better", 0))
            ci = stats.binomtest(winner, n_raters).proportion_ci(0.999, method="exact")
            shares = ", ".join(f"{k} {v / n_raters:.3f}" for k, v in verdicts.items())
            print(f"{label:20s} n={n_cases:3d}: winner named {winner / n_raters:.3f} "
                  f"(99.9% {ci.low:.3f}-{ci.high:.3f}); {shares}; {seconds:.1f}s")


if __name__ == "__main__":
    main()
