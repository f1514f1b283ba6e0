"""Score new files with a captured policy from an audit's policies.json.

A rater's captured policy is a linear model of their judgments on the cues; applied
to files nobody has rated yet it gives the judgment that rater would give if they
read the file exactly as they read the cases of the audit (judgment bootstrapping:
a consistent second reader, or a check on a human reading).

For one rater the 95% prediction interval of a new file is the ordinary
least-squares one, :math:`\\hat y \\pm t_{n-p-1}\\,s\\sqrt{1 + 1/n + d^\\top S^{-1} d}`
with :math:`d` the file's design columns minus the means over the rater's cases
and :math:`S` their centred cross-products (e.g. Weisberg 2005, *Applied Linear
Regression*, 3rd ed., section 3.7; checked against statsmodels'
``get_prediction``). The panel's policy is the plain mean of the fitted raters'
intercepts and weights: a typical reader, for which no prediction interval is
given (it is not one person's regression). A group's policy (``group:LABEL``) is the
group's common equation from the audit's grouping: the pooled-within-rater weights
(one set of weights, each member's own level removed), with the intercept that puts
the line through the members' mean judgment at their mean case,
:math:`b_0 = \overline{\bar y_j} - w^\top \overline{\bar x_j}`, which equals the mean of
the members' fixed effects in a regression with one intercept per rater (checked
against statsmodels OLS with rater dummies). No prediction interval either.

Each cue's contribution is its weight times how far the file sits from the
average of the rater's cases, so the baseline (the rater's prediction for their
average case) plus the contributions equals the prediction.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats as sps

from ..errors import CalibrateError, DataError, DataProblem
from ..result_base import ResultMixin

__all__ = ["GROUP_PREFIX", "PANEL", "ScoredFiles", "load_policies", "score_files"]

PANEL = "panel"
GROUP_PREFIX = "group:"
SCORABLE_SCHEMAS = ("calibrate.policies/2",)


def load_policies(path: Path | str) -> dict[str, Any]:
    """Read policies.json (as written by ``calibrate audit``), checking its schema."""
    path = Path(path)
    if not path.is_file():
        raise CalibrateError(f"the policies file {path} does not exist; it is written by 'calibrate audit'.")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CalibrateError(f"{path} is not a readable policies.json ({exc}).") from exc
    phases = data.get("phases") if isinstance(data, dict) else None
    if not isinstance(phases, dict) or not phases:
        raise CalibrateError(f"{path} holds no phases; it must be the policies.json of an audit.")
    for label, phase in phases.items():
        if phase.get("schema") not in SCORABLE_SCHEMAS:
            raise CalibrateError(
                f"{path}, phase '{label}': schema {phase.get('schema')!r} cannot be scored "
                f"(needs {' or '.join(SCORABLE_SCHEMAS)}); run the audit again with this version.")
    return data


@dataclass(frozen=True)
class ScoredFiles(ResultMixin):
    """Predicted judgments of new files under one captured policy."""

    policy: str                  # rater name, or "panel"
    phase: str
    files: tuple[str, ...]
    predicted: np.ndarray        # (n,)
    lower: np.ndarray            # (n,) 95% prediction interval (NaN for the panel policy)
    upper: np.ndarray
    baseline: float              # prediction for the average case the policy was fitted on
    contributions: pd.DataFrame  # (n, cues): weight x (value - mean), summed per cue
    outside_range: tuple[tuple[str, ...], ...]  # per file, cues outside the fitted range
    level: float = 0.95

    def to_frame(self) -> pd.DataFrame:
        frame = pd.DataFrame({
            "file": list(self.files), "predicted": self.predicted,
            "interval_low": self.lower, "interval_high": self.upper,
            "outside_fitted_range": [";".join(c) for c in self.outside_range],
        })
        contrib = self.contributions.add_prefix("contribution:").reset_index(drop=True)
        return pd.concat([frame, contrib], axis=1)

    def to_dict(self) -> dict:
        return {"policy": self.policy, "phase": self.phase, "level": self.level,
                "baseline": self.baseline, "files": self.to_frame().to_dict(orient="records")}


def score_files(policies: dict[str, Any], files: pd.DataFrame, *, policy: str, phase: str | None = None,
                file_column: str = "file", source: str = "the files table",
                level: float = 0.95) -> ScoredFiles:
    """Apply one captured policy to new files.

    Parameters
    ----------
    policies : the parsed policies.json (:func:`load_policies`).
    files : one row per new file: ``file_column`` plus one column per cue.
    policy : a rater's name, ``"panel"`` for the mean policy of the fitted raters, or
        ``"group:LABEL"`` for a group's common equation (policies.json from an audit that
        grouped the raters).
    phase : which phase's policies (default: the only one, or the first).
    source : how error messages name the files table.

    Raises
    ------
    DataError
        A cue column is missing, or a value is missing or unknown (file, row and
        column named).
    CalibrateError
        Unknown rater or phase, or a rater whose policy could not be fitted.
    """
    if not 0 < level < 1:
        raise CalibrateError(f"The prediction interval level must be between 0 and 1; got {level!r}.")
    phases = policies["phases"]
    label = phase if phase is not None else next(iter(phases))
    if label not in phases:
        raise CalibrateError(f"No phase '{label}' in the policies; phases: {', '.join(phases)}.")
    captured = phases[label]
    fitted = {p["rater"]: p for p in captured["policies"] if p.get("fitted") and p.get("prediction")}
    if policy == PANEL:
        if not fitted:
            raise CalibrateError(f"No rater's policy was fitted in phase '{label}'; nothing to score with.")
        columns = list(captured["design"]["columns"])
        weights = {c: float(np.mean([p["weights"].get(c, 0.0) or 0.0 for p in fitted.values()])) for c in columns}
        intercept = float(np.mean([p["intercept"] for p in fitted.values()]))
        terms = _panel_terms(fitted.values(), columns)
    elif policy.startswith(GROUP_PREFIX):
        columns, weights, intercept, terms = _group_policy(captured, fitted, policy[len(GROUP_PREFIX):], label)
    else:
        if policy not in fitted:
            known = [p["rater"] for p in captured["policies"]]
            if policy in known:
                raise CalibrateError(f"Rater '{policy}' has no fitted policy in phase '{label}'; choose another.")
            raise CalibrateError(f"No rater '{policy}' in phase '{label}'; raters: {', '.join(known)}, or 'panel'.")
        chosen = fitted[policy]
        terms = chosen["prediction"]
        columns = list(terms["columns"])
        weights = {c: float(chosen["weights"][c]) for c in columns}
        intercept = float(chosen["intercept"])
    X, ids = design_rows(captured["design"], files, columns, file_column=file_column, source=source)
    w = np.array([weights[c] for c in columns])
    means = np.array([terms["column_means"][c] for c in columns])
    predicted = intercept + X @ w
    baseline = float(intercept + means @ w)
    deviation = X - means
    per_column = deviation * w
    owner = _owner_of_columns(captured["design"])
    cues = [c["name"] for c in captured["design"]["cues"]]
    contributions = pd.DataFrame(
        {cue: per_column[:, [j for j, c in enumerate(columns) if owner[c] == cue]].sum(axis=1) for cue in cues})
    low = np.array([terms["column_min"][c] for c in columns])
    high = np.array([terms["column_max"][c] for c in columns])
    outside = (X < low) | (X > high)
    outside_range = tuple(tuple(dict.fromkeys(owner[columns[j]] for j in np.flatnonzero(row))) for row in outside)
    if policy == PANEL or policy.startswith(GROUP_PREFIX):
        lower = upper = np.full(len(ids), np.nan)
    else:
        S_inv = np.array(terms["centred_inverse"], dtype=float).reshape(len(columns), len(columns))
        leverage = 1.0 / terms["n_cases"] + np.einsum("ij,jk,ik->i", deviation, S_inv, deviation)
        half = sps.t.ppf(0.5 + level / 2, terms["df_resid"]) * np.sqrt(terms["residual_variance"] * (1.0 + leverage))
        lower, upper = predicted - half, predicted + half
    return ScoredFiles(policy=policy, phase=label, files=tuple(ids), predicted=predicted, lower=lower,
                       upper=upper, baseline=baseline, contributions=contributions,
                       outside_range=outside_range, level=level)


def _group_policy(captured: dict[str, Any], fitted: dict[str, Any], group: str, label: str):
    """(columns, weights, intercept, terms) of a group's common equation (module doc)."""
    groups = {g["group"]: g for g in captured.get("groups") or []}
    if group not in groups:
        if not groups:
            raise CalibrateError(f"The policies hold no groups for phase '{label}' (the audit did not group "
                                 "the raters); score with a rater's policy or 'panel'.")
        raise CalibrateError(f"No group '{group}' in phase '{label}'; groups: {', '.join(groups)}.")
    members = [fitted[r] for r in groups[group]["raters"] if r in fitted]
    if not members:
        raise CalibrateError(f"No member of group '{group}' has a fitted policy in phase '{label}'.")
    columns = list(captured["design"]["columns"])
    weights = {c: float(groups[group]["weights"].get(c, 0.0) or 0.0) for c in columns}
    terms = _panel_terms(members, columns)
    mean_judgment = np.mean([p["intercept"] + sum((p["weights"].get(c) or 0.0) * p["prediction"]["column_means"][c]
                                                  for c in p["prediction"]["columns"]) for p in members])
    intercept = float(mean_judgment - sum(weights[c] * terms["column_means"][c] for c in columns
                                          if np.isfinite(terms["column_means"][c])))
    return columns, weights, intercept, terms


def _panel_terms(fitted, columns) -> dict[str, Any]:
    """Means and ranges over all the fitted raters' cases (no interval terms)."""
    fitted = list(fitted)
    pick = lambda key, agg: {c: agg([p["prediction"][key][c] for p in fitted if c in p["prediction"][key]]
                                    or [np.nan]) for c in columns}
    return {"column_means": pick("column_means", np.mean), "column_min": pick("column_min", min),
            "column_max": pick("column_max", max)}


def _owner_of_columns(design: dict[str, Any]) -> dict[str, str]:
    return {col: cue["name"] for cue in design["cues"] for col in cue["columns"]}


def design_rows(design: dict[str, Any], files: pd.DataFrame, columns: list[str], *,
                file_column: str = "file", source: str = "the files table") -> tuple[np.ndarray, list[str]]:
    """Rebuild the policy's design columns for new files, as the audit built them.

    Numeric cues enter as they are; a missing value is filled with the audit's mean
    and flagged in the ``:missing`` column when the cue had that rule, and is an error
    otherwise. A categorical cue becomes one 0/1 column per non-reference level.
    """
    problems: list[DataProblem] = []
    if file_column not in files.columns:
        raise DataError([DataProblem(f"No '{file_column}' column naming each file "
                                     f"(columns: {', '.join(str(c) for c in files.columns if c != '_row')}).",
                                     file=source, column=file_column)])
    wanted = set(columns)
    line = (files["_row"].to_numpy() if "_row" in files.columns else np.arange(len(files)) + 2)
    values: dict[str, np.ndarray] = {}
    n = len(files)
    for cue in design["cues"]:
        name = cue["name"]
        if not wanted & set(cue["columns"]):
            continue
        if name not in files.columns:
            problems.append(DataProblem(f"Cue '{name}' is missing: the policy needs it.", file=source, column=name))
            continue
        raw = files[name]
        if cue["kind"] == "categorical":
            text = raw.astype("string")
            known = set(cue["levels"]) | {cue.get("reference_level")}
            for i in range(n):
                if pd.isna(raw.iloc[i]) or str(text.iloc[i]) not in known:
                    shown = "empty" if pd.isna(raw.iloc[i]) else f"'{text.iloc[i]}'"
                    problems.append(DataProblem(
                        f"Cue '{name}' is {shown}; the policy knows {', '.join(sorted(map(str, known)))}.",
                        file=source, row=int(line[i]), column=name))
            for col, lvl in zip(cue["columns"], cue["levels"]):
                values[col] = (text == lvl).fillna(False).to_numpy(dtype=float)
            continue
        x = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(~np.isfinite(x))
        indicator = cue.get("missing_indicator")
        for i in bad:
            if pd.isna(raw.iloc[i]) and cue.get("missing_rule") == "indicator":
                continue
            what = "empty" if pd.isna(raw.iloc[i]) else f"'{raw.iloc[i]}', not a number"
            problems.append(DataProblem(f"Cue '{name}' is {what}; a value is needed to score this file.",
                                        file=source, row=int(line[i]), column=name))
        miss = np.isnan(x)
        fill = cue.get("fill_value")
        values[cue["columns"][0]] = np.where(miss, fill if fill is not None else np.nan, x)
        if indicator:
            values[indicator] = miss.astype(float)
    if problems:
        raise DataError(problems)
    X = np.column_stack([values[c] for c in columns]) if columns else np.empty((n, 0))
    return X, files[file_column].astype(str).tolist()
