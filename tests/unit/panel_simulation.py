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


def icc_truth(case_var: float, rater_var: float, residual_var: float, k: float) -> dict[str, float]:
    """Population ICC forms of the crossed random-effects model (McGraw & Wong 1996, Table 4).

    With raters drawn at random, the one-way forms equal the absolute-agreement ones.
    """
    a1 = case_var / (case_var + rater_var + residual_var)
    ak = case_var / (case_var + (rater_var + residual_var) / k)
    return {"i1": a1, "a1": a1, "c1": case_var / (case_var + residual_var),
            "ik": ak, "ak": ak, "ck": case_var / (case_var + residual_var / k)}


def ordinal_alpha_truth(case_var: float, rater_var: float, residual_var: float, *, mean: float,
                        low: int = 1, high: int = 7, n_pairs: int = 2_000_000, seed: int = 0) -> float:
    """Ordinal alpha of the rounded crossed model in the population, from ``n_pairs`` cases
    each read by two independently drawn raters (no rater repeats, as in an endless panel)."""
    from calibrate.agreement.icc import krippendorff_alpha

    rng = np.random.default_rng(seed)
    case = rng.normal(0.0, np.sqrt(case_var), n_pairs)
    y = (mean + case[:, None] + rng.normal(0.0, np.sqrt(rater_var), (n_pairs, 2))
         + rng.normal(0.0, np.sqrt(residual_var), (n_pairs, 2)))
    y = np.clip(np.round(y), low, high)
    units = np.repeat(np.arange(n_pairs), 2)
    return krippendorff_alpha(units, y.ravel(), level="ordinal").estimate
