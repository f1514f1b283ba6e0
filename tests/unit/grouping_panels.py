"""Invented 1-7 panels with planted policy groups, shared by the grouping tests and
benchmarks/bench_grouping.py.

Each rater judges about 80% of 60-80 cases on 4-6 correlated cues; judgments are
``4 + leniency + cues @ weights + noise`` rounded and clipped to 1-7, with each
rater's own noise (SD 0.6 to 1.0) and leniency (SD 0.5). The shared policy weighs
the cues from heavy to none (``linspace(1, 0)``, scaled to a spread of about 1.1
points); the "different" policy reverses that order, so the cue the panel leans on
most is the one it ignores (weights correlate about 0.3 with the shared ones).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibrate.data.cues import CueRule, build_cue_design


def shared_and_reversed_policy(n_cues: int) -> tuple[np.ndarray, np.ndarray]:
    """The shared weights and the different (reversed) weights."""
    shared = np.linspace(1.0, 0.0, n_cues)
    shared *= 1.1 / np.linalg.norm(shared)
    return shared, shared[::-1].copy()


def scale_panel(seed: int, sizes: list[int], *, jitter: float = 0.0, share_seen: float = 0.8,
                n_cases: int | None = None, n_cues: int | None = None):
    """A 1-7 panel whose g-th block of ``sizes[g]`` raters follows policy g.

    Policy 0 is the shared one, policy 1 the reversed one. ``jitter`` adds each
    rater's own deviation (normal, this SD) to every weight: raters who share a
    policy in spirit but not to the decimal. Returns ``(design, first, truth)``
    with ``truth`` the planted policy of each rater (rater ids sort in block order).
    """
    rng = np.random.default_rng(seed)
    n_cases = n_cases or int(rng.integers(60, 81))
    p = n_cues or int(rng.integers(4, 7))
    mixing = np.full((p, p), 0.3) + 0.7 * np.eye(p)       # cues correlate 0.3
    X = rng.normal(size=(n_cases, p)) @ np.linalg.cholesky(mixing).T
    cases = pd.DataFrame(X, columns=[f"cue{j}" for j in range(p)],
                         index=[f"case{i:03d}" for i in range(n_cases)])
    design = build_cue_design(cases, [CueRule(c) for c in cases.columns])
    policies = shared_and_reversed_policy(p)
    blocks, truth, k = [], {}, 0
    for g, size in enumerate(sizes):
        for _ in range(size):
            rater = f"rev{k:04d}"
            k += 1
            truth[rater] = g
            weights = policies[g] + rng.normal(0.0, jitter, p)
            seen = np.flatnonzero(rng.random(n_cases) < share_seen)
            y = (4.0 + rng.normal(0.0, 0.5) + X[seen] @ weights
                 + rng.normal(0.0, rng.uniform(0.6, 1.0), seen.size))
            blocks.append(pd.DataFrame({"rater": rater,
                                        "case": np.asarray(design.case_ids)[seen],
                                        "judgment": np.clip(np.round(y), 1.0, 7.0)}))
    return design, pd.concat(blocks, ignore_index=True), truth


def lone_rater_kept_apart(result, truth) -> bool:
    """True when the one rater of policy 1 sits in a group of their own."""
    lone = next(r for r, g in truth.items() if g == 1)
    label = result.rater_group[lone]
    return label is not None and sum(v == label for v in result.rater_group.values()) == 1
