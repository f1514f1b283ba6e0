"""Invented rating panels with planted truths, for the lens / alignment / cutoff tests.

Each rater sees a random subset of a common pool of cases (an incomplete design),
and judges with a linear policy plus normal noise unless a test plants something else.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibrate.data.cues import CueDesign, CueRule, build_cue_design


@dataclass
class Panel:
    cases: pd.DataFrame
    design: CueDesign
    first: pd.DataFrame
    rater_rows: dict[str, np.ndarray]   # rater -> positions in the case pool


def case_pool(rng: np.random.Generator, n_cases: int, *, categorical: bool = False) -> pd.DataFrame:
    """Three correlated numeric cues (different scales) and optionally a 3-level category."""
    z = rng.multivariate_normal(np.zeros(3), [[1, .4, .2], [.4, 1, .1], [.2, .1, 1]], size=n_cases)
    cases = pd.DataFrame({"grades": 70 + 8 * z[:, 0], "essay": 3 + 1.2 * z[:, 1],
                          "years": 2 + 1.5 * z[:, 2]},
                         index=pd.Index([f"case{i:04d}" for i in range(n_cases)], name="case"))
    if categorical:
        cases["letter"] = rng.choice(["solid", "strong", "weak"], size=n_cases, p=[.5, .3, .2])
    return cases


def rules_for(cases: pd.DataFrame) -> list[CueRule]:
    return [CueRule(c, "numeric" if pd.api.types.is_numeric_dtype(cases[c]) else "categorical")
            for c in cases.columns]


def linear_panel(rng: np.random.Generator, *, n_cases: int, n_raters: int, per_rater: int,
                 weights: np.ndarray, noise: np.ndarray | float, categorical: bool = False,
                 extra=None) -> Panel:
    """Raters judge ``design.matrix @ weights + noise``; ``extra(rater_index, rows)`` may add a plant."""
    cases = case_pool(rng, n_cases, categorical=categorical)
    design = build_cue_design(cases, rules_for(cases))
    noise = np.broadcast_to(np.asarray(noise, dtype=float), (n_raters,))
    frames, rater_rows = [], {}
    for r in range(n_raters):
        rows = np.sort(rng.choice(n_cases, per_rater, replace=False))
        y = design.matrix[rows] @ weights + noise[r] * rng.standard_normal(per_rater)
        if extra is not None:
            y = y + extra(r, rows)
        name = f"rater{r:04d}"
        rater_rows[name] = rows
        frames.append(pd.DataFrame({"rater": name, "case": np.asarray(design.case_ids)[rows], "judgment": y}))
    return Panel(cases, design, pd.concat(frames, ignore_index=True), rater_rows)


DEMO_RULES = [CueRule("grades"), CueRule("test_score", missing="indicator"), CueRule("essay"),
              CueRule("interview"), CueRule("field_years"), CueRule("recommendation", "categorical")]


def demo_phases():
    """(phase, design, first judgments, cases table) of the invented demo study, per phase."""
    from calibrate.data.demo import build_demo

    cases, judgments = build_demo()
    cases = cases.set_index("applicant")
    for phase, table in judgments.items():
        table = table.sort_values(["reviewer", "read_order"]).drop_duplicates(["reviewer", "applicant"])
        first = table.rename(columns={"reviewer": "rater", "applicant": "case", "score": "judgment"})
        pool = cases.loc[first["case"].unique()]
        yield phase, build_cue_design(pool, DEMO_RULES), first[["rater", "case", "judgment"]], pool
