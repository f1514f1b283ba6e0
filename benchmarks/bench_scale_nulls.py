"""Size and power of the two "straight line?" tests (curvature, cut-off rule) on each scale.

Simulated raters from ``tests/scale_raters.py`` (three cues, b = (.5, .4, .3), noise SD 1):
1-7 scales with latent means 2.5, 4.0, 5.5 and 5.0 (the setting of issue 12, about 10% of
scores at 7); 0/1 probit decisions (latent mean 0.3); continuous judgments (mean 4).

Size: share of linear raters with p < .05 (unadjusted, per rater), judged by whether its
99.9% Clopper-Pearson interval (scipy ``binomtest(...).proportion_ci``) overlaps 4-6%.
Power: the same raters with a planted curve or a planted cut-off rule on cue 1 (see
``tests/scale_raters.py``). The curvature test uses the tool's p-value
(bootstrap on 1-7, the score test inside the logistic model on 0/1, F table on
continuous); the classical F table is printed beside.
The cut-off check runs exactly as the audit calls it (999 draws, early stopping after 20).

    PYTHONPATH=. python benchmarks/bench_scale_nulls.py [n_raters] [setting, e.g. 0/1]

The last column counts raters left untested (0/1 decisions the cues separate).
"""

from __future__ import annotations

import sys
import time

import numpy as np

from calibrate.policy import diagnostics as dg
from calibrate.policy.linalg import grouped_sscp, ols_from_sscp
from tests.scale_raters import cutoff_p_values, overlaps_band, scale_raters

SCALES = {  # name -> (scale kind, latent mean)
    "1-7, mean 2.5": ("ordinal", 2.5),
    "1-7, mean 4.0": ("ordinal", 4.0),
    "1-7, mean 5.5": ("ordinal", 5.5),
    "1-7, mean 5.0": ("ordinal", 5.0),
    "0/1": ("binary", 0.3),
    "continuous": ("continuous", 4.0),
}


def curvature_p(kind, X, y, groups, G, rng):
    """(tool's p, classical F-table p) per rater."""
    fit = ols_from_sscp(grouped_sscp(np.column_stack([X, y]), groups, G), np.arange(3), 3)
    fitted = fit.intercept[groups] + np.einsum("mi,mi->m", X, fit.coef[groups])
    classical = dg.reset_test(X, y, fitted, groups, G, fit).p_value
    if kind == "continuous":
        return classical, classical
    if kind == "binary":
        return dg.logistic_reset_test(X, y, groups, G).p_value, classical
    _, p = dg.scale_reset_p(X, y, groups, G, kind="rounded", scale_min=1, scale_max=7,
                            n_sim=199, rng=rng)
    return p, classical


def rate(p, judged=True):
    hits, low, high = overlaps_band(p)
    verdict = ("ok" if low <= 0.06 and high >= 0.04 else "OUT") if judged else ""
    return f"{hits / p.size:6.1%} ({low:.1%}-{high:.1%}) {verdict}"


def one_setting(label, n_cases, n_raters, plant, seed, block=250):
    kind, mean = SCALES[label]
    rng = np.random.default_rng(seed)
    curv, classical, cut, sevens = [], [], [], []
    t0 = time.perf_counter()
    for start in range(0, n_raters, block):
        G = min(block, n_raters - start)
        X, y, groups = scale_raters(rng, kind, mean, G, n_cases, plant)
        p, c = curvature_p(kind, X, y, groups, G, rng)
        curv.append(p)
        classical.append(c)
        cut.append(cutoff_p_values(kind, X, y, groups, rng))
        sevens.append(np.mean(y == 7) if kind == "ordinal" else np.nan)
    curv, classical, cut = map(np.concatenate, (curv, classical, cut))
    extra = f", {np.mean(sevens):.1%} at 7" if kind == "ordinal" else ""
    untested = f", untested {np.mean(np.isnan(curv)):.1%} / {np.mean(np.isnan(cut)):.1%}"
    print(f"{label:15s} {n_cases:3d} cases {plant:6s}{extra}: curvature {rate(curv, plant == 'none')}; "
          f"F table {np.mean(classical < 0.05):6.1%}; cut-off {rate(cut, plant == 'none')}{untested}; "
          f"{time.perf_counter() - t0:.0f}s", flush=True)


def main(n_raters: int = 1000, seed: int = 2026, only: str | None = None):
    print(f"{n_raters} raters per setting; p < .05 share (99.9% Clopper-Pearson interval), "
          "ok = overlaps 4-6% (size lines only)")
    for n_cases in (40, 100):
        for number, label in enumerate(SCALES):
            if only and only != label:
                continue
            one_setting(label, n_cases, n_raters, "none", seed + 100 * n_cases + number)
    for n_cases in (40, 100):
        for number, label in enumerate(("1-7, mean 4.0", "0/1", "continuous")):
            for plant in ("curve", "cutoff"):
                if only and only != label:
                    continue
                one_setting(label, n_cases, n_raters, plant,
                            seed + 7 + 100 * n_cases + 10 * number + (plant == "cutoff"))


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000,
         only=sys.argv[2] if len(sys.argv) > 2 else None)
