r"""The lens model with a criterion, and judgment bootstrapping.

When the study names a criterion (a later outcome, or an expert key score), the
same cues predict two things: the rater's judgment ``Y_s`` and the criterion
``Y_e``. Fitting both linear models on a rater's own criterion cases splits the
rater's accuracy ``r_a = corr(Y_s, Y_e)`` exactly (Tucker 1964):

.. math::

    r_a = G R_e R_s + C \sqrt{1 - R_e^2} \sqrt{1 - R_s^2}

with ``R_s`` and ``R_e`` the multiple correlations of the two models, ``G`` the
correlation of their predictions (matching) and ``C`` the correlation of their
residuals (unmodelled knowledge). The identity holds to rounding only when both
models are fitted by least squares on the same cases, so every rater gets their
own pair of fits; the gap is stored as ``lme_error``.

The prediction of the model of the rater correlates ``G R_e`` with the criterion
(its *validity*). When that exceeds ``r_a`` the rater's own rule, applied
consistently, beats the rater: judgment bootstrapping (Goldberg 1970; Dawes
1979). The in-sample figure is optimistic, so a k-fold cross-validated validity
is reported beside it, and a unit-weight composite (Dawes 1979) is the panel's
no-fitting baseline.

References
----------
Tucker, L. R. (1964). A suggested alternative formulation in the developments by
Hursch, Hammond and Hursch, and by Hammond, Hursch and Todd. Psychological Review 71, 528-530.
Goldberg, L. R. (1970). Man versus model of man. Psychological Bulletin 73, 422-432.
Dawes, R. M. (1979). The robust beauty of improper linear models in decision making.
American Psychologist 34, 571-582.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..data.cues import CueDesign
from ..data.rows import JudgmentRows, RaterLookup, line_up
from ..errors import DataError
from ..policy.linalg import grouped_sscp, ols_from_sscp
from ..result_base import ResultMixin

SELECTION_CAUTION = (
    "The outcome is known only for cases selected on the judgments themselves (for "
    "example admitted applicants). The lens figures (r_a, G, C, R_e, R_s and the model "
    "validities) describe those selected cases only and are biased by that selection, "
    "usually towards zero because the range of the outcome is cut."
)
PARTIAL_CRITERION_WARNING = (
    "The outcome is known for {known} of {total} judged cases; the lens model uses only those."
)


@dataclass(frozen=True)
class EnvironmentModel(ResultMixin):
    """Linear model of the criterion on the cues over every case with a criterion.

    ``ecological_validities`` are corr(cue column, criterion); ``weights`` the raw
    regression weights, both keyed by design column.
    """

    n: int
    r_e: float
    intercept: float
    weights: dict[str, float]
    ecological_validities: dict[str, float]

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({
            "column": list(self.weights),
            "weight": list(self.weights.values()),
            "ecological_validity": [self.ecological_validities[c] for c in self.weights],
        })


@dataclass(frozen=True)
class RaterLens(ResultMixin):
    """The lens model of one rater on that rater's cases with a criterion.

    ``to_dict()`` is the ``lens`` block of the rater in results.json.
    ``model_validity`` = corr(prediction of the model of the rater, criterion) = G * R_e;
    ``model_validity_cv`` the same with predictions from k-fold fits that did not
    see the case; ``bootstrap_gain`` = model_validity_cv - r_a.
    """

    rater: str
    n: int
    r_a: float
    g: float
    c: float
    r_e: float
    r_s: float
    model_validity: float
    model_validity_cv: float
    bootstrap_gain: float
    unit_weight_validity: float
    lme_error: float
    summary: str
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class LensResult(RaterLookup, ResultMixin):
    """Lens model for one phase: the environment, every rater, the unit-weight baseline."""

    environment: EnvironmentModel
    raters: tuple[RaterLens, ...]
    unit_weight_validity: float
    unit_weight_signs: dict[str, float]
    k_folds: int
    criterion_selected: bool
    cautions: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()


    @property
    def max_lme_error(self) -> float:
        errors = np.array([r.lme_error for r in self.raters], dtype=float)
        return float(np.nanmax(errors)) if np.isfinite(errors).any() else float("nan")

    def to_frame(self) -> pd.DataFrame:
        """One row per rater, the lens block as columns."""
        rows = [{k: v for k, v in r.to_dict().items() if k != "warnings"} for r in self.raters]
        return pd.DataFrame(rows)


def _bootstrap_sentence(r_a: float, cv: float) -> str:
    if not (np.isfinite(r_a) and np.isfinite(cv)):
        return "There were too few cases with a known outcome to compare the judgments with a model of them."
    if cv > r_a + 0.005:
        return (
            "A model of your own policy would have predicted the outcome better than your "
            f"judgments did (r = {cv:.2f} on cases it had not seen, against r = {r_a:.2f}): "
            "applying your own weights the same way every time would have helped."
        )
    if cv < r_a - 0.005:
        return (
            "Your judgments predicted the outcome better than a model of your own policy did "
            f"(r = {r_a:.2f}, against r = {cv:.2f} for the model on cases it had not seen): "
            "you used something the cues in the model do not capture."
        )
    return (
        f"Your judgments and a model of your own policy predicted the outcome about equally well "
        f"(r = {r_a:.2f} and {cv:.2f})."
    )


def _quadratic(a: np.ndarray, S: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.einsum("gi,gij,gj->g", a, S, b)


def _fold_labels(group: np.ndarray, n_groups: int, k_folds: int,
                 rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """A random fold per row, balanced within each rater; also each rater's fold count."""
    counts = np.bincount(group, minlength=n_groups)
    folds_per_rater = np.minimum(k_folds, counts)
    keys = rng.random(group.size)
    order = np.lexsort((keys, group))
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    rank_sorted = np.arange(group.size) - starts[group[order]]
    fold = np.empty(group.size, dtype=np.intp)
    fold[order] = rank_sorted % np.maximum(folds_per_rater[group[order]], 1)
    return fold, folds_per_rater


def cross_validated_validity(X: np.ndarray, y: np.ndarray, criterion: np.ndarray,
                             group: np.ndarray, n_groups: int, *, k_folds: int,
                             rng: np.random.Generator) -> np.ndarray:
    """k-fold validity of each group's linear model of ``y``: corr(out-of-fold prediction, criterion).

    All (group, fold) training fits are solved in one batch: each row is copied into
    the training set of every fold except its own, so the batched least squares sees
    ``n_groups * k_folds`` groups.
    """
    fold, _ = _fold_labels(group, n_groups, k_folds, rng)
    m, p = X.shape
    other = np.arange(k_folds)
    copy_row = np.repeat(np.arange(m), k_folds)
    copy_fold = np.tile(other, m)
    keep = copy_fold != fold[copy_row]
    copy_row, copy_fold = copy_row[keep], copy_fold[keep]
    train_group = group[copy_row] * k_folds + copy_fold
    Z = np.column_stack([X[copy_row], y[copy_row]])
    stats = grouped_sscp(Z, train_group, n_groups * k_folds)
    fit = ols_from_sscp(stats, list(range(p)), p)
    own = group * k_folds + fold
    with np.errstate(invalid="ignore"):
        prediction = fit.intercept[own] + np.einsum("mp,mp->m", X, fit.coef[own])
    usable = np.isfinite(prediction)
    failed_groups = np.unique(group[~usable])
    pair = grouped_sscp(np.column_stack([prediction[usable], criterion[usable]]),
                        group[usable], n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = pair.sscp[:, 0, 1] / np.sqrt(pair.sscp[:, 0, 0] * pair.sscp[:, 1, 1])
    r[failed_groups] = np.nan
    return r


def unit_weight_signs(design: CueDesign, ecological: np.ndarray,
                      rubric: dict[str, float] | None) -> np.ndarray:
    """+1 / -1 / 0 per design column for the unit-weight composite.

    A numeric cue named in the rubric takes the rubric weight's sign on its main column;
    every other column (dummies, missing-value indicators, cues outside the rubric)
    takes the sign of its ecological validity, since a rubric weight on a whole
    categorical cue says nothing about the direction of each level.
    """
    signs = np.sign(np.nan_to_num(ecological))
    if rubric:
        for j, (name, cue) in enumerate(zip(design.columns, design.cue_of_column)):
            if name == cue and cue in rubric and design.kinds.get(cue) != "categorical":
                signs[j] = np.sign(rubric[cue])
    return signs


def lens_model(
    design: CueDesign,
    first: pd.DataFrame,
    criterion: pd.Series,
    *,
    criterion_selected: bool = False,
    rng: np.random.Generator | int | None = None,
    k_folds: int = 5,
    rubric: dict[str, float] | None = None,
) -> LensResult:
    r"""Lens model of every rater against a criterion, with judgment bootstrapping figures.

    Parameters
    ----------
    design : the cue design of the phase.
    first : first judgments (columns rater, case, judgment).
    criterion : float Series indexed by case id; NaN where the outcome is unknown.
    criterion_selected : the outcome is known only for cases selected on the
        judgments (admitted applicants); a caution is attached to the result.
    rng : seed or generator for the fold assignment (same seed, same folds).
    k_folds : folds of the cross-validated model validity (fewer for a rater with
        fewer cases than folds).
    rubric : optional cue -> weight; its signs orient the unit-weight composite.

    Returns
    -------
    LensResult
        Per rater ``r_a = corr(Y_s, Y_e)``, ``R_s``, ``R_e``, ``G``, ``C`` from both
        models refitted on that rater's criterion cases, the Lens Model Equation gap
        ``|r_a - (G R_e R_s + C sqrt(1-R_e^2) sqrt(1-R_s^2))|`` (Tucker 1964), the model
        validity ``G R_e``, its k-fold value and the unit-weight validity (Dawes 1979).

    Raises
    ------
    DataError
        When ``k_folds`` is below 2, the criterion has no known value among judged
        cases, or the judgment table is malformed.
    """
    if k_folds < 2:
        raise DataError(f"k_folds must be at least 2 for cross-validation; got {k_folds}.")
    rng = np.random.default_rng(rng)
    rows = line_up(design, first)
    crit_by_row = _criterion_by_design_row(design, criterion)
    p = design.n_columns
    warnings: list[str] = []
    cautions: list[str] = []
    if criterion_selected:
        cautions.append(SELECTION_CAUTION)

    judged_rows = np.unique(rows.design_row)
    known_judged = np.isfinite(crit_by_row[judged_rows])
    if not known_judged.any():
        raise DataError("The criterion is unknown for every judged case; the lens model needs some outcomes.")
    if not known_judged.all():
        warnings.append(PARTIAL_CRITERION_WARNING.format(known=int(known_judged.sum()),
                                                          total=judged_rows.size))

    environment, ecological, env_rows = _environment(design, crit_by_row)
    signs = unit_weight_signs(design, ecological, rubric)
    composite, panel_unit = _unit_weight_composite(design, crit_by_row, env_rows, signs)

    with_crit = rows.subset(np.isfinite(crit_by_row[rows.design_row]))
    raters = _per_rater(with_crit, crit_by_row, composite, p, k_folds, rng)
    return LensResult(
        environment=environment,
        raters=raters,
        unit_weight_validity=panel_unit,
        unit_weight_signs={c: float(s) for c, s in zip(design.columns, signs)},
        k_folds=k_folds,
        criterion_selected=bool(criterion_selected),
        cautions=tuple(cautions),
        warnings=tuple(warnings),
    )


def _criterion_by_design_row(design: CueDesign, criterion: pd.Series) -> np.ndarray:
    values = pd.to_numeric(pd.Series(criterion), errors="coerce")
    values.index = values.index.astype(str)
    if values.index.has_duplicates:
        dup = sorted(set(values.index[values.index.duplicated()]))[:5]
        raise DataError(f"The criterion has more than one value for case(s) {', '.join(dup)}.")
    return values.reindex(list(design.case_ids)).to_numpy(dtype=float)


def _environment(design: CueDesign, crit_by_row: np.ndarray):
    p = design.n_columns
    env_rows = np.flatnonzero(np.isfinite(crit_by_row) & design.complete_rows())
    Z = np.column_stack([design.matrix[env_rows], crit_by_row[env_rows]])
    stats = grouped_sscp(Z, np.zeros(env_rows.size, dtype=np.intp), 1)
    fit = ols_from_sscp(stats, list(range(p)), p)
    with np.errstate(invalid="ignore", divide="ignore"):
        ecological = stats.correlation()[0, :p, p]
        r_e = float(np.sqrt(max(fit.r2[0], 0.0))) if fit.rank_ok[0] else float("nan")
    env = EnvironmentModel(
        n=int(env_rows.size),
        r_e=r_e,
        intercept=float(fit.intercept[0]),
        weights={c: float(w) for c, w in zip(design.columns, fit.coef[0])},
        ecological_validities={c: float(v) for c, v in zip(design.columns, ecological)},
    )
    return env, ecological, env_rows


def _unit_weight_composite(design: CueDesign, crit_by_row: np.ndarray,
                           env_rows: np.ndarray, signs: np.ndarray):
    """Sum of sign * z-score over design columns (z from the cases with a criterion)."""
    block = design.matrix[env_rows]
    centre = block.mean(axis=0) if env_rows.size else np.zeros(design.n_columns)
    spread = block.std(axis=0, ddof=1) if env_rows.size > 1 else np.ones(design.n_columns)
    usable = spread > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.where(usable, (design.matrix - centre) / np.where(usable, spread, 1.0), 0.0)
    composite = z @ np.where(usable, signs, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        panel = float(np.corrcoef(composite[env_rows], crit_by_row[env_rows])[0, 1]) \
            if env_rows.size > 2 and np.ptp(composite[env_rows]) > 0 else float("nan")
    return composite, panel


def _per_rater(rows: JudgmentRows, crit_by_row: np.ndarray, composite: np.ndarray,
               p: int, k_folds: int, rng: np.random.Generator) -> tuple[RaterLens, ...]:
    G = rows.n_raters
    crit = crit_by_row[rows.design_row]
    Z = np.column_stack([rows.X, rows.y, crit, composite[rows.design_row]])
    ys, yc, yu = p, p + 1, p + 2
    stats = grouped_sscp(Z, rows.group, G)
    judge = ols_from_sscp(stats, list(range(p)), ys)
    env = ols_from_sscp(stats, list(range(p)), yc)
    S = stats.sscp
    Sxx = S[:, :p, :p]
    Syy, Scc, Syc = S[:, ys, ys], S[:, yc, yc], S[:, ys, yc]
    b_s, b_e = judge.coef, env.coef
    with np.errstate(invalid="ignore", divide="ignore"):
        explained_s = _quadratic(b_s, Sxx, b_s)
        explained_e = _quadratic(b_e, Sxx, b_e)
        shared = _quadratic(b_s, Sxx, b_e)
        r_a = Syc / np.sqrt(Syy * Scc)
        r_s = np.sqrt(np.clip(explained_s / Syy, 0.0, 1.0))
        r_e = np.sqrt(np.clip(explained_e / Scc, 0.0, 1.0))
        g = shared / np.sqrt(explained_s * explained_e)
        validity = shared / np.sqrt(explained_s * Scc)
        residual_cov = Syc - np.einsum("gp,gp->g", b_s, S[:, :p, yc]) \
            - np.einsum("gp,gp->g", b_e, S[:, :p, ys]) + shared
        # A perfectly consistent rater (or environment) has no residual: C is undefined
        # there, but its term in the equation has weight zero.
        exact_s = judge.rss <= 1e-12 * Syy
        exact_e = env.rss <= 1e-12 * Scc
        c = np.where(exact_s | exact_e, np.nan, residual_cov / np.sqrt(judge.rss * env.rss))
        c_term = np.where(exact_s | exact_e, 0.0,
                          c * np.sqrt(1.0 - r_e**2) * np.sqrt(1.0 - r_s**2))
        lme_error = np.abs(r_a - (g * r_e * r_s + c_term))
        unit = S[:, yu, yc] / np.sqrt(S[:, yu, yu] * Scc)
    cv = cross_validated_validity(rows.X, rows.y, crit, rows.group, G, k_folds=k_folds, rng=rng)
    results = []
    n = rows.counts()
    for i, name in enumerate(rows.raters):
        notes = []
        ok = bool(judge.rank_ok[i] and env.rank_ok[i] and Syy[i] > 0 and Scc[i] > 0)
        if not ok:
            notes.append(
                f"Rater '{name}' has {int(n[i])} cases with a known outcome, constant judgments "
                "or cues that do not vary; the lens model cannot be fitted."
            )
            vals = dict.fromkeys(("r_a", "g", "c", "r_e", "r_s", "mv", "cv", "lme", "unit"), np.nan)
        else:
            if exact_s[i]:
                notes.append(f"Rater '{name}' follows the cues exactly (R_s = 1); C is undefined.")
            vals = dict(r_a=r_a[i], g=g[i], c=c[i], r_e=r_e[i], r_s=r_s[i], mv=validity[i],
                        cv=cv[i], lme=lme_error[i], unit=unit[i])
            if not np.isfinite(cv[i]):
                notes.append(f"Rater '{name}': too few cases per fold for the cross-validated validity.")
        results.append(RaterLens(
            rater=name,
            n=int(n[i]),
            r_a=float(vals["r_a"]),
            g=float(vals["g"]),
            c=float(vals["c"]),
            r_e=float(vals["r_e"]),
            r_s=float(vals["r_s"]),
            model_validity=float(vals["mv"]),
            model_validity_cv=float(vals["cv"]),
            bootstrap_gain=float(vals["cv"] - vals["r_a"]),
            unit_weight_validity=float(vals["unit"]),
            lme_error=float(vals["lme"]),
            summary=_bootstrap_sentence(float(vals["r_a"]), float(vals["cv"])),
            warnings=tuple(notes),
        ))
    return tuple(results)
