"""Invented panels with planted truths, shared by the unit tests of the panel modules."""

from __future__ import annotations

import numpy as np
import pandas as pd


def simulate_panel(
    *,
    n_raters: int,
    n_cases: int,
    readers: int,
    case_sd: float = 1.0,
    rater_sd: float = 0.5,
    noise_sd: float = 0.5,
    seed: int = 0,
) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """Each case read by ``readers`` raters drawn at random.

    Returns the first-judgment table, the planted case values and the planted
    rater offsets (in sorted rater and case order: names are zero-padded).
    """
    rng = np.random.default_rng(seed)
    truth = rng.normal(0.0, case_sd, n_cases)
    offsets = rng.normal(0.0, rater_sd, n_raters)
    offsets -= offsets.mean()
    chosen = np.argsort(rng.random((n_cases, n_raters)), axis=1)[:, :readers]
    case_idx = np.repeat(np.arange(n_cases), readers)
    rater_idx = chosen.ravel()
    y = truth[case_idx] + offsets[rater_idx] + rng.normal(0.0, noise_sd, case_idx.size)
    frame = pd.DataFrame({
        "rater": [f"r{i:03d}" for i in rater_idx],
        "case": [f"c{i:05d}" for i in case_idx],
        "judgment": y,
    })
    return frame, truth, offsets


def long_from_matrix(ratings: np.ndarray) -> pd.DataFrame:
    """cases x raters matrix (NaN = not read) to a first-judgment table."""
    cases, raters = np.nonzero(np.isfinite(ratings))
    return pd.DataFrame({
        "rater": [f"j{j}" for j in raters],
        "case": [f"t{i:02d}" for i in cases],
        "judgment": ratings[cases, raters],
    })
