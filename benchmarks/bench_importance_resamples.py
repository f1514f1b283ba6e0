"""Coverage of the importance-share intervals, per cue strength and on which side they miss.

Planted truth: five independent standard-normal cues with weights .5/.4/.3/.2/.1 and a
latent R_s of .80, read either as continuous judgments or rounded onto 1-7 with a ceiling
(mean 5.5, SD 1.2, so about one judgment in five is a 7). A cue's true share is its
population general dominance weight over R^2, computed from 400,000 draws of the same
model (for continuous judgments this is beta_j^2 / beta'beta: .45/.29/.16/.07/.02).
Raters come in blocks of 5 reading the same cases, so the figures average over case sets.

``library`` runs the intervals the audit reports (``case_bootstrap_intervals``: percentile
intervals of the shares, with all resamples and with the first 250 as large panels use);
``compare`` computes the candidate intervals from the same resamples (BCa with the
jackknife acceleration, the percentile interval, the percentile interval shifted by the
bootstrap's bias estimate, the basic interval on the logit scale, and the percentile
interval of a debiased share built from each subset's adjusted R^2).

    PYTHONPATH=. python benchmarks/bench_importance_resamples.py library [n_raters] [cases...]
    PYTHONPATH=. python benchmarks/bench_importance_resamples.py compare [n_raters] [cases...]
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy import special

from calibrate.policy.importance import (
    _dominance_by_sweep, cue_importance, dominance_matrix, importance_shares,
    r2_from_correlations,
)
from calibrate.policy.resampling import (
    _column_quantiles, _draw_counts, bca_interval, case_bootstrap_intervals,
    percentile_interval, weighted_correlations,
)

BETA = np.array([0.5, 0.4, 0.3, 0.2, 0.1])
STRENGTH = ["strong", "strong", "middling", "weak", "near-zero"]
TRUE_R = 0.8
RATERS_PER_BLOCK = 5
CUE_GROUPS = [[j] for j in range(BETA.size)]
NOISE_SD = float(np.sqrt(BETA @ BETA * (1 / TRUE_R**2 - 1)))


def judgments(X: np.ndarray, rng: np.random.Generator, n_raters: int, scale: str) -> np.ndarray:
    latent = X @ BETA[:, None] + NOISE_SD * rng.normal(size=(X.shape[0], n_raters))
    if scale == "continuous":
        return latent
    return np.clip(np.rint(5.5 + 1.2 * latent / np.sqrt(BETA @ BETA + NOISE_SD**2)), 1, 7)


def true_shares(scale: str) -> np.ndarray:
    rng = np.random.default_rng(99)
    X = rng.normal(size=(400_000, BETA.size))
    corr = np.corrcoef(np.column_stack([X, judgments(X, rng, 1, scale)]), rowvar=False)
    k = BETA.size
    imp, _ = cue_importance(corr[None, :k, :k], corr[None, :k, k:], CUE_GROUPS)
    return importance_shares(imp, r2_from_correlations(corr[None, :k, :k], corr[None, :k, k:]))[0, 0]


def full_sample(X, Y):
    cxx, cxy, _ = weighted_correlations(X, Y, np.ones((1, X.shape[0])))
    r2 = r2_from_correlations(cxx, cxy)[0]
    imp, _ = cue_importance(cxx, cxy, CUE_GROUPS)
    return r2, imp[0]


def panel(scale: str, n_raters: int, n_cases: int, seed: int):
    """Rows sorted by rater: X, y, groups, case_row, full-sample R^2 and importance."""
    rng = np.random.default_rng(seed)
    Xs, ys, rows, r2s, imps = [], [], [], [], []
    for b in range(n_raters // RATERS_PER_BLOCK):
        X = rng.normal(size=(n_cases, BETA.size))
        Y = judgments(X, rng, RATERS_PER_BLOCK, scale)
        r2, imp = full_sample(X, Y)
        r2s.append(r2)
        imps.append(imp)
        for r in range(RATERS_PER_BLOCK):
            Xs.append(X)
            ys.append(Y[:, r])
            rows.append(b * n_cases + np.arange(n_cases))
    G = len(ys)
    groups = np.repeat(np.arange(G), n_cases)
    return (np.concatenate(Xs), np.concatenate(ys), groups, np.concatenate(rows),
            np.concatenate(r2s), np.concatenate(imps))


def misses(lo: np.ndarray, hi: np.ndarray, truth: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per cue: share of intervals wholly above the truth, and wholly below it."""
    return (lo > truth).mean(axis=0), (hi < truth).mean(axis=0)


def report(label: str, lo, hi, truth) -> None:
    above, below = misses(lo, hi, truth)
    cover = 1 - above - below
    print(f"  {label:16s} cover " + " ".join(f"{c:.3f}" for c in cover)
          + " | above " + " ".join(f"{c:.3f}" for c in above)
          + " | below " + " ".join(f"{c:.3f}" for c in below)
          + f" | width {np.nanmean(hi - lo):.3f}", flush=True)


def library(scale: str, n_raters: int, n_cases: int) -> None:
    truth = true_shares(scale)
    X, y, groups, case_row, r2, imp = panel(scale, n_raters, n_cases, seed=1)
    fitted = np.ones(n_raters, dtype=bool)
    print(f"\n{scale}, {n_raters} raters x {n_cases} cases; true shares {np.round(truth, 3)}")
    for n_imp in (None, 250):
        start = time.process_time()
        out = case_bootstrap_intervals(X, y, groups, fitted, case_row, CUE_GROUPS, n_boot=1000,
                                       rng=np.random.default_rng(2), alpha=0.05,
                                       method="dominance", r2=r2, importance_r2=imp,
                                       n_boot_importance=n_imp)
        seconds = time.process_time() - start
        report(f"{n_imp or 1000} resamples", out.share_low, out.share_high, truth)
        print(f"  ({seconds:.1f} s CPU)")


def adjusted_dominance(n: int) -> tuple[np.ndarray, np.ndarray]:
    """The dominance map applied to each subset's adjusted R^2, 1 - (1 - R^2)(n-1)/(n-s-1)."""
    weights = dominance_matrix(BETA.size)
    size = np.array([m.bit_count() for m in range(2**BETA.size)])
    scale = (n - 1) / (n - size - 1)
    return weights * scale[:, None], (1 - scale) @ weights


def compare(scale: str, n_raters: int, n_cases: int, n_boot: int = 1000) -> None:
    truth = true_shares(scale)
    rng = np.random.default_rng(1)
    k = BETA.size
    weights, offset = adjusted_dominance(n_cases)
    found: dict[str, list] = {}
    for _ in range(n_raters // RATERS_PER_BLOCK):
        X = rng.normal(size=(n_cases, k))
        Y = judgments(X, rng, RATERS_PER_BLOCK, scale)
        cxx, cxy, _ = weighted_correlations(X, Y, _draw_counts(rng, n_cases, n_boot))
        r2 = np.clip(r2_from_correlations(cxx, cxy), 0, 1)
        imp, _ = cue_importance(cxx, cxy, CUE_GROUPS, solver="sweep")
        shares = importance_shares(imp, r2)
        full_r2, full_imp = full_sample(X, Y)
        estimate = importance_shares(full_imp, full_r2).ravel()
        boot, jack = shares[:n_boot].reshape(n_boot, -1), shares[n_boot:].reshape(n_cases, -1)
        adjusted = _dominance_by_sweep(cxx, cxy, CUE_GROUPS, weights) + offset
        adjusted /= adjusted.sum(axis=-1, keepdims=True)
        each = np.full(estimate.size, n_boot)
        quantile = lambda values, level: _column_quantiles(values, each, np.full(estimate.size, level))
        bias = boot.mean(axis=0) - estimate
        logit = lambda v: special.logit(np.clip(v, 1e-6, 1 - 1e-6))
        intervals = {
            "BCa": bca_interval(estimate, boot, jack),
            "percentile": percentile_interval(estimate, boot),
            "pct - bias": (quantile(boot, .025) - bias, quantile(boot, .975) - bias),
            "basic, logit": (special.expit(2 * logit(estimate) - quantile(logit(boot), .975)),
                             special.expit(2 * logit(estimate) - quantile(logit(boot), .025))),
            "pct, adjusted": percentile_interval(estimate, adjusted[:n_boot].reshape(n_boot, -1)),
        }
        for name, (lo, hi) in intervals.items():
            found.setdefault(name, []).append((lo.reshape(-1, k), hi.reshape(-1, k)))
    print(f"\n{scale}, {n_raters} raters x {n_cases} cases; true shares {np.round(truth, 3)} "
          f"({', '.join(STRENGTH)})")
    for name, parts in found.items():
        report(name, np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts]),
               truth)


def main(mode: str = "library", n_raters: int = 1000, *cases: int) -> None:
    run = {"library": library, "compare": compare}[mode]
    for scale in ("ceiling", "continuous"):
        for n_cases in cases or (40, 80, 120, 200):
            run(scale, n_raters, n_cases)


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "library", *(int(a) for a in sys.argv[2:]))
