"""Coverage of drift's R_s change interval with all resamples and with the reduced form.

Raters without drift read 150 files in random order (10 shown twice), so both halves
of the reading order share one policy and one noise level: the true change in R_s is
zero (the halves have the same size, so the upward bias of a sample R_s is the same in
both). The 95% percentile interval should contain zero for about 95% of raters, with
the default 500 resamples and with the fewer resamples drift takes above 500 raters
(125 at 2,000 raters, never under 100). Three panels of 400 raters, continuous
judgments and a 1-7 scale; the 99.9% Clopper-Pearson interval is in brackets.

Run: PYTHONPATH=. .venv/bin/python benchmarks/bench_drift_resamples.py
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_lens_intervals import clopper_pearson  # noqa: E402  (this folder is on the path)
from calibrate.consistency.reading_order import drift  # noqa: E402
from tests.disagreement_panels import case_pool  # noqa: E402
from tests.unit.test_drift import ordered_panel  # noqa: E402


def main():
    for label, scale_points in (("continuous", False), ("1-7 scale", True)):
        panels = []
        for seed in range(3):
            rng = np.random.default_rng(2026 + seed)
            design = case_pool(rng, 300)
            panels.append((design, ordered_panel(rng, design, n_raters=400, scale_points=scale_points)))
        for n_resamples in (500, 125, 100):
            start = time.process_time()
            hit = total = 0
            for seed, (design, ordered) in enumerate(panels):
                result = drift(design, ordered, n_resamples=n_resamples, rng=seed, scale_down=False)
                low = np.array([r.r_s_change_ci_low for r in result.raters])
                high = np.array([r.r_s_change_ci_high for r in result.raters])
                ok = np.isfinite(low) & np.isfinite(high)
                hit += int(((low <= 0) & (0 <= high) & ok).sum())
                total += int(ok.sum())
            low_cp, high_cp = clopper_pearson(hit, total)
            print(f"{label}, {n_resamples} resamples: {hit / total:.1%} [{low_cp:.1%}, {high_cp:.1%}] "
                  f"of {total} raters ({time.process_time() - start:.1f} s CPU)", flush=True)


if __name__ == "__main__":
    main()
