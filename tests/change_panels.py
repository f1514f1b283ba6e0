"""Invented panels for checking a file's chance of changing side with one more reading.

Each panel: files with true values theta ~ N(0, case_sd^2), each read by ``readers`` raters
drawn at random from the panel (offsets ~ N(0, rater_sd^2)), noise ~ N(0, noise_sd^2);
on a 1-7 scale the judgment is ``4 + theta + offset + noise`` rounded and clipped. The
audit's per-file view estimates each file's ``change_probability``; then a fresh reader
(a new offset, known to the simulation and removed, as the adjusted scores remove the
panel's offsets) reads every file once more, and the file "changes" when its adjusted mean
with that reading lands on the other side of the cut-off. Shared by
``tests/unit/test_files.py`` (small, seeded) and ``benchmarks/bench_change_probability.py``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.agreement.files import file_view
from calibrate.agreement.offsets import severity


def one_panel(rng: np.random.Generator, *, n_raters: int = 20, n_cases: int = 300, readers: int = 3,
              case_sd: float = 1.0, rater_sd: float = 0.4, noise_sd: float = 0.7, scale: str = "continuous",
              cut_off: float = 0.3, contentious: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """(estimated change probabilities, whether each file changed with one fresh reading).
    ``contentious``: the share of files whose readers' noise SD is doubled (the model's one
    pooled spread does not hold then)."""
    theta = rng.normal(0.0, case_sd, n_cases)
    file_sd = np.full(n_cases, noise_sd)
    if contentious:  # drawn only then, so the other settings keep their random streams
        file_sd = noise_sd * np.where(rng.random(n_cases) < contentious, 2.0, 1.0)
    offsets = rng.normal(0.0, rater_sd, n_raters)
    chosen = np.argsort(rng.random((n_cases, n_raters)), axis=1)[:, :readers]
    case_idx = np.repeat(np.arange(n_cases), readers)
    rater_idx = chosen.ravel()
    centre = 4.0 if scale == "ordinal" else 0.0

    def judge(value):
        value = centre + value
        return np.clip(np.round(value), 1, 7) if scale == "ordinal" else value

    y = judge(theta[case_idx] + offsets[rater_idx] + rng.normal(0.0, 1.0, case_idx.size) * file_sd[case_idx])
    first = pd.DataFrame({"rater": [f"r{i:03d}" for i in rater_idx],
                          "case": [f"c{i:05d}" for i in case_idx], "judgment": y})
    lo, hi = (1, 7) if scale == "ordinal" else (-50, 50)
    sev = severity(first, scale="ordinal" if scale == "ordinal" else "continuous", scale_min=lo, scale_max=hi)
    cut = centre + cut_off
    view = file_view(first, sev, cut_off=cut)
    frame = pd.DataFrame([f.to_dict() for f in view.files]).set_index("case")
    cases = [f"c{i:05d}" for i in range(n_cases)]
    frame = frame.loc[cases]
    new_offset = rng.normal(0.0, rater_sd, n_cases)
    fresh = judge(theta + new_offset + rng.normal(0.0, 1.0, n_cases) * file_sd) - new_offset
    n = frame["n_readers"].to_numpy(float)
    m = frame["adjusted"].to_numpy(float)
    after = (n * m + fresh) / (n + 1.0)
    changed = (after >= cut) != (m >= cut)
    return frame["change_probability"].to_numpy(float), changed


def calibration(p: np.ndarray, changed: np.ndarray, edges=(0, .05, .1, .2, .3, .4, .5, 1.0001)) -> pd.DataFrame:
    """Per band of the estimated chance: files, mean estimate, share that changed."""
    band = np.digitize(p, edges) - 1
    rows = []
    for b in range(len(edges) - 1):
        inside = band == b
        if inside.any():
            rows.append({"band": f"{edges[b]:.2f}-{min(edges[b + 1], 1):.2f}", "files": int(inside.sum()),
                         "estimated": float(p[inside].mean()), "changed": float(changed[inside].mean())})
    return pd.DataFrame(rows)
