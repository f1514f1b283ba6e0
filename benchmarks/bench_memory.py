"""Peak memory of `calibrate audit --no-pdf` on invented panels of growing size.

Usage: python benchmarks/bench_memory.py [--sizes 200x100,400x150,...]
       python benchmarks/bench_memory.py --specs a/study.toml,b/study.toml,...
Each size is RATERSxCASES with every rater judging every case (one seventh again, hidden
repeats); ``--specs`` audits existing studies instead (the panels of bench_scale.py, for
instance). The audit runs in a child process under /usr/bin/time -v, whose "Maximum
resident set size" is the peak. Prints rows, peak GB and seconds per panel, the model's
estimate beside each peak, then the least-squares fit of the memory model that
`calibrate audit` uses to refuse a panel beyond the machine (calibrate/output/limits.py).
Keep the sizes small on a shared machine: the limit is extrapolated, not run.
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_audit import make_panel  # noqa: E402

from calibrate.data.ingest import load_study  # noqa: E402
from calibrate.output.limits import estimated_gb, memory_terms, table_size  # noqa: E402


def peak_gb(spec: Path, out: Path) -> tuple[float, float]:
    t0 = time.perf_counter()
    proc = subprocess.run(["/usr/bin/time", "-v", sys.executable, "-m", "calibrate", "audit", str(spec),
                           "--out", str(out), "--no-pdf", "--memory-limit", "1000"],
                          capture_output=True, text=True, env={**os.environ, "TQDM_DISABLE": "1"})
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(proc.stderr[-2000:])
    kb = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", proc.stderr).group(1))
    return kb / 1024 ** 2, seconds


def _report(label: str, n_rows: int, n_raters: int, n_terms: int, gb: float, seconds: float) -> None:
    estimate = estimated_gb(n_rows, n_raters, n_terms)
    print(f"{label}: {n_rows:>8,} rows, {n_raters:>5} raters, {n_terms} terms: peak {gb:6.2f} GB, "
          f"estimate {estimate:6.2f} GB ({estimate / gb:4.2f}x), {seconds:6.1f} s", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--sizes", default="100x100,200x150,400x150,600x200")
    parser.add_argument("--specs", default="", help="comma-separated study specs to audit instead")
    args = parser.parse_args()
    rows, peaks = [], []
    if args.specs:
        for spec in args.specs.split(","):
            n_rows, n_raters, n_terms = table_size(load_study(spec))
            with tempfile.TemporaryDirectory() as tmp:
                gb, seconds = peak_gb(Path(spec), Path(tmp) / "out")
            _report(spec, n_rows, n_raters, n_terms, gb, seconds)
            rows.append(memory_terms(n_rows, n_raters, n_terms))
            peaks.append(gb)
    for size in [] if args.specs else args.sizes.split(","):
        n_raters, n_cases = map(int, size.split("x"))
        with tempfile.TemporaryDirectory() as tmp:
            spec = make_panel(Path(tmp), n_raters, n_cases, n_cases)
            n_rows = n_raters * (n_cases + n_cases // 7)
            gb, seconds = peak_gb(spec, Path(tmp) / "out")
        _report(f"{n_raters:>5} raters x {n_cases:>4} cases", n_rows, n_raters, 7, gb, seconds)
        rows.append(memory_terms(n_rows, n_raters, 7))
        peaks.append(gb)
    coef, *_ = np.linalg.lstsq(np.array(rows), np.array(peaks), rcond=None)
    print("fit (GB): base, per row x term, per rater pair =", ", ".join(f"{c:.3g}" for c in coef))


if __name__ == "__main__":
    main()
