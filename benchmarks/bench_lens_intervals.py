"""Coverage of the lens intervals (BCa case bootstrap of r_a, G, C and R_e).

500 simulated raters x 60 cases with a criterion (3 cues, 20 cases per term), 1,000
resamples, on continuous judgments and on a 1-7 scale with a ceiling (centre 5.5),
and 500 raters x 30 cases (10 per term); then the first two again with the 250 resamples
of the reduced form (``LENS_MIN_RESAMPLES``, panels of over 500 raters on cases of their
own). The target is 93-97%, judged by whether the 99.9% Clopper-Pearson interval of the
coverage reaches into that band.

Run: PYTHONPATH=. .venv/bin/python benchmarks/bench_lens_intervals.py
"""

import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.lens_panels import coverage  # noqa: E402


def clopper_pearson(k, n, level=0.999):
    a = (1 - level) / 2
    low = stats.beta.ppf(a, k, n - k + 1) if k else 0.0
    high = stats.beta.ppf(1 - a, k + 1, n - k) if k < n else 1.0
    return low, high


def main():
    settings = [("continuous, 60 cases", 60, {}, 1000),
                ("1-7 centre 5.5, 60 cases", 60, {"ordinal": True, "centre": 5.5}, 1000),
                ("continuous, 30 cases", 30, {}, 1000),
                ("continuous, 60 cases, 250 resamples", 60, {}, 250),
                ("1-7 centre 5.5, 60 cases, 250 resamples", 60, {"ordinal": True, "centre": 5.5}, 250)]
    for label, n_cases, process, n_boot in settings:
        start = time.perf_counter()
        result = coverage(np.random.default_rng(2026), 500, n_cases, n_boot=n_boot, **process)
        seconds = time.perf_counter() - start
        cells = []
        for figure, (hit, n) in result.items():
            low, high = clopper_pearson(hit, n)
            verdict = "pass" if high >= 0.93 and low <= 0.97 else "FAIL"
            cells.append(f"{figure} {hit / n:.1%} [{low:.1%}, {high:.1%}] {verdict}")
        print(f"{label}: " + "; ".join(cells) + f"  ({seconds:.0f} s)", flush=True)


if __name__ == "__main__":
    main()
