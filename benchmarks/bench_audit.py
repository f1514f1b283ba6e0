"""Time the whole audit (every analysis, no PDFs) on invented panels of growing size.

Usage: python benchmarks/bench_audit.py [--full]
Prints seconds per analysis step, so the slowest step at each size is visible.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from calibrate.analyses import audit
from calibrate.data.ingest import load_study

SPEC = """\
[study]
name = "benchmark panel"
data = "judgments.csv"
cases = "cases.csv"
[columns]
rater = "rater"
case = "case"
judgment = "score"
sequence = "seq"
[judgment]
scale = "ordinal"
min = 1
max = 7
[cues]
a = "numeric"
b = "numeric"
c = "numeric"
d = "numeric"
e = "numeric"
kind = "categorical"
[rubric]
a = 0.3
b = 0.2
c = 0.2
d = 0.2
e = 0.1
"""


def make_panel(folder: Path, n_raters: int, n_cases: int, per_rater: int, seed: int = 1) -> Path:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n_cases, 5))
    kind = rng.choice(["x", "y", "z"], size=n_cases)
    cases = pd.DataFrame(X.round(3), columns=list("abcde"))
    cases.insert(0, "case", [f"c{i}" for i in range(n_cases)])
    cases["kind"] = kind
    rows = []
    for r in range(n_raters):
        w = rng.dirichlet(np.ones(5)) * 1.5
        chosen = rng.choice(n_cases, size=per_rater, replace=False)
        y = np.clip(np.round(4 + X[chosen] @ w + rng.normal(0, 0.5, per_rater)), 1, 7)
        rep = chosen[: per_rater // 7]
        y_rep = np.clip(np.round(4 + X[rep] @ w + rng.normal(0, 0.5, len(rep))), 1, 7)
        ids = np.r_[chosen, rep]
        rows.append(pd.DataFrame({"rater": f"r{r}", "case": [f"c{i}" for i in ids],
                                  "score": np.r_[y, y_rep].astype(int),
                                  "seq": np.arange(1, len(ids) + 1)}))
    cases.to_csv(folder / "cases.csv", index=False)
    pd.concat(rows).to_csv(folder / "judgments.csv", index=False)
    (folder / "study.toml").write_text(SPEC)
    return folder / "study.toml"


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--full", action="store_true", help="also the large sizes")
    args = parser.parse_args()
    sizes = [(20, 400, 100), (100, 2000, 100)]
    if args.full:
        sizes += [(300, 6000, 100), (1000, 20000, 100)]
    for n_raters, n_cases, per_rater in sizes:
        with tempfile.TemporaryDirectory() as tmp:
            spec = make_panel(Path(tmp), n_raters, n_cases, per_rater)
            t0 = time.perf_counter()
            table = load_study(spec)
            t_load = time.perf_counter() - t0
            marks = []

            def step(name, marks=marks):
                marks.append((name, time.perf_counter()))

            t1 = time.perf_counter()
            audit(table, progress=step)
            end = time.perf_counter()
            times = {}
            points = marks + [("end", end)]
            for (name, t), (_, t_next) in zip(points, points[1:]):
                times[name] = times.get(name, 0.0) + t_next - t
            print(f"{n_raters} raters x {per_rater} cases each ({n_cases} cases): load {t_load:.2f} s, "
                  f"audit {end - t1:.2f} s")
            for name, t in sorted(times.items(), key=lambda kv: -kv[1]):
                print(f"    {name:<26} {t:7.2f} s")


if __name__ == "__main__":
    main()
