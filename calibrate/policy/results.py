"""Result objects of a policy capture: one per rater, one for the panel of a phase.

:func:`calibrate.policy.fit_policies` builds them; reports and results.json read
them. Mappings of weights are keyed by design column (a categorical cue's dummies
are ``cue=level``), mappings of importance by cue. ``to_dict()`` is JSON-safe
(NaN becomes null) and the ``*_frame()`` methods give tidy tables.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..result_base import ResultMixin, jsonable
from .resampling import share_interval_note


@dataclass(frozen=True)
class LogisticPolicy(ResultMixin):
    """Logistic fit of a binary decision: weights in log-odds, odds ratios, Tjur's R^2."""

    intercept: float
    weights: dict[str, float]
    se: dict[str, float]
    odds_ratios: dict[str, float]
    p_value: dict[str, float]
    tjur_r2: float
    converged: bool
    separation: bool


@dataclass(frozen=True)
class CaseToReview(ResultMixin):
    """A case far from the rater's own policy."""

    case: str
    judgment: float
    predicted: float           # the rater's policy, fitted on all their cases
    predicted_without: float   # the policy fitted without this case
    residual: float
    studentized: float


@dataclass(frozen=True)
class RaterPolicy(ResultMixin):
    """One rater's captured policy for one phase.

    ``weights``-like mappings are keyed by design column (a categorical cue's
    dummies are ``cue=level``); ``importance``-like mappings by cue.
    """

    rater: str
    n_cases: int
    intercept: float
    intercept_se: float
    weights: dict[str, float]
    se: dict[str, float]
    ci_low: dict[str, float]
    ci_high: dict[str, float]
    p_value: dict[str, float]
    std_weights: dict[str, float]
    utilization: dict[str, float]
    structure: dict[str, float]
    r: float
    r_ci: tuple[float, float]
    r2: float
    r2_adj: float
    r_cv: float
    importance: dict[str, float]
    importance_r2: dict[str, float]
    importance_ci: dict[str, tuple[float, float]]
    importance_method: str
    relative_weights_r2: dict[str, float]
    cases_per_weight: float
    vif: dict[str, float]
    gvif: dict[str, float]
    condition_number: float
    reset: dict[str, float]
    look_again: tuple[CaseToReview, ...]
    logistic: LogisticPolicy | None
    flags: tuple[str, ...]
    warnings: tuple[str, ...]

    def policy_dict(self) -> dict:
        """The ``raters[].policy`` block of results.json (DESIGN.md keys first)."""
        pair = lambda lo, hi: [lo, hi]  # JSON wants lists for intervals
        block = {
            "intercept": self.intercept,
            "weights": self.weights,
            "std_weights": self.std_weights,
            "importance": self.importance,
            "importance_r2": self.importance_r2,
            "r": self.r,
            "r_ci": list(self.r_ci),
            "r2_adj": self.r2_adj,
            "r_cv": self.r_cv,
            "r2": self.r2,
            "n_cases": self.n_cases,
            "intercept_se": self.intercept_se,
            "se": self.se,
            "ci": {c: pair(self.ci_low[c], self.ci_high[c]) for c in self.weights},
            "p_value": self.p_value,
            "utilization": self.utilization,
            "structure": self.structure,
            "importance_ci": {c: list(v) for c, v in self.importance_ci.items()},
            "importance_method": self.importance_method,
            "importance_interval_note": (share_interval_note(self.n_cases) if any(
                np.isfinite(v).all() for v in self.importance_ci.values()) else None),
            "relative_weights_r2": self.relative_weights_r2,
            "cases_per_weight": self.cases_per_weight,
            "vif": self.vif,
            "gvif": self.gvif,
            "condition_number": self.condition_number,
            "reset": self.reset,
            "look_again": [c.to_dict() for c in self.look_again],
            "logistic": None if self.logistic is None else self.logistic.to_dict(),
        }
        return jsonable(block)

    def to_dict(self) -> dict:
        return {
            "rater": self.rater,
            "n_cases": self.n_cases,
            "policy": self.policy_dict(),
            "flags": list(self.flags),
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class PredictionTerms(ResultMixin):
    """What a prediction interval for a new case needs, for one fitted rater.

    ``centred_inverse`` is :math:`S^{-1}`, the inverse of the centred
    cross-products of ``columns`` over the rater's cases, in that order.
    """

    rater: str
    n_cases: int
    residual_variance: float
    df_resid: float
    columns: tuple[str, ...]
    column_means: dict[str, float]
    column_min: dict[str, float]
    column_max: dict[str, float]
    centred_inverse: tuple[tuple[float, ...], ...]

    def to_dict(self) -> dict:
        return {
            "n_cases": self.n_cases, "residual_variance": self.residual_variance,
            "df_resid": self.df_resid, "columns": list(self.columns),
            "column_means": self.column_means, "column_min": self.column_min,
            "column_max": self.column_max, "centred_inverse": [list(r) for r in self.centred_inverse],
        }


@dataclass(frozen=True)
class PolicySet(ResultMixin):
    """The captured policies of every rater in one phase."""

    raters: tuple[RaterPolicy, ...]
    columns: tuple[str, ...]
    cue_of_column: tuple[str, ...]
    cues: tuple[str, ...]
    scale: str
    n_boot: int
    alpha: float
    warnings: tuple[str, ...] = field(default=())
    prediction: tuple[PredictionTerms, ...] = field(default=())
    reduced_forms: tuple[str, ...] = field(default=())   # plain sentences, one per reduced extra

    def __getitem__(self, rater: str) -> RaterPolicy:
        for policy in self.raters:
            if policy.rater == rater:
                return policy
        raise KeyError(rater)

    def to_dict(self) -> dict:
        return {
            "scale": self.scale,
            "n_boot": self.n_boot,
            "alpha": self.alpha,
            "columns": list(self.columns),
            "cues": list(self.cues),
            "raters": [p.to_dict() for p in self.raters],
            "warnings": list(self.warnings),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per rater: consistency, fit diagnostics and flags."""
        rows = [
            {
                "rater": p.rater, "n_cases": p.n_cases, "intercept": p.intercept,
                "r": p.r, "r_ci_low": p.r_ci[0], "r_ci_high": p.r_ci[1], "r2": p.r2,
                "r2_adj": p.r2_adj, "r_cv": p.r_cv, "cases_per_weight": p.cases_per_weight,
                "condition_number": p.condition_number, "reset_p_value": p.reset["p_value"],
                "reset_p_adjusted": p.reset["p_adjusted"],
                "tjur_r2": np.nan if p.logistic is None else p.logistic.tjur_r2,
                "flags": ";".join(p.flags),
            }
            for p in self.raters
        ]
        return pd.DataFrame(rows)

    def columns_frame(self) -> pd.DataFrame:
        """One row per rater x design column: weights with SE, CI, and related figures."""
        rows = []
        for p in self.raters:
            for c, cue in zip(self.columns, self.cue_of_column):
                rows.append({
                    "rater": p.rater, "column": c, "cue": cue, "estimate": p.weights[c],
                    "se": p.se[c], "ci_low": p.ci_low[c], "ci_high": p.ci_high[c],
                    "p_value": p.p_value[c], "std_weight": p.std_weights[c],
                    "utilization": p.utilization[c], "structure": p.structure[c],
                    "vif": p.vif[c],
                    "odds_ratio": np.nan if p.logistic is None else p.logistic.odds_ratios[c],
                })
        return pd.DataFrame(rows)

    def cues_frame(self) -> pd.DataFrame:
        """One row per rater x cue: relative importance with its interval, and GVIF."""
        rows = [
            {
                "rater": p.rater, "cue": cue, "importance": p.importance[cue],
                "ci_low": p.importance_ci[cue][0], "ci_high": p.importance_ci[cue][1],
                "importance_r2": p.importance_r2[cue],
                "relative_weight_r2": p.relative_weights_r2[cue], "gvif": p.gvif[cue],
                "method": p.importance_method,
            }
            for p in self.raters for cue in self.cues
        ]
        return pd.DataFrame(rows)
