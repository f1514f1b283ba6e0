"""Calibration of a file's chance of changing side with one more reading.

For each setting, 200 invented panels (20 raters, 300 files, each read by 2, 3 or 5
raters; true values N(0, 1), reader offsets N(0, 0.4^2), noise N(0, 0.7^2); continuous,
or a 1-7 scale centred at 4 with rounding and ends; cut-off 0.3 above the centre, so about
38% of files sit above it): the per-file view estimates ``change_probability`` for every
file, then one fresh reader reads every file again (tests/change_panels.py). Printed per
band of the estimate: files, mean estimate, share that changed, and for the band around
0.3 (0.25-0.35) the share with its 99.9% Clopper-Pearson interval. A last setting breaks
the model on purpose: a fifth of the files have readers twice as noisy as the rest.

Run: PYTHONPATH=. .venv/bin/python benchmarks/bench_change_probability.py
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_lens_intervals import clopper_pearson  # noqa: E402  (this folder is on the path)
from tests.change_panels import calibration, one_panel  # noqa: E402


def main(n_panels: int = 200):
    settings = [(scale, readers, 0.0) for scale in ("continuous", "ordinal") for readers in (2, 3, 5)]
    for scale, readers, contentious in settings + [("continuous", 3, 0.2)]:
        start = time.time()
        rng = np.random.default_rng(20261203 + readers + (100 if scale == "ordinal" else 0)
                                    + (1000 if contentious else 0))
        parts = [one_panel(rng, readers=readers, scale=scale, contentious=contentious)
                 for _ in range(n_panels)]
        p = np.concatenate([q for q, _ in parts])
        changed = np.concatenate([c for _, c in parts])
        near = (p >= 0.25) & (p < 0.35)
        k, n = int(changed[near].sum()), int(near.sum())
        low, high = clopper_pearson(k, n)
        odd = f", {100 * contentious:.0f}% of files with readers twice as noisy" if contentious else ""
        print(f"\n{scale}, {readers} readers per file{odd}, {n_panels} panels ({time.time() - start:.0f} s)")
        print(calibration(p, changed).to_string(index=False))
        print(f"estimated 0.25-0.35 (mean {p[near].mean():.3f}): changed {k}/{n} = {k / n:.3f} "
              f"[{low:.3f}, {high:.3f}]; mean absolute gap over all files "
              f"{abs(p.mean() - changed.mean()):.4f}")


if __name__ == "__main__":
    main()
