"""Simulated raters in two phases for the checks of `compare` (tests and benchmarks share it).

Ratings on a 1-7 scale with a ceiling: latent = cues . weights + noise, then rounded and
clipped; most raters sit high on the scale, so 7 is hit often. Binary judgments cut the
latent at zero.
"""

from __future__ import annotations

import numpy as np

from calibrate.data.rows import JudgmentRows
from calibrate.training.phases import _policy_draws

WEIGHTS = np.array([0.8, 0.5, 0.3, 0.0])
NOISE_GRID = np.linspace(0.2, 2.0, 37)


def judgments(rng, X, noise, *, binary=False):
    latent = X @ WEIGHTS + rng.normal(0, 1, X.shape[0]) * noise
    if binary:
        return (latent > 0).astype(float)
    return np.clip(np.round(5.0 + 1.3 * latent), 1, 7)


def rows_for(rng, noises, n, *, binary=False) -> JudgmentRows:
    """One phase: rater g judges n cases of its own with noise SD noises[g]."""
    G = len(noises)
    X = rng.normal(size=(G * n, WEIGHTS.size))
    y = np.concatenate([judgments(rng, X[g * n:(g + 1) * n], noises[g], binary=binary) for g in range(G)])
    return JudgmentRows(raters=tuple(f"r{g}" for g in range(G)), group=np.repeat(np.arange(G), n),
                        design_row=np.arange(G * n), X=X, y=y, n_dropped=0)


def population_rs(noise, *, binary=False, n=200_000, seed=0) -> float:
    """R_s of a rater on an unlimited number of cases (one very large sample)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, WEIGHTS.size))
    y = judgments(rng, X, noise, binary=binary)
    fitted = np.column_stack([np.ones(n), X]) @ np.linalg.lstsq(np.column_stack([np.ones(n), X]), y, rcond=None)[0]
    return float(np.corrcoef(fitted, y)[0, 1])


def rs_draws(rng, noises, n, n_boot, *, binary=False):
    rows = rows_for(rng, noises, n, binary=binary)
    out, _ = _policy_draws(rows, np.arange(len(noises)), None, None, None, n_boot, rng)
    return out["r"]
