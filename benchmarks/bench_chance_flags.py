"""How often ordinary raters are flagged: per rater for each flag, and per panel.

Runs the real ``calibrate.audit`` on simulated study folders (``tests/chance_panels.py``:
straight-line policies on a 1-7 scale with a ceiling, hidden repeats with good retest,
no planted offset, drift, cut-off or excluded effect) and reports

* per flag, the share of raters whose per-rater test rejects at the unadjusted 5%
  (tested flags) or who carry the flag (rules and data conditions);
* the share of panels showing any flag that is not a data condition, against the
  panel-wise rate stated in results.json (``panels[].chance_flags.panelwise_rate``),
  with its 99.9% binomial interval (Clopper-Pearson);
* the mean number of tested flags shown per panel against ``expected_chance_flags``.

    PYTHONPATH=. python benchmarks/bench_chance_flags.py --panels 100
"""

from __future__ import annotations

import argparse
import collections
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calibrate.analyses import TESTED_FLAGS, audit  # noqa: E402
from tests.chance_panels import DATA_CONDITIONS, chance_flags, write_ordinary_panel  # noqa: E402


def clopper_pearson(k: int, n: int, level: float = 0.999) -> tuple[float, float]:
    a = (1 - level) / 2
    low = stats.beta.ppf(a, k, n - k + 1) if k else 0.0
    high = stats.beta.ppf(1 - a, k + 1, n - k) if k < n else 1.0
    return float(low), float(high)


def run(n_panels: int, seed0: int, n_boot: int, **options) -> dict:
    per_test = collections.defaultdict(list)      # (flag, test) -> unadjusted p < .05
    carried = collections.Counter()
    n_raters = 0
    any_flag = any_tested = 0
    shown, stated, expected = [], [], []
    reach = []
    with tempfile.TemporaryDirectory() as folder:
        for s in range(seed0, seed0 + n_panels):
            spec = write_ordinary_panel(Path(folder) / f"panel{s}", s, **options)
            result = audit(spec, n_boot=n_boot)
            d = result.to_dict()
            tests = result.tables["chance_flags"]
            for (flag, test), group in tests.groupby(["flag", "test"]):
                key = (flag, "attribute" if flag == "excluded_attribute" else test)
                per_test[key] += list(group["p_value"] < 0.05)
            for e in d["raters"]:
                n_raters += 1
                carried.update(e["flags"])
                if e["retest"] is not None:
                    reach.append((e["retest"]["n_pairs"], e["retest"]["flag_detectable_below"]))
            panel = d["panels"][0]["chance_flags"]
            stated.append(panel["panelwise_rate"])
            expected.append(panel["expected_chance_flags"])
            shown.append(panel["flags_shown"])
            any_flag += bool(chance_flags(d))
            any_tested += panel["flags_shown"] > 0
    return {"n_panels": n_panels, "n_raters": n_raters, "per_test": dict(per_test),
            "carried": carried, "any_flag": any_flag, "any_tested": any_tested,
            "stated": float(np.mean(stated)), "expected": float(np.mean(expected)),
            "shown": float(np.mean(shown)), "reach": reach}


def report(out: dict) -> None:
    n, R = out["n_panels"], out["n_raters"]
    print(f"{n} panels, {R} rater-phases")
    print("per-rater rate of each tested flag's own test at the unadjusted 5%:")
    for (flag, test), hits in sorted(out["per_test"].items()):
        k = int(np.sum(hits))
        lo, hi = clopper_pearson(k, len(hits))
        print(f"  {flag:20s} {test:12s} {100 * k / len(hits):5.1f}%  (99.9%: {100 * lo:.1f}-{100 * hi:.1f}%, "
              f"{len(hits)} tests)")
    print("share of raters carrying each flag (after the panel-wide decision):")
    for flag, k in sorted(out["carried"].items()):
        kind = ("tested" if flag in TESTED_FLAGS else "data condition" if flag in DATA_CONDITIONS else "rule")
        print(f"  {flag:20s} {100 * k / R:5.2f}%  ({kind})")
    for label, k in (("any tested flag", out["any_tested"]), ("any flag that is not a data condition",
                                                             out["any_flag"])):
        lo, hi = clopper_pearson(k, n)
        print(f"panels with {label}: {k} of {n} = {100 * k / n:.1f}% (99.9%: {100 * lo:.1f}-{100 * hi:.1f}%); "
              f"stated panel-wise rate {100 * out['stated']:.1f}%")
    print(f"tested flags shown per panel: {out['shown']:.3f}; stated expected {out['expected']:.3f}")
    pairs = collections.defaultdict(list)
    for n_pairs, value in out["reach"]:
        pairs[n_pairs].append(value)
    print("low_retest can flag only r below (median over raters, by number of repeats): "
          + ", ".join(f"{k}: {np.nanmedian(v):.2f}" for k, v in sorted(pairs.items())))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--panels", type=int, default=100)
    parser.add_argument("--seed", type=int, default=1000)
    parser.add_argument("--n-boot", type=int, default=200)
    parser.add_argument("--readers-per-case", type=int, default=None)
    parser.add_argument("--mean", type=float, default=4.5)
    args = parser.parse_args()
    start = time.perf_counter()
    out = run(args.panels, args.seed, args.n_boot, readers_per_case=args.readers_per_case, mean=args.mean)
    report(out)
    print(f"{time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
