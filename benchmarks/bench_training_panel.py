"""Coverage of the change in panel agreement between two phases (figures in DEVELOPERS.md).

Run: PYTHONPATH=. python benchmarks/bench_training_panel.py [--quick]

Two phases of a panel of 14 raters, each phase 60 cases of its own read by every rater
(a complete design, as after a calibration round), judgments from the crossed model
case + rater + residual; the training cuts the residual SD from 1.0 to 0.8. The change in
ICC(A,1) and in Krippendorff's alpha gets the percentile interval of the difference of
each phase's parametric-bootstrap draws (training/panel_change.py); coverage of the true
change over 200 simulated pairs of phases, on a continuous scale (truth from the
variance components) and on a 1-7 scale with rounding and a ceiling (truth from one
panel of 400 raters x 4,000 cases per phase).

Convergence: 7 raters whose weights differ from a shared profile by N(0, 0.3) per cue,
halved by the training; 60 cases of their own per phase, and 30 (fewer cases), 1-7 with a
ceiling. Coverage of the true change in the spread of share profiles and in the distance
to the rubric (both from the true weights) over 200 pairs of phases, 400 resamples per
phase: the noise-corrected root-mean-square distances that compare reports, and
beside them the uncorrected half-summed absolute differences with the percentile interval
(the figures before).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calibrate.agreement.icc import icc_from_components, krippendorff_alpha  # noqa: E402
from calibrate.agreement.offsets import crossed_layout, fit_additive  # noqa: E402
from calibrate.agreement.readers import henderson_components  # noqa: E402
from calibrate.data.rows import JudgmentRows  # noqa: E402
from calibrate.training.panel_change import (agreement_draws, distance_to_rubric, draw_change,  # noqa: E402
                                             noise_corrected_distance_to_rubric, noise_corrected_spread,
                                             pairwise_distance, root_distance_change,
                                             pairwise_squared_distance, squared_distance_to_rubric)
from calibrate.training.phases import _policy_draws  # noqa: E402

PROFILE = np.array([0.8, 0.5, 0.3, 0.2])  # the shared weights, and the rubric's


class _FourCues:
    """The little of a cue design that the share computation reads: four numeric cues."""

    cues = ("a", "b", "c", "d")
    kinds: dict = {}

    def cue_groups(self):
        return [[0], [1], [2], [3]]


def share_draws(rng, weights, n, noise=0.8, n_boot=400):
    G = weights.shape[0]
    X = rng.normal(size=(G * n, 4))
    latent = np.einsum("gnp,gp->gn", X.reshape(G, n, 4), weights).ravel() + rng.normal(0, noise, G * n)
    y = np.clip(np.round(5 + 1.3 * latent), 1, 7)
    rows = JudgmentRows(raters=tuple(f"r{g}" for g in range(G)), group=np.repeat(np.arange(G), n),
                        design_row=np.arange(G * n), X=X, y=y, n_dropped=0)
    out, _ = _policy_draws(rows, np.arange(G), _FourCues(), np.ones(4), PROFILE / PROFILE.sum(), n_boot, rng)
    return out["shares"]


def convergence_coverage(rng, pairs, n=60, n_boot=400):
    rubric = PROFILE / PROFILE.sum()
    before = {"spread": pairwise_distance, "to rubric": lambda s: distance_to_rubric(s, rubric)}
    now = {"spread": (noise_corrected_spread, pairwise_squared_distance),
           "to rubric": (lambda s, d: noise_corrected_distance_to_rubric(s, d, rubric),
                         lambda s: squared_distance_to_rubric(s, rubric))}
    hits = {f"{k} {m}": 0 for k in before for m in ("now", "before")}
    for _ in range(pairs):
        deviation = rng.normal(0, 0.3, (7, 4))
        w_a, w_b = PROFILE + deviation, PROFILE + 0.5 * deviation
        true_a, true_b = (w / np.abs(w).sum(1, keepdims=True) for w in (w_a, w_b))
        s_a, s_b = share_draws(rng, w_a, n, n_boot=n_boot), share_draws(rng, w_b, n, n_boot=n_boot)
        for name, f in before.items():
            ch = draw_change(float(f(s_a[:, 0])), f(s_a[:, 1:]), float(f(s_b[:, 0])), f(s_b[:, 1:]), 0.95)
            hits[f"{name} before"] += ch["ci_low"] <= float(f(true_b) - f(true_a)) <= ch["ci_high"]
        for name, (corrected, exact) in now.items():
            (ea, da), (eb, db) = corrected(s_a[:, 0], s_a[:, 1:]), corrected(s_b[:, 0], s_b[:, 1:])
            ch = root_distance_change(ea, da, eb, db, 0.95)
            truth = float(np.sqrt(exact(true_b)) - np.sqrt(exact(true_a)))
            hits[f"{name} now"] += ch["ci_low"] <= truth <= ch["ci_high"]
    return {k: v / pairs for k, v in hits.items()}

CASE_SD, RATER_SD = 1.0, 0.4


def panel(rng, n_raters, n_cases, residual_sd, ordinal):
    case = rng.normal(0, CASE_SD, n_cases)
    rater = rng.normal(0, RATER_SD, n_raters)
    y = case[None, :] + rater[:, None] + rng.normal(0, residual_sd, (n_raters, n_cases))
    if ordinal:
        y = np.clip(np.round(4.8 + 1.2 * y), 1, 7)
    r_idx, c_idx = np.indices(y.shape)
    return pd.DataFrame({"rater": [f"r{i}" for i in r_idx.ravel()],
                         "case": [f"c{j}" for j in c_idx.ravel()], "judgment": y.ravel()})


def truth(residual_sd, ordinal):
    if not ordinal:
        icc = CASE_SD ** 2 / (CASE_SD ** 2 + RATER_SD ** 2 + residual_sd ** 2)
        return icc, icc  # alpha at the interval level equals ICC(A,1) in the population
    first = panel(np.random.default_rng(7), 400, 4000, residual_sd, True)
    layout = crossed_layout(first)
    icc = float(icc_from_components(henderson_components(fit_additive(layout)), 400.0)["a1"])
    alpha = krippendorff_alpha(layout.case_index, layout.y, level="ordinal").estimate
    return icc, float(alpha)


def coverage(rng, pairs, ordinal, n_boot):
    (icc_a, alpha_a), (icc_b, alpha_b) = truth(1.0, ordinal), truth(0.8, ordinal)
    scale = dict(scale="ordinal", scale_min=1, scale_max=7) if ordinal else dict(
        scale="continuous", scale_min=None, scale_max=None)
    hits = {"icc": 0, "alpha": 0}
    for _ in range(pairs):
        a = agreement_draws(panel(rng, 14, 60, 1.0, ordinal), n_boot=n_boot, rng=rng, **scale)
        b = agreement_draws(panel(rng, 14, 60, 0.8, ordinal), n_boot=n_boot, rng=rng, **scale)
        for key, true in (("icc", icc_b - icc_a), ("alpha", alpha_b - alpha_a)):
            ch = draw_change(a[key][0], a[key][1], b[key][0], b[key][1], 0.95)
            hits[key] += ch["ci_low"] <= true <= ch["ci_high"]
    return icc_b - icc_a, alpha_b - alpha_a, hits["icc"] / pairs, hits["alpha"] / pairs


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--convergence-only", action="store_true")
    args = parser.parse_args()
    rng = np.random.default_rng(20261203)
    pairs = 40 if args.quick else 200
    t0 = time.perf_counter()
    for ordinal in () if args.convergence_only else (False, True):
        d_icc, d_alpha, c_icc, c_alpha = coverage(rng, pairs, ordinal, 500)
        label = "1-7 with rounding" if ordinal else "continuous"
        print(f"{label}: ICC(A,1) change {d_icc:+.3f} covered {c_icc:.3f}; "
              f"alpha change {d_alpha:+.3f} covered {c_alpha:.3f} ({pairs} pairs)", flush=True)
    for n in (60, 30):
        cover = convergence_coverage(rng, pairs, n)
        print(f"Convergence, 7 raters x {n} cases ({pairs} pairs), noise-corrected squared distances "
              f"then rooted (as compare reports): spread of profiles covered {cover['spread now']:.3f}, distance to "
              f"the rubric {cover['to rubric now']:.3f}; uncorrected (before): {cover['spread before']:.3f}, "
              f"{cover['to rubric before']:.3f}", flush=True)
    print(f"({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
