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
from calibrate.training.panel_change import agreement_draws, draw_change  # noqa: E402

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
    args = parser.parse_args()
    rng = np.random.default_rng(20261203)
    pairs = 40 if args.quick else 200
    t0 = time.perf_counter()
    for ordinal in (False, True):
        d_icc, d_alpha, c_icc, c_alpha = coverage(rng, pairs, ordinal, 500)
        label = "1-7 with rounding" if ordinal else "continuous"
        print(f"{label}: ICC(A,1) change {d_icc:+.3f} covered {c_icc:.3f}; "
              f"alpha change {d_alpha:+.3f} covered {c_alpha:.3f} ({pairs} pairs)", flush=True)
    print(f"({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
