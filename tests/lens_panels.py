"""Simulated raters with a known lens model, for the coverage of the lens intervals.

Each rater reads their own cases (three standard-normal cues). The criterion is
``X b_e + e_e``; the judgment ``centre + X b_s + e_s`` with corr(e_s, e_e) = ``rho``,
optionally rounded and cut to a 1-7 scale (so the scale's ends are used). The true
r_a, G, C and R_e of that process are taken from one very large sample of it
(:func:`true_values`), which holds for rounded scales where no closed form does.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueDesign
from calibrate.lens.model import lens_model

B_E = np.array([0.5, 0.3, 0.0])
B_S = np.array([0.6, 0.1, 0.3])


def _draw(rng, n, *, rho, ordinal, centre):
    X = rng.standard_normal((n, 3))
    e_e = rng.standard_normal(n)
    e_s = rho * e_e + np.sqrt(1 - rho**2) * rng.standard_normal(n)
    crit = X @ B_E + e_e
    judged = centre + X @ B_S + 0.7 * e_s
    if ordinal:
        judged = np.clip(np.round(judged), 1, 7)
    return X, judged, crit


def _design(X, prefix="c"):
    ids = tuple(f"{prefix}{i}" for i in range(len(X)))
    return CueDesign(case_ids=ids, matrix=X, columns=("a", "b", "d"), cue_of_column=("a", "b", "d"),
                     cues=("a", "b", "d"), kinds=dict.fromkeys("abd", "numeric"), reference_levels={})


def simulated_raters(rng, n_raters, n_cases, *, rho=0.3, ordinal=False, centre=4.0):
    """(design, first, criterion) with every rater on their own ``n_cases`` cases."""
    X, judged, crit = _draw(rng, n_raters * n_cases, rho=rho, ordinal=ordinal, centre=centre)
    design = _design(X)
    first = pd.DataFrame({"rater": np.repeat([f"r{i:04d}" for i in range(n_raters)], n_cases),
                          "case": list(design.case_ids), "judgment": judged})
    return design, first, pd.Series(crit, index=list(design.case_ids))


def true_values(*, rho=0.3, ordinal=False, centre=4.0, n=400_000, seed=99) -> dict[str, float]:
    """r_a, G, C and R_e of the process, from one sample of ``n`` cases (error about 1/sqrt(n))."""
    X, judged, crit = _draw(np.random.default_rng(seed), n, rho=rho, ordinal=ordinal, centre=centre)
    design = _design(X)
    first = pd.DataFrame({"rater": "all", "case": list(design.case_ids), "judgment": judged})
    one = lens_model(design, first, pd.Series(crit, index=list(design.case_ids)), n_boot=0).raters[0]
    return {"r_a": one.r_a, "g": one.g, "c": one.c, "r_e": one.r_e}


def coverage(rng, n_raters, n_cases, *, n_boot=1000, **process) -> dict[str, tuple[int, int]]:
    """Per figure: (intervals that contain the true value, intervals computed)."""
    truth = true_values(**process)
    design, first, crit = simulated_raters(rng, n_raters, n_cases, **process)
    result = lens_model(design, first, crit, n_boot=n_boot, rng=rng)
    out = {}
    for k, value in truth.items():
        low = np.array([getattr(r, f"{k}_ci_low") for r in result.raters])
        high = np.array([getattr(r, f"{k}_ci_high") for r in result.raters])
        ok = np.isfinite(low) & np.isfinite(high)
        out[k] = (int(((low <= value) & (value <= high) & ok).sum()), int(ok.sum()))
    return out
