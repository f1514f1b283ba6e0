"""Coverage of the ICC and Krippendorff's alpha intervals on incomplete and complete designs.

Each simulated panel draws new case effects (variance 1), rater effects (variance
0.2 or 0.5) and residuals (variance 0.5), all normal, and a new design (each case
read by 4 of 14 raters at random, 350 cases), then asks whether each 95% interval
holds the population value. The population values are sigma2_c / (sigma2_c +
sigma2_r + sigma2_e) for ICC(A,1) = ICC(1,1) = interval alpha, sigma2_c / (sigma2_c +
sigma2_e) for ICC(C,1), and the k forms with k = 4 readers (McGraw & Wong 1996,
Table 4). Ordinal panels round the same judgments (shifted to a mean of 4) to 1..7; only
alpha is scored there, its population value computed once from 2 million simulated
pairs (the ICC of rounded judgments has no simple population value to score).
The old case-bootstrap interval of alpha is scored beside the parametric one.
A coverage figure passes when its 99.9% binomial (Clopper-Pearson) interval overlaps
the 93-97% band.

    PYTHONPATH=. python benchmarks/bench_icc_coverage.py [--panels 300] [--boot 500]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "unit"))

from panel_simulation import icc_truth, ordinal_alpha_truth, simulate_panel  # noqa: E402

from calibrate.agreement.icc import (  # noqa: E402
    ICC_FORMS,
    icc_anova,
    icc_parametric_draws,
    icc_from_components,
    krippendorff_alpha,
    panel_agreement,
    _percentile_interval,
)
from calibrate.agreement.offsets import check_first, crossed_layout, fit_additive  # noqa: E402
from calibrate.agreement.readers import henderson_components  # noqa: E402

SETTINGS = {   # name: raters, cases, readers, rater variance, ordinal
    "incomplete, rater var 0.2": (14, 350, 4, 0.2, False),
    "incomplete, rater var 0.5": (14, 350, 4, 0.5, False),
    "incomplete 1-7, rater var 0.2": (14, 350, 4, 0.2, True),
    "complete 6 x 30, rater var 0.2": (6, 30, 6, 0.2, False),
}
CASE_VAR, RESIDUAL_VAR = 1.0, 0.5


def basic_interval(draws, estimates, confidence):
    """Basic bootstrap interval (2 est - q_high, 2 est - q_low), for comparison only."""
    low_q, high_q = _percentile_interval(draws, confidence)
    return 2.0 * estimates - high_q, 2.0 * estimates - low_q


def binomial_band(hits: int, n: int, level: float = 0.999) -> tuple[float, float]:
    a = 1 - level
    lo = stats.beta.ppf(a / 2, hits, n - hits + 1) if hits > 0 else 0.0
    hi = stats.beta.ppf(1 - a / 2, hits + 1, n - hits) if hits < n else 1.0
    return float(lo), float(hi)


def run_setting(name: str, n_panels: int, n_boot: int, seed: int) -> dict[str, dict[str, int]]:
    """Hits per interval kind and coefficient over ``n_panels`` panels."""
    raters, cases, readers, rater_var, ordinal = SETTINGS[name]
    truth = icc_truth(CASE_VAR, rater_var, RESIDUAL_VAR, readers)
    if ordinal:
        truth["alpha"] = ordinal_alpha_truth(CASE_VAR, rater_var, RESIDUAL_VAR, mean=4.0)
    else:
        truth["alpha"] = truth["a1"]
    hits: dict[str, dict[str, int]] = {}
    rng = np.random.default_rng(seed)
    for _ in range(n_panels):
        first, _, _ = simulate_panel(n_raters=raters, n_cases=cases, readers=readers,
                                     rater_sd=np.sqrt(rater_var), noise_sd=np.sqrt(RESIDUAL_VAR),
                                     case_sd=np.sqrt(CASE_VAR), seed=int(rng.integers(2**31)))
        if ordinal:
            first["judgment"] = np.clip(np.round(first["judgment"] + 4.0), 1, 7)
        layout = crossed_layout(check_first(first))
        k = float(readers)
        comps = henderson_components(fit_additive(layout))
        point = icc_from_components(comps, k)
        est = np.array([point[f] for f, _ in ICC_FORMS])
        draws = icc_parametric_draws(layout, comps, k, n_boot, rng)
        kinds = {"percentile": _percentile_interval(draws, 0.95),
                 "basic": basic_interval(draws, est, 0.95)}
        if readers == raters:
            ratings = np.full((layout.n_cases, layout.n_raters), np.nan)
            ratings[layout.case_index, layout.rater_index] = layout.y
            f_forms = icc_anova(ratings)
            kinds["F (McGraw & Wong)"] = (np.array([e.ci_low for e in f_forms]),
                                          np.array([e.ci_high for e in f_forms]))
        for kind, (lo, hi) in kinds.items():
            if ordinal:   # the ICC of rounded judgments has no simple population value here
                break
            row = hits.setdefault(kind, {})
            for i, (form, _) in enumerate(ICC_FORMS):
                row[form] = row.get(form, 0) + int(lo[i] <= truth[form] <= hi[i])
        scale = "ordinal" if ordinal else "continuous"
        ag = panel_agreement(first, scale=scale, scale_min=1 if ordinal else None,
                             scale_max=7 if ordinal else None, n_boot=n_boot, rng=rng)
        old = krippendorff_alpha(layout.case_index, layout.y, level=ag.alpha.level, n_boot=n_boot, rng=rng)
        for kind, a in (("alpha, parametric", ag.alpha), ("alpha, case bootstrap", old)):
            row = hits.setdefault(kind, {})
            row["alpha"] = row.get("alpha", 0) + int(a.ci_low <= truth["alpha"] <= a.ci_high)
    return hits


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--panels", type=int, default=300)
    parser.add_argument("--boot", type=int, default=500)
    parser.add_argument("--seed", type=int, default=20261202)
    parser.add_argument("--only", default=None, help="run one setting (a name from SETTINGS)")
    args = parser.parse_args()
    for name in SETTINGS:
        if args.only and args.only != name:
            continue
        start = time.perf_counter()
        hits = run_setting(name, args.panels, args.boot, args.seed)
        print(f"{name}: {args.panels} panels, {args.boot} draws, {time.perf_counter() - start:.0f} s")
        for kind, row in hits.items():
            cells = []
            for form, h in row.items():
                lo, hi = binomial_band(h, args.panels)
                ok = "ok" if hi >= 0.93 and lo <= 0.97 else "MISS"
                cells.append(f"{form} {h / args.panels:.1%} ({lo:.1%}-{hi:.1%}) {ok}")
            print(f"  {kind:<20} " + "; ".join(cells))


if __name__ == "__main__":
    main()
