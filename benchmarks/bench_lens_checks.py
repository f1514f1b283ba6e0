"""Time the lens model, rubric alignment, excluded-attribute and cutoff checks at several sizes.

Run: .venv/bin/python benchmarks/bench_lens_checks.py
Not a test; prints one line per size.
"""

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calibrate.lens.cutoffs import cutoff_check  # noqa: E402
from calibrate.lens.model import lens_model  # noqa: E402
from calibrate.lens.rubric import excluded_check, rubric_alignment  # noqa: E402
from tests.simulated_panels import linear_panel  # noqa: E402


def main():
    for n_raters, per_rater in [(15, 100), (50, 300), (200, 500)]:
        rng = np.random.default_rng(0)
        panel = linear_panel(rng, n_cases=4 * per_rater, n_raters=n_raters, per_rater=per_rater,
                             weights=np.array([0.05, 0.4, 0.3, 0.2, -0.2]), noise=1.0, categorical=True)
        ids = list(panel.design.case_ids)
        criterion = pd.Series(panel.design.matrix[:, :3] @ [0.05, 0.3, 0.3] + rng.standard_normal(len(ids)),
                              index=ids)
        excluded = pd.DataFrame({"age": rng.normal(size=len(ids)),
                                 "region": rng.choice(["a", "b", "c"], len(ids))}, index=ids)
        timings = {}
        for name, call in [
            ("lens", lambda: lens_model(panel.design, panel.first, criterion)),
            ("alignment", lambda: rubric_alignment(panel.design, panel.first, {"grades": .5, "essay": .5})),
            ("excluded", lambda: excluded_check(panel.design, panel.first, excluded)),
            ("excluded_binary", lambda: excluded_check(
                panel.design, panel.first.assign(judgment=(panel.first.judgment > 7).astype(float)),
                excluded, scale="binary")),
            ("cutoff_999", lambda: cutoff_check(panel.design, panel.first, rng=1, n_sim=999)),
        ]:
            start = time.perf_counter()
            call()
            timings[name] = time.perf_counter() - start
        print(f"{n_raters} raters x {per_rater} cases: "
              + ", ".join(f"{k} {v:.2f}s" for k, v in timings.items()))


if __name__ == "__main__":
    main()
