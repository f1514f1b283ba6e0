"""The whole audit at 40, 400 and 2,000 raters, beside a per-rater workflow and a numpy floor.

Usage:
    python benchmarks/bench_scale.py [--sizes 40,400] [--runs 3] [--design shared,linked]
                                     [--pdf-size 40] [--keep DIR]

Invented panels: 200 cases per rater, 8 numeric cues on a 1-7 scale with a ceiling, 15% of
each rater's cases shown again (hidden repeats), a criterion for every case. Two designs:

- shared: every rater reads the same 200 cases;
- linked: 50 cases per rater, each case read by 4 raters (rater r reads the blocks
  r, r+1, r+2, r+3 of 50 cases, wrapping round), so the design is connected but incomplete.

For each size and design the script runs, as whole processes (imports and loading included):

1. ``calibrate audit --no-pdf`` (and with PDFs at ``--pdf-size`` only), with the stage
   times printed by the audit's progress hook in a child process;
2. a per-rater reference workflow written here as an analyst would: statsmodels OLS per
   rater, scipy correlations (cue utilizations, test-retest r, achievement r_a), pingouin
   ICC on the complete design, scipy Ward clustering of the standardized weights, and a
   1,000-resample case bootstrap of R_s with one ``numpy.linalg.lstsq`` per resample;
3. the same numbers computed by vectorized numpy (the floor), checked against (2).

It prints the median seconds over ``--runs`` runs of each (wall clock per stage, and the
CPU time of each whole process: on a shared machine the wall clock counts other work too),
the audit's peak memory and results.json size, and the ratios.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

N_CUES = 8
PER_RATER = 200
REPEAT_SHARE = 0.15
READERS_PER_CASE = 4
N_BOOT = 1000

SPEC = """\
[study]
name = "scale benchmark"
data = "judgments.csv"
cases = "cases.csv"
seed = 17
[columns]
rater = "rater"
case = "case"
judgment = "score"
sequence = "seq"
criterion = "outcome"
[judgment]
scale = "ordinal"
min = 1
max = 7
[cues]
""" + "".join(f'q{j} = "numeric"\n' for j in range(1, N_CUES + 1))


def make_panel(folder: Path, n_raters: int, design: str, *, seed: int = 17) -> Path:
    """Write judgments.csv, cases.csv and study.toml for an invented panel; return the spec path."""
    rng = np.random.default_rng(seed)
    if design == "shared":
        n_cases = PER_RATER
        reads = np.tile(np.arange(PER_RATER), (n_raters, 1))
    elif design == "linked":
        block = PER_RATER // READERS_PER_CASE
        n_cases = block * n_raters
        blocks = (np.arange(n_raters)[:, None] + np.arange(READERS_PER_CASE)[None, :]) % n_raters
        reads = (blocks[:, :, None] * block + np.arange(block)[None, None, :]).reshape(n_raters, -1)
    else:
        raise SystemExit(f"unknown design {design!r}; use shared or linked")
    X = rng.normal(size=(n_cases, N_CUES))
    true_w = np.linspace(0.6, 0.05, N_CUES)
    outcome = X @ true_w + rng.normal(0, 0.7, n_cases)
    cases = pd.DataFrame({"case": [f"f{i:06d}" for i in range(n_cases)]})
    for j in range(N_CUES):
        cases[f"q{j + 1}"] = np.round(4 + 1.2 * X[:, j], 2)
    cases["outcome"] = np.round(outcome, 3)
    weights = np.abs(true_w[None, :] + rng.normal(0, 0.15, (n_raters, N_CUES)))
    n_rep = int(round(REPEAT_SHARE * PER_RATER))
    lean = rng.normal(0, 0.3, n_raters)
    first = 4.3 + lean[:, None] + np.einsum("rcj,rj->rc", X[reads], weights)
    noise = rng.normal(0, 0.6, (n_raters, PER_RATER + n_rep))
    rep_idx = np.sort(rng.random((n_raters, PER_RATER)).argsort(axis=1)[:, :n_rep], axis=1)
    case_idx = np.concatenate([reads, np.take_along_axis(reads, rep_idx, axis=1)], axis=1)
    mean = np.concatenate([first, np.take_along_axis(first, rep_idx, axis=1)], axis=1)
    score = np.clip(np.round(mean + noise), 1, 7).astype(int)
    # The repeats come after the first showing: shuffle the first showings, then the repeats.
    order = np.concatenate([rng.random((n_raters, PER_RATER)).argsort(axis=1),
                            PER_RATER + rng.random((n_raters, n_rep)).argsort(axis=1)], axis=1)
    case_idx = np.take_along_axis(case_idx, order, axis=1)
    score = np.take_along_axis(score, order, axis=1)
    width = len(str(n_raters))
    judgments = pd.DataFrame({
        "rater": np.repeat([f"reader{r:0{width}d}" for r in range(n_raters)], PER_RATER + n_rep),
        "case": cases["case"].to_numpy()[case_idx.ravel()],
        "score": score.ravel(),
        "seq": np.tile(np.arange(1, PER_RATER + n_rep + 1), n_raters),
    })
    cases.to_csv(folder / "cases.csv", index=False)
    judgments.to_csv(folder / "judgments.csv", index=False)
    (folder / "study.toml").write_text(SPEC)
    return folder / "study.toml"


# ----------------------------------------------------------------------------- the audit

AUDIT_CHILD = """
import json, sys, time
marks = []
import calibrate.analyses as analyses
inner = analyses.audit
def audit(*args, progress=None, **kwargs):
    def step(name):
        marks.append((name, time.perf_counter()))
        if progress is not None:
            progress(name)
    result = inner(*args, progress=step, **kwargs)
    marks.append(("write", time.perf_counter()))
    return result
analyses.audit = audit
sys.argv = ["calibrate"] + json.loads(sys.argv[1])
from calibrate.cli import main
code = 0
try:
    main(standalone_mode=False)
except SystemExit as stop:
    code = stop.code or 0
end = time.perf_counter()
stages = {}
points = marks + [("end", end)]
for (name, t), (_, t_next) in zip(points, points[1:]):
    stages[name] = stages.get(name, 0.0) + t_next - t
print("STAGES " + json.dumps({"code": code, "stages": stages}))
"""


def run_audit(spec: Path, out: Path, *, pdf: bool) -> dict:
    """``calibrate audit`` as a whole process: wall seconds, stage seconds, peak memory."""
    args = ["audit", str(spec), "--out", str(out), "--overwrite", "--memory-limit", "1000"]
    if not pdf:
        args.append("--no-pdf")
    env = {**os.environ, "TQDM_DISABLE": "1", "SOURCE_DATE_EPOCH": "1700000000"}
    t0, cpu0 = time.perf_counter(), _children_cpu()
    proc = subprocess.run(["/usr/bin/time", "-v", sys.executable, "-c", AUDIT_CHILD, json.dumps(args)],
                          capture_output=True, text=True, env=env, check=False)
    seconds, cpu = time.perf_counter() - t0, _children_cpu() - cpu0
    line = next((x for x in proc.stdout.splitlines() if x.startswith("STAGES ")), None)
    if proc.returncode != 0 or line is None:
        raise SystemExit(f"audit failed:\n{proc.stdout[-1500:]}\n{proc.stderr[-3000:]}")
    peak_kb = next(int(x.split(":")[1]) for x in proc.stderr.splitlines()
                   if "Maximum resident set size" in x)
    size = (out / "results.json").stat().st_size
    return {"total": seconds, "cpu": cpu, **json.loads(line[7:])["stages"], "peak_gb": peak_kb / 1024**2,
            "results_mb": size / 1e6}


def _children_cpu() -> float:
    """User + system CPU seconds of the finished child processes (a shared machine's wall
    clock counts other people's work too)."""
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


# ------------------------------------------------------------ the per-rater reference workflow

REFERENCE_CHILD = r'''
import json, sys, time
t0 = time.perf_counter()
import numpy as np
import pandas as pd
import pingouin
import statsmodels.api as sm
from scipy import stats
from scipy.cluster.hierarchy import fcluster, linkage
folder, n_boot, seed = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
stages = {"imports": time.perf_counter() - t0}
t = time.perf_counter()
judgments = pd.read_csv(folder + "/judgments.csv")
cases = pd.read_csv(folder + "/cases.csv").set_index("case")
cues = [c for c in cases.columns if c.startswith("q")]
judgments = judgments.sort_values(["rater", "seq"])
repeat = judgments.duplicated(["rater", "case"])
first, again = judgments[~repeat], judgments[repeat]
stages["load"] = time.perf_counter() - t
out = {"coef": {}, "r2": {}, "utilization": {}, "r_tt": {}, "r_a": {}, "boot_ci": {}}
t = time.perf_counter()
std_weights = []
raters = sorted(first["rater"].unique())
for rater in raters:
    rows = first[first["rater"] == rater]
    X = cases.loc[rows["case"], cues].to_numpy()
    y = rows["score"].to_numpy(dtype=float)
    fit = sm.OLS(y, sm.add_constant(X)).fit()
    out["coef"][rater] = fit.params[1:].tolist()
    out["r2"][rater] = float(fit.rsquared)
    std_weights.append(fit.params[1:] * X.std(axis=0, ddof=1) / y.std(ddof=1))
stages["policy fits (statsmodels)"] = time.perf_counter() - t
t = time.perf_counter()
for rater in raters:
    rows = first[first["rater"] == rater]
    X = cases.loc[rows["case"], cues].to_numpy()
    y = rows["score"].to_numpy(dtype=float)
    out["utilization"][rater] = [float(stats.pearsonr(X[:, j], y)[0]) for j in range(len(cues))]
    out["r_a"][rater] = float(stats.pearsonr(y, cases.loc[rows["case"], "outcome"])[0])
    pair = again[again["rater"] == rater].merge(rows[["case", "score"]], on="case", suffixes=("_2", "_1"))
    out["r_tt"][rater] = float(stats.pearsonr(pair["score_1"], pair["score_2"])[0])
stages["correlations (scipy)"] = time.perf_counter() - t
t = time.perf_counter()
complete = first.groupby("case")["rater"].nunique()
if (complete == len(raters)).all():
    icc = pingouin.intraclass_corr(data=first, targets="case", raters="rater", ratings="score")
    out["icc_a1"] = float(icc.set_index("Type").loc["ICC(A,1)", "ICC"])
    stages["ICC (pingouin)"] = time.perf_counter() - t
t = time.perf_counter()
tree = linkage(np.array(std_weights), method="ward")
out["groups"] = fcluster(tree, t=3, criterion="maxclust").tolist()
stages["Ward clustering (scipy)"] = time.perf_counter() - t
t = time.perf_counter()
rng = np.random.default_rng(seed)
for rater in raters:
    rows = first[first["rater"] == rater]
    X = np.column_stack([np.ones(len(rows)), cases.loc[rows["case"], cues].to_numpy()])
    y = rows["score"].to_numpy(dtype=float)
    n = len(y)
    draws = rng.integers(0, n, size=(n_boot, n))
    r_s = np.empty(n_boot)
    for b in range(n_boot):
        Xb, yb = X[draws[b]], y[draws[b]]
        beta = np.linalg.lstsq(Xb, yb, rcond=None)[0]
        resid = yb - Xb @ beta
        r_s[b] = np.sqrt(max(0.0, 1.0 - resid @ resid / ((yb - yb.mean()) @ (yb - yb.mean()))))
    out["boot_ci"][rater] = np.percentile(r_s, [2.5, 97.5]).tolist()
stages["bootstrap of R_s (lstsq per resample)"] = time.perf_counter() - t
print("REFERENCE " + json.dumps({"stages": stages, "numbers": out}))
'''


def run_reference(folder: Path, *, n_boot: int = N_BOOT, seed: int = 5) -> dict:
    t0, cpu0 = time.perf_counter(), _children_cpu()
    proc = subprocess.run([sys.executable, "-c", REFERENCE_CHILD, str(folder), str(n_boot), str(seed)],
                          capture_output=True, text=True, check=False)
    seconds, cpu = time.perf_counter() - t0, _children_cpu() - cpu0
    line = next((x for x in proc.stdout.splitlines() if x.startswith("REFERENCE ")), None)
    if proc.returncode != 0 or line is None:
        raise SystemExit(f"reference workflow failed:\n{proc.stderr[-3000:]}")
    data = json.loads(line[10:])
    return {"total": seconds, "cpu": cpu, **data["stages"], "numbers": data["numbers"]}


# -------------------------------------------------------------------------- the numpy floor

def vectorized_floor(folder: Path, *, n_boot: int = N_BOOT, seed: int = 5) -> dict:
    """The reference workflow's numbers by vectorized numpy, in this process (seconds per stage)."""
    stages: dict[str, float] = {}
    t = time.perf_counter()
    judgments = pd.read_csv(folder / "judgments.csv").sort_values(["rater", "seq"], kind="stable")
    cases = pd.read_csv(folder / "cases.csv").set_index("case")
    cues = [c for c in cases.columns if c.startswith("q")]
    repeat = judgments.duplicated(["rater", "case"]).to_numpy()
    first = judgments[~repeat]
    raters, who = np.unique(first["rater"].to_numpy(), return_inverse=True)
    R = raters.size
    row_case = cases.index.get_indexer(first["case"])
    X = cases[cues].to_numpy()[row_case]
    y = first["score"].to_numpy(dtype=float)
    crit = cases["outcome"].to_numpy()[row_case]
    sizes = np.bincount(who, minlength=R)
    n = int(sizes.max())
    if not (sizes == n).all():
        raise SystemExit("the floor assumes every rater has the same number of cases")
    Xb, yb, cb = X.reshape(R, n, -1), y.reshape(R, n), crit.reshape(R, n)
    stages["load"] = time.perf_counter() - t
    t = time.perf_counter()
    Xc = Xb - Xb.mean(axis=1, keepdims=True)
    yc = yb - yb.mean(axis=1, keepdims=True)
    Sxx = np.einsum("rni,rnj->rij", Xc, Xc)
    Sxy = np.einsum("rni,rn->ri", Xc, yc)
    coef = np.linalg.solve(Sxx, Sxy[..., None])[..., 0]
    r2 = np.einsum("ri,ri->r", coef, Sxy) / np.einsum("rn,rn->r", yc, yc)
    stages["policy fits"] = time.perf_counter() - t
    t = time.perf_counter()
    sd_x = np.sqrt(np.einsum("rii->ri", Sxx))
    sd_y = np.sqrt(np.einsum("rn,rn->r", yc, yc))
    utilization = Sxy / (sd_x * sd_y[:, None])
    cc = cb - cb.mean(axis=1, keepdims=True)
    r_a = np.einsum("rn,rn->r", yc, cc) / (sd_y * np.sqrt(np.einsum("rn,rn->r", cc, cc)))
    stages["correlations"] = time.perf_counter() - t
    t = time.perf_counter()
    rng = np.random.default_rng(seed)
    k = Xb.shape[2]
    ci = np.empty((R, 2))
    ones = np.concatenate([np.ones((R, n, 1)), Xb, yb[..., None]], axis=2)   # [1, x, y]
    per_case = np.einsum("rni,rnj->rnij", ones, ones).reshape(R, n, -1)
    for r in range(R):   # the same draws, in the same order, as the reference
        draws = rng.integers(0, n, size=(n_boot, n))
        counts = np.bincount((np.arange(n_boot)[:, None] * n + draws).ravel(),
                             minlength=n_boot * n).reshape(n_boot, n).astype(float)
        M = (counts @ per_case[r]).reshape(n_boot, k + 2, k + 2)
        m = M[:, 0, :] / n
        C = M[:, 1:, 1:] / n - m[:, 1:, None] * m[:, None, 1:]
        beta = np.linalg.solve(C[:, :k, :k], C[:, :k, k:])[..., 0]
        r_s = np.sqrt(np.clip(np.einsum("bi,bi->b", beta, C[:, :k, k]) / C[:, k, k], 0.0, 1.0))
        ci[r] = np.percentile(r_s, [2.5, 97.5])
    stages["bootstrap of R_s"] = time.perf_counter() - t
    stages["total"] = sum(stages.values())
    numbers = {"coef": dict(zip(raters, coef.tolist())), "r2": dict(zip(raters, r2.tolist())),
               "utilization": dict(zip(raters, utilization.tolist())),
               "r_a": dict(zip(raters, r_a.tolist())), "boot_ci": dict(zip(raters, ci.tolist()))}
    return {**stages, "numbers": numbers}


def largest_gap(reference: dict, floor: dict) -> float:
    """Largest absolute difference between the two workflows' shared numbers."""
    gap = 0.0
    for key in ("coef", "r2", "utilization", "r_a", "boot_ci"):
        for rater, value in reference[key].items():
            gap = max(gap, float(np.max(np.abs(np.asarray(value) - np.asarray(floor[key][rater])))))
    return gap


# ---------------------------------------------------------------------------------- main

def _median(runs: list[dict]) -> dict:
    keys = [k for k in runs[0] if k != "numbers"]
    return {k: statistics.median(r[k] for r in runs if k in r) for k in keys}


def _show(title: str, timings: dict) -> None:
    print(f"  {title}")
    for name, value in timings.items():
        unit = " GB" if name == "peak_gb" else (" MB" if name == "results_mb" else " s")
        print(f"    {name:<40} {value:9.2f}{unit}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="40,400", help="raters per panel, comma-separated")
    parser.add_argument("--design", default="shared,linked")
    parser.add_argument("--runs", type=int, default=3, help="runs per measurement (median)")
    parser.add_argument("--pdf-size", type=int, default=40, help="also time the audit with PDFs here")
    parser.add_argument("--no-reference", action="store_true", help="skip the per-rater workflow")
    parser.add_argument("--keep", type=Path, default=None, help="keep the panels and outputs here")
    args = parser.parse_args()
    base = args.keep or Path(tempfile.mkdtemp(prefix="bench_scale_"))
    for design in args.design.split(","):
        for size in (int(s) for s in args.sizes.split(",")):
            folder = base / f"{design}_{size}"
            folder.mkdir(parents=True, exist_ok=True)
            spec = make_panel(folder, size, design)
            print(f"\n{design} design, {size} raters x {PER_RATER} cases, {N_CUES} cues, "
                  f"{REPEAT_SHARE:.0%} repeats", flush=True)
            audit = _median([run_audit(spec, folder / "out", pdf=False) for _ in range(args.runs)])
            _show(f"calibrate audit --no-pdf (median of {args.runs})", audit)
            if size == args.pdf_size:
                with_pdf = _median([run_audit(spec, folder / "out_pdf", pdf=True)
                                    for _ in range(args.runs)])
                _show(f"calibrate audit with PDFs (median of {args.runs})", with_pdf)
                print(f"    PDFs: {(with_pdf['total'] - audit['total']) / size:.3f} s per rater "
                      "(one job)")
            if args.no_reference:
                continue
            runs = [run_reference(folder) for _ in range(args.runs)]
            reference = _median(runs)
            _show(f"per-rater workflow, whole process (median of {args.runs})", reference)
            if design == "shared":
                floor_runs = [vectorized_floor(folder) for _ in range(args.runs)]
                floor = _median(floor_runs)
                _show(f"vectorized numpy floor of the same numbers (median of {args.runs})", floor)
                print(f"    floor vs per-rater workflow: largest difference "
                      f"{largest_gap(runs[0]['numbers'], floor_runs[0]['numbers']):.1e}")
            print(f"  ratio, whole process: per-rater workflow / audit = "
                  f"{reference['total'] / audit['total']:.2f}x wall clock, "
                  f"{reference['cpu'] / audit['cpu']:.2f}x CPU time", flush=True)


if __name__ == "__main__":
    main()
