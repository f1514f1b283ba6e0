"""Time the consistency and agreement functions at a few panel sizes.

Run: .venv/bin/python benchmarks/bench_agreement.py [--boot 200]
Sizes are raters x files with 3 readers per file (an incomplete design).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "unit"))

from panel_simulation import simulate_panel  # noqa: E402

from calibrate.agreement.files import file_view  # noqa: E402
from calibrate.agreement.icc import panel_agreement  # noqa: E402
from calibrate.agreement.readers import generalizability  # noqa: E402
from calibrate.agreement.offsets import severity  # noqa: E402
from calibrate.consistency.repeats import retest  # noqa: E402


def timed(label, fn):
    start = time.perf_counter()
    out = fn()
    print(f"  {label:<34} {time.perf_counter() - start:8.3f} s")
    return out


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--boot", type=int, default=200)
    args = parser.parse_args()
    for raters, files in [(20, 300), (100, 2000), (300, 5000), (600, 10000)]:
        first, _, _ = simulate_panel(n_raters=raters, n_cases=files, readers=3, seed=1)
        print(f"{raters} raters x {files} files, {len(first)} judgments, {args.boot} resamples")
        rng = np.random.default_rng(0)
        pairs = first.sample(frac=0.15, random_state=1)
        repeats = pd.DataFrame({"rater": pairs["rater"], "case": pairs["case"],
                                "first": pairs["judgment"],
                                "second": pairs["judgment"] + rng.normal(0, 0.5, len(pairs))})
        timed("retest", lambda: retest(repeats, scale="continuous"))
        sev = timed("severity", lambda: severity(first, scale="continuous", scale_min=-4, scale_max=4))
        timed("file_view", lambda: file_view(first, sev, cut_off=0.0))
        timed("generalizability (cut-off)", lambda: generalizability(first, cut_off=0.0, rng=0))
        timed("panel_agreement", lambda: panel_agreement(first, scale="continuous",
                                                         n_boot=args.boot, rng=0))


if __name__ == "__main__":
    main()
