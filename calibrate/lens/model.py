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
1979). The in-sample figure is optimistic, so the exact leave-one-out validity
is reported beside it (deterministic: no random folds), and the verdict compares
it with ``r_a`` as two dependent correlations sharing the criterion (Williams'
T2, Steiger 1980; Zou 2007 interval for the gain). A unit-weight composite
(Dawes 1979) is the panel's no-fitting baseline.

References
----------
Tucker, L. R. (1964). A suggested alternative formulation in the developments by
Hursch, Hammond and Hursch, and by Hammond, Hursch and Todd. Psychological Review 71, 528-530.
Goldberg, L. R. (1970). Man versus model of man. Psychological Bulletin 73, 422-432.
Dawes, R. M. (1979). The robust beauty of improper linear models in decision making.
American Psychologist 34, 571-582.
Steiger, J. H. (1980). Tests for comparing elements of a correlation matrix.
Psychological Bulletin 87, 245-251.
Zou, G. Y. (2007). Toward using confidence intervals to compare correlations.
Psychological Methods 12, 399-413.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as st

from ..data.cues import CueDesign
from ..data.rows import JudgmentRows, RaterLookup, line_up
from ..errors import DataError
from ..policy.diagnostics import case_influence
from ..policy.linalg import GroupedSSCP, grouped_sscp, ols_from_sscp, padded_layout
from ..policy.resampling import bca_interval, held_resamples
from ..policy.stacked import scaled_cue_factor
from ..result_base import ResultMixin

SELECTION_CAUTION = (
    "The outcome is known only for cases selected on the judgments themselves (for "
    "example admitted applicants). The lens figures (r_a, G, C, R_e, R_s and the model "
    "validities) describe those selected cases only and are biased by that selection, "
    "usually towards zero because the range of the outcome is cut. Selection on the "
    "judgments alone can also make the model of a rater look better than the rater."
)
#: A lens fit with fewer cases per design term than this carries a small-sample caution.
SMALL_SAMPLE_CASES_PER_TERM = 10
#: The lens figures that get a bootstrap interval, in results.json key order.
INTERVAL_FIGURES = ("r_a", "g", "c", "r_e")
LENS_INTERVAL_METHOD = (
    "case bootstrap of each rater's cases with a known outcome (both models refitted on every "
    "resample), bias-corrected and accelerated (BCa, Efron 1987) with a leave-one-out jackknife "
    "for the acceleration"
)


def small_sample_sentence(n: int, n_terms: int) -> str:
    """The one wording of the small-sample caution (results.json and the reports)."""
    return (f"Few cases: {n} with a known outcome, {n / n_terms:.1f} per term (under "
            f"{SMALL_SAMPLE_CASES_PER_TERM}); read these figures as rough.")


PARTIAL_CRITERION_WARNING = (
    "The outcome is known for {known} of {total} judged cases; the lens model uses only those."
)


@dataclass(frozen=True)
class EnvironmentModel(ResultMixin):
    """Linear model of the criterion on the cues over the judged cases with a criterion
    (in an audit: the cases of one phase).

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
    ``model_validity_cv`` the same with exact leave-one-out predictions (fits that did
    not see the case); ``bootstrap_gain`` = model_validity_cv - r_a;
    ``model_vs_rater`` the tested verdict (:func:`model_versus_rater`).
    ``*_ci_low``/``*_ci_high`` bound r_a, G, C and R_e (:func:`lens_intervals`; NaN when
    the fit fails or too few resamples can be refitted). ``small_sample`` is True when the
    fit has fewer than :data:`SMALL_SAMPLE_CASES_PER_TERM` cases per design term
    (``cases_per_term`` = n / number of design columns), and ``small_sample_note`` then
    says so in words.
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
    model_vs_rater: ModelVersusRater
    summary: str
    r_a_ci_low: float = float("nan")
    r_a_ci_high: float = float("nan")
    g_ci_low: float = float("nan")
    g_ci_high: float = float("nan")
    c_ci_low: float = float("nan")
    c_ci_high: float = float("nan")
    r_e_ci_low: float = float("nan")
    r_e_ci_high: float = float("nan")
    interval_level: float = 0.95
    interval_method: str = LENS_INTERVAL_METHOD
    n_boot: int = 0
    cases_per_term: float = float("nan")
    small_sample: bool = False
    small_sample_note: str | None = None
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class LensResult(RaterLookup, ResultMixin):
    """Lens model for one phase: the environment, every rater, the unit-weight baseline."""

    environment: EnvironmentModel
    raters: tuple[RaterLens, ...]
    unit_weight_validity: float
    unit_weight_signs: dict[str, float]
    criterion_selected: bool
    cautions: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()
    reduced_forms: tuple[str, ...] = ()


    @property
    def max_lme_error(self) -> float:
        errors = np.array([r.lme_error for r in self.raters], dtype=float)
        return float(np.nanmax(errors)) if np.isfinite(errors).any() else float("nan")

    def to_frame(self) -> pd.DataFrame:
        """One row per rater, the lens block as columns (the verdict flattened to ``model_vs_rater_*``)."""
        rows = []
        for r in self.raters:
            row = {k: v for k, v in r.to_dict().items() if k not in ("warnings", "model_vs_rater")}
            row.update({f"model_vs_rater_{k}": v for k, v in r.model_vs_rater.to_dict().items()})
            rows.append(row)
        return pd.DataFrame(rows)


def _bootstrap_sentence(result: ModelVersusRater, r_a: float, cv: float) -> str:
    if result.verdict == "not_available":
        return "There were too few cases with a known outcome to compare the judgments with a model of them."
    interval = f"gain {result.gain:+.2f}, 95% interval {result.ci_low:+.2f} to {result.ci_high:+.2f}"
    if result.verdict == "neither_tracks":
        return (f"Neither your judgments (r = {r_a:.2f}) nor a model of your own policy (r = {cv:.2f} on "
                "cases it had not seen) tracked the outcome clearly on these cases.")
    if result.verdict == "model_better":
        return (
            "A model of your own policy would have predicted the outcome better than your "
            f"judgments did (r = {cv:.2f} on cases it had not seen, against r = {r_a:.2f}; {interval}): "
            "applying your own weights the same way every time would have helped."
        )
    if result.verdict == "rater_better":
        return (
            "Your judgments predicted the outcome better than a model of your own policy did "
            f"(r = {r_a:.2f}, against r = {cv:.2f} for the model on cases it had not seen; {interval}): "
            "you used something the cues in the model do not capture."
        )
    return (
        f"Your judgments and a model of your own policy predicted the outcome about equally well "
        f"(r = {r_a:.2f} and {cv:.2f}; {interval}): this many cases cannot tell them apart."
    )


MODEL_VS_RATER_METHOD = (
    "exact leave-one-out validity of the model of the rater; Zou (2007) 95% interval for the "
    "difference of two dependent correlations sharing the outcome; Williams' T2 p-value (Steiger 1980)"
)
VERDICTS = ("model_better", "rater_better", "about_same", "neither_tracks", "not_available")


@dataclass(frozen=True)
class ModelVersusRater(ResultMixin):
    """Which predicted the outcome better: the rater, or the leave-one-out model of the rater.

    ``gain`` = model validity (leave-one-out) - r_a; ``ci_low``/``ci_high`` its 95%
    interval (Zou 2007); ``p_value`` the two-sided Williams T2 test of no difference
    (Steiger 1980, eq. 7). ``verdict`` is one of :data:`VERDICTS` and is decided by
    :func:`model_versus_rater` only.
    """

    verdict: str
    gain: float
    ci_low: float
    ci_high: float
    p_value: float
    method: str = MODEL_VS_RATER_METHOD


def _fisher_interval(r: np.ndarray, n: np.ndarray, z_crit: float) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.arctanh(np.clip(r, -1 + 1e-15, 1 - 1e-15))
        half = z_crit / np.sqrt(n - 3.0)
    return np.tanh(z - half), np.tanh(z + half)


def dependent_correlation_test(r_jk, r_jh, r_kh, n, *, level: float = 0.95):
    """Compare corr(j, k) with corr(j, h) on the same cases (k and h correlate r_kh).

    Returns ``(t, df, p_two_sided, ci_low, ci_high)`` for ``r_jk - r_jh``, vectorised.

    ``t`` is Williams' T2 as given by Steiger (1980, Psychological Bulletin 87, 245-251,
    eq. 7), on ``n - 3`` degrees of freedom. The interval is Zou's (2007, Psychological
    Methods 12, 399-413, eq. 15 with the correlation of eq. 16 for overlapping
    correlations): Fisher-z limits of each correlation, recombined with their
    correlation so that it needs no normality of the difference itself.
    """
    r_jk, r_jh, r_kh, n = (np.asarray(v, dtype=float) for v in (r_jk, r_jh, r_kh, n))
    with np.errstate(invalid="ignore", divide="ignore"):
        det = 1.0 - r_jk**2 - r_jh**2 - r_kh**2 + 2.0 * r_jk * r_jh * r_kh
        mean_r = (r_jk + r_jh) / 2.0
        t = (r_jk - r_jh) * np.sqrt((n - 1.0) * (1.0 + r_kh) / (
            2.0 * (n - 1.0) / (n - 3.0) * det + mean_r**2 * (1.0 - r_kh) ** 3))
        df = n - 3.0
        p = 2.0 * st.t.sf(np.abs(t), df)
        z_crit = st.norm.ppf(0.5 + level / 2.0)
        l1, u1 = _fisher_interval(r_jk, n, z_crit)
        l2, u2 = _fisher_interval(r_jh, n, z_crit)
        c12 = ((r_kh - 0.5 * r_jk * r_jh) * (1.0 - r_jk**2 - r_jh**2 - r_kh**2) + r_kh**3) / (
            (1.0 - r_jk**2) * (1.0 - r_jh**2))
        d = r_jk - r_jh
        low = d - np.sqrt(np.maximum((r_jk - l1) ** 2 + (u2 - r_jh) ** 2
                                     - 2.0 * c12 * (r_jk - l1) * (u2 - r_jh), 0.0))
        high = d + np.sqrt(np.maximum((u1 - r_jk) ** 2 + (r_jh - l2) ** 2
                                      - 2.0 * c12 * (u1 - r_jk) * (r_jh - l2), 0.0))
    return t, df, p, low, high


def model_versus_rater(r_a: float, model_cv: float, r_model_judgment: float, n: int,
                       *, level: float = 0.95) -> ModelVersusRater:
    """The one verdict on judgment bootstrapping, for results.json and the reports alike.

    ``neither_tracks`` when neither correlation's Fisher-z interval lies above zero
    (both near zero or negative: no winner is worth naming); otherwise a winner only
    when the interval of the gain excludes zero, else ``about_same``.
    """
    return models_versus_raters(np.array([r_a], dtype=float), np.array([model_cv], dtype=float),
                                np.array([r_model_judgment], dtype=float), np.array([n]), level=level)[0]


def models_versus_raters(r_a: np.ndarray, model_cv: np.ndarray, r_model_judgment: np.ndarray,
                         n: np.ndarray, *, level: float = 0.95) -> list[ModelVersusRater]:
    """:func:`model_versus_rater` of every rater at once (one vectorised test, the same numbers)."""
    r_a, model_cv, r_model_judgment = (np.asarray(v, dtype=float) for v in (r_a, model_cv, r_model_judgment))
    n = np.asarray(n, dtype=float)
    available = np.isfinite(r_a) & np.isfinite(model_cv) & np.isfinite(r_model_judgment) & (n >= 5)
    with np.errstate(invalid="ignore", divide="ignore"):
        _, _, p, low, high = dependent_correlation_test(model_cv, r_a, r_model_judgment, n, level=level)
        z_crit = float(st.norm.ppf(0.5 + level / 2.0))
        low_a, _ = _fisher_interval(r_a, n, z_crit)
        low_m, _ = _fisher_interval(model_cv, n, z_crit)
    nan = float("nan")
    out = []
    for i in range(r_a.size):
        if not available[i]:
            out.append(ModelVersusRater("not_available", nan, nan, nan, nan))
            continue
        if low_a[i] <= 0 and low_m[i] <= 0:
            verdict = "neither_tracks"
        elif low[i] > 0:
            verdict = "model_better"
        elif high[i] < 0:
            verdict = "rater_better"
        else:
            verdict = "about_same"
        out.append(ModelVersusRater(verdict, float(model_cv[i] - r_a[i]), float(low[i]), float(high[i]),
                                    float(p[i])))
    return out


def leave_one_out_predictions(X: np.ndarray, y: np.ndarray, group: np.ndarray,
                              n_groups: int) -> np.ndarray:
    """Each row's prediction from its group's least-squares fit without that row.

    Exact and deterministic: the deletion identity ``y_i - e_i / (1 - h_ii)`` of
    :func:`calibrate.policy.diagnostics.case_influence` on one batched solve. NaN for
    groups whose fit is rank deficient and for rows with leverage 1.
    """
    p = X.shape[1]
    stats = grouped_sscp(np.column_stack([X, y]), group, n_groups)
    fit = ols_from_sscp(stats, list(range(p)), p)
    with np.errstate(invalid="ignore", divide="ignore"):
        influence = case_influence(X, y, group, stats, fit)
    out = np.where(influence.leverage < 1.0 - 1e-10, influence.loo_prediction, np.nan)
    out[~fit.rank_ok[group]] = np.nan
    return out


def _quadratic(a: np.ndarray, S: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.einsum("gi,gij,gj->g", a, S, b)


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
    rubric: dict[str, float] | None = None,
    n_boot: int = 1000,
    rng: np.random.Generator | None = None,
    level: float = 0.95,
    scale_down: bool = True,
) -> LensResult:
    r"""Lens model of every rater against a criterion, with judgment bootstrapping figures.

    Parameters
    ----------
    design : the cue design of the phase.
    first : first judgments (columns rater, case, judgment).
    criterion : float Series indexed by case id; NaN where the outcome is unknown.
    criterion_selected : the outcome is known only for cases selected on the
        judgments (admitted applicants); a caution is attached to the result.
    rubric : optional cue -> weight; its signs orient the unit-weight composite.
    n_boot : case-bootstrap resamples for the intervals of r_a, G, C and R_e (0: none).
    rng : random generator of the bootstrap (default: a fixed seed, so repeated calls agree).
    level : confidence level of those intervals.
    scale_down : above :data:`LENS_FULL_RESAMPLE_RATERS` raters with cases of their own
        (not shared by a block of raters), fewer resamples for those raters
        (:func:`lens_resamples`), stated in ``reduced_forms``; False: always ``n_boot``.

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
        When the criterion has no known value among judged
        cases, or the judgment table is malformed.
    """
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

    environment, ecological, env_rows = _environment(design, crit_by_row, judged_rows)
    signs = unit_weight_signs(design, ecological, rubric)
    composite, panel_unit = _unit_weight_composite(design, crit_by_row, env_rows, signs)

    with_crit = rows.subset(np.isfinite(crit_by_row[rows.design_row]))
    blocks = shared_case_blocks(with_crit.design_row, with_crit.group, with_crit.n_raters)
    alone = with_crit.n_raters - sum(b.size for b in blocks)
    independent = lens_resamples(n_boot, alone) if scale_down else n_boot
    reduced = []
    if independent < n_boot:
        reduced.append(f"The intervals of r_a, G, C and R_e (lens model) from {independent:,} resamples "
                       f"instead of {n_boot:,} for the {alone:,} raters who do not read the same cases "
                       f"as {SHARED_BLOCK_MIN_RATERS - 1} or more others, on this panel size.")
    raters = _per_rater(with_crit, crit_by_row, composite, p, n_boot=n_boot,
                        rng=np.random.default_rng(0) if rng is None else rng, level=level,
                        independent_resamples=independent, blocks=blocks)
    return LensResult(
        environment=environment,
        raters=raters,
        unit_weight_validity=panel_unit,
        unit_weight_signs={c: float(s) for c, s in zip(design.columns, signs)},
        criterion_selected=bool(criterion_selected),
        cautions=tuple(cautions),
        warnings=tuple(warnings),
        reduced_forms=tuple(reduced),
    )


#: Up to this many raters with cases of their own, their lens intervals use all resamples.
LENS_FULL_RESAMPLE_RATERS = 500
#: Above it (unless the full form is asked for), those raters x resamples is held to this...
LENS_RESAMPLE_WORK = LENS_FULL_RESAMPLE_RATERS * 1000
#: ... with never fewer resamples than this (coverage in benchmarks/bench_lens_intervals.py).
LENS_MIN_RESAMPLES = 250


def lens_resamples(n_boot: int, n_raters: int) -> int:
    """Resamples for the raters with cases of their own: as asked up to
    :data:`LENS_FULL_RESAMPLE_RATERS` of them, then raters x resamples held to
    :data:`LENS_RESAMPLE_WORK`, never under :data:`LENS_MIN_RESAMPLES` (nor over the ask)."""
    return held_resamples(n_boot, n_raters, full_up_to=LENS_FULL_RESAMPLE_RATERS,
                          work=LENS_RESAMPLE_WORK, at_least=LENS_MIN_RESAMPLES)


def _criterion_by_design_row(design: CueDesign, criterion: pd.Series) -> np.ndarray:
    values = pd.to_numeric(pd.Series(criterion), errors="coerce")
    values.index = values.index.astype(str)
    if values.index.has_duplicates:
        dup = sorted(set(values.index[values.index.duplicated()]))[:5]
        raise DataError(f"The criterion has more than one value for case(s) {', '.join(dup)}.")
    return values.reindex(list(design.case_ids)).to_numpy(dtype=float)


def _environment(design: CueDesign, crit_by_row: np.ndarray, judged_rows: np.ndarray):
    """Criterion on the cues over the judged cases with a known outcome (only the cases of
    ``first``: a phase's environment is fitted on that phase's cases)."""
    p = design.n_columns
    judged = np.zeros(len(design.case_ids), dtype=bool)
    judged[judged_rows] = True
    env_rows = np.flatnonzero(np.isfinite(crit_by_row) & design.complete_rows() & judged)
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


@dataclass(frozen=True)
class _EnvironmentFit:
    """The criterion regressed on the cues, from the judge fit's inverse (see _lens_parts)."""

    coef: np.ndarray
    rss: np.ndarray
    rank_ok: np.ndarray


def _lens_parts(stats, p: int) -> dict[str, np.ndarray]:
    """r_a, R_s, R_e, G, C (and what the equation needs) per group, from the centred SSCP
    of ``[cues..., judgment, criterion, ...]``: one batched pair of solves, no refit on rows.
    Used for the estimates and, unchanged, for every bootstrap and jackknife resample."""
    ys, yc = p, p + 1
    judge = ols_from_sscp(stats, list(range(p)), ys)
    S = stats.sscp
    Sxx = S[:, :p, :p]
    Syy, Scc, Syc = S[:, ys, ys], S[:, yc, yc], S[:, ys, yc]
    # The environment model shares the judge's cues, hence its inverse and its rank: one
    # decomposition serves both (half the work on a million resampled systems).
    b_s, b_e = judge.coef, np.einsum("gij,gj->gi", judge.xtx_inv, S[:, :p, yc])
    with np.errstate(invalid="ignore"):
        env_rss = np.where(judge.rank_ok, np.maximum(Scc - np.einsum("gp,gp->g", b_e, S[:, :p, yc]), 0.0),
                           np.nan)
    env = _EnvironmentFit(coef=b_e, rss=env_rss, rank_ok=judge.rank_ok)
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
    ok = judge.rank_ok & env.rank_ok & (Syy > 0) & (Scc > 0)
    return {"r_a": r_a, "r_s": r_s, "r_e": r_e, "g": g, "c": c, "validity": validity,
            "lme_error": lme_error, "exact_s": exact_s, "ok": ok}


def _per_rater(rows: JudgmentRows, crit_by_row: np.ndarray, composite: np.ndarray,
               p: int, *, n_boot: int, rng: np.random.Generator,
               level: float, independent_resamples: int | None = None,
               blocks: list[np.ndarray] | None = None) -> tuple[RaterLens, ...]:
    G = rows.n_raters
    crit = crit_by_row[rows.design_row]
    Z = np.column_stack([rows.X, rows.y, crit, composite[rows.design_row]])
    yc, yu = p + 1, p + 2
    stats = grouped_sscp(Z, rows.group, G)
    parts = _lens_parts(stats, p)
    r_a, r_s, r_e, g, c = (parts[k] for k in ("r_a", "r_s", "r_e", "g", "c"))
    validity, lme_error, exact_s = parts["validity"], parts["lme_error"], parts["exact_s"]
    S = stats.sscp
    with np.errstate(invalid="ignore", divide="ignore"):
        unit = S[:, yu, yc] / np.sqrt(S[:, yu, yu] * S[:, yc, yc])
    intervals = lens_intervals(Z[:, :p + 2], rows.group, G, p, n_boot=n_boot, rng=rng, level=level,
                               case=rows.design_row, independent_resamples=independent_resamples,
                               blocks=blocks)
    resamples_of = intervals.pop("n_boot")
    loo = leave_one_out_predictions(rows.X, rows.y, rows.group, G)
    usable = np.isfinite(loo)
    pair = grouped_sscp(np.column_stack([loo[usable], crit[usable], rows.y[usable]]),
                        rows.group[usable], G)
    with np.errstate(invalid="ignore", divide="ignore"):
        pair_r = pair.correlation()
    cv = np.full(G, np.nan)
    model_judgment = np.full(G, np.nan)
    # A rater with any row of leverage 1 has no honest leave-one-out validity.
    complete = np.bincount(rows.group[usable], minlength=G) == np.bincount(rows.group, minlength=G)
    cv[complete] = pair_r[complete, 0, 1]
    model_judgment[complete] = pair_r[complete, 0, 2]
    results = []
    n = rows.counts()
    fitted = parts["ok"]
    verdicts = models_versus_raters(np.where(fitted, r_a, np.nan), np.where(fitted, cv, np.nan),
                                    np.where(fitted, model_judgment, np.nan), n)
    for i, name in enumerate(rows.raters):
        notes = []
        ok = bool(parts["ok"][i])
        if not ok:
            notes.append(
                f"Rater '{name}' has {int(n[i])} cases with a known outcome, constant judgments "
                "or cues that do not vary; the lens model cannot be fitted."
            )
            vals = dict.fromkeys(("r_a", "g", "c", "r_e", "r_s", "mv", "cv", "lme", "unit", "mj"), np.nan)
        else:
            if exact_s[i]:
                notes.append(f"Rater '{name}' follows the cues exactly (R_s = 1); C is undefined.")
            vals = dict(r_a=r_a[i], g=g[i], c=c[i], r_e=r_e[i], r_s=r_s[i], mv=validity[i],
                        cv=cv[i], lme=lme_error[i], unit=unit[i], mj=model_judgment[i])
            if not np.isfinite(cv[i]):
                notes.append(f"Rater '{name}': a case's cue values are unique to it, so the "
                             "leave-one-out validity cannot be computed.")
        verdict = verdicts[i]
        bounds = {f"{k}_ci_{end}": float(intervals[k][j][i]) if ok else float("nan")
                  for k in INTERVAL_FIGURES for j, end in enumerate(("low", "high"))}
        per_term = float(n[i]) / p if p else float("nan")
        small = bool(per_term < SMALL_SAMPLE_CASES_PER_TERM)
        if small:
            notes.append(small_sample_sentence(int(n[i]), p))
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
            model_vs_rater=verdict,
            summary=_bootstrap_sentence(verdict, float(vals["r_a"]), float(vals["cv"])),
            **bounds,
            interval_level=float(level),
            n_boot=int(resamples_of[i]),
            cases_per_term=per_term,
            small_sample=small,
            small_sample_note=small_sample_sentence(int(n[i]), p) if small else None,
            warnings=tuple(notes),
        ))
    return tuple(results)


#: Floats of one chunk of bootstrap counts (raters x resamples x cases), to bound memory.
_CHUNK_FLOATS = 4_000_000
#: Resamples per rater in one product of counts with the case terms (at least; whole chunks):
#: measured here, (2,000 x 10 x 200) @ (2,000 x 200 x 66) took 0.049 s and with 20
#: resamples 0.052 s.
_RESAMPLES_PER_PRODUCT = 20


#: Raters reading exactly the same cases share one set of resamples when at least this
#: many of them do (fewer: the per-rater path, whose batch over raters is cheaper).
SHARED_BLOCK_MIN_RATERS = 8


def lens_intervals(Z: np.ndarray, group: np.ndarray, n_groups: int, p: int, *, n_boot: int,
                   rng: np.random.Generator, level: float = 0.95,
                   case: np.ndarray | None = None,
                   independent_resamples: int | None = None,
                   blocks: list[np.ndarray] | None = None) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """BCa case-bootstrap intervals of r_a, G, C and R_e for every rater at once.

    ``Z`` holds ``[cues..., judgment, criterion]`` per row, ``group`` the rater of each
    row, ``case`` (optional) the case of each row. A resample is a vector of counts over
    a rater's own cases (drawn with replacement).

    Raters who read exactly the same cases (``case`` given, a block of at least
    :data:`SHARED_BLOCK_MIN_RATERS`) share one set of resamples, drawn over the block's
    cases: the resampled sums of the cues and the criterion are then the same for all of
    them, so they and the cue model's inverse are computed once per resample, and only
    the sums with the judgments per rater, as one matrix product of the counts
    (resamples x cases) with the judgments' terms (cases x raters). The jackknife for the
    acceleration takes one case off the full-sample sums. Each rater's resamples are
    still a plain case bootstrap of that rater's cases; the raters' resamples are merely
    not independent of each other, which no per-rater figure depends on.

    Every other rater gets ``independent_resamples`` (default ``n_boot``) independent
    resamples: the sums of every (rater, resample)
    from one batched matrix product of the counts with a table of per-case terms, and
    the two models of every (rater, resample) from one batched solve
    (:func:`_lens_parts`); the jackknife takes each case's terms off the full sums.

    BCa rather than percentile because G and R_e are bounded by 1 and their sampling
    distributions are skewed near it; the bias correction and acceleration adjust for
    that (Efron 1987). Resamples whose refit is degenerate (a cue constant within the
    resample) are left out; fewer than 10 usable resamples give NaN.
    ``blocks`` (optional) are those blocks when the caller has found them already
    (:func:`shared_case_blocks` of the same ``case`` and ``group``).
    Returns figure -> (low, high), each (n_groups,), and ``"n_boot"`` -> the resamples
    of each rater (n_groups,).
    """
    nan = np.full(n_groups, np.nan)
    independent = n_boot if independent_resamples is None else int(independent_resamples)
    if blocks is None:
        blocks = shared_case_blocks(case, group, n_groups) if case is not None else []
    in_block = np.zeros(n_groups, dtype=bool)
    for members in blocks:
        in_block[members] = True
    resamples_of = np.where(in_block, n_boot, independent)
    if n_boot <= 0 or len(Z) == 0:
        return {**{k: (nan, nan) for k in INTERVAL_FIGURES}, "n_boot": np.zeros(n_groups, dtype=int)}
    if not blocks:
        return {**_per_rater_intervals(Z, group, n_groups, p, n_boot=independent, rng=rng, level=level),
                "n_boot": resamples_of}
    out = {k: (nan.copy(), nan.copy()) for k in INTERVAL_FIGURES}
    out["n_boot"] = resamples_of
    rest = np.flatnonzero(~in_block)
    if rest.size and independent > 0:
        # The raters outside the blocks first, so that their draws are those of a panel
        # without blocks.
        local = np.full(n_groups, -1, dtype=np.intp)
        local[rest] = np.arange(rest.size)
        keep = ~in_block[group]
        part = _per_rater_intervals(Z[keep], local[group[keep]], rest.size, p, n_boot=independent,
                                    rng=rng, level=level)
        for k in INTERVAL_FIGURES:
            out[k][0][rest], out[k][1][rest] = part[k]
    for members in blocks:
        part = _block_intervals(Z, group, case, members, p, n_boot=n_boot, rng=rng, level=level)
        for k in INTERVAL_FIGURES:
            out[k][0][members], out[k][1][members] = part[k]
    return out


def shared_case_blocks(case: np.ndarray, group: np.ndarray, n_groups: int,
                       min_raters: int = SHARED_BLOCK_MIN_RATERS) -> list[np.ndarray]:
    """Raters (sorted arrays of group numbers) who read exactly the same set of cases, one
    array per set read by at least ``min_raters`` raters, in the order of their first rater."""
    if len(group) == 0:
        return []
    sizes = np.bincount(group, minlength=n_groups)
    order = np.lexsort((case, group))
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    slot = np.arange(order.size) - starts[group[order]]
    padded = np.full((n_groups, int(sizes.max())), -1, dtype=np.int64)
    padded[group[order], slot] = case[order]
    _, first, which, count = np.unique(padded, axis=0, return_index=True, return_inverse=True,
                                       return_counts=True)
    which = np.asarray(which).ravel()
    blocks = [np.flatnonzero(which == b) for b in np.argsort(first, kind="stable")
              if count[b] >= min_raters and sizes[first[b]] > 0]
    return blocks


def _block_intervals(Z: np.ndarray, group: np.ndarray, case: np.ndarray, members: np.ndarray,
                     p: int, *, n_boot: int, rng: np.random.Generator,
                     level: float) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """:func:`lens_intervals` for raters who all read the same cases: one set of resamples."""
    G = members.size
    local = np.full(int(group.max()) + 1, -1, dtype=np.intp)
    local[members] = np.arange(G)
    keep = local[group] >= 0
    rows = np.flatnonzero(keep)[np.lexsort((case[keep], local[group[keep]]))]
    n = rows.size // G
    # Case i of every rater sits in row i of each column: (cases, raters).
    X = Z[rows[:n], :p]
    crit = Z[rows[:n], p + 1]
    Y = Z[rows, p].reshape(G, n).T
    sums = _BlockTerms(X, crit, Y)
    estimate = sums.parts(np.ones((1, n)), p)
    boot = {k: np.empty((n_boot, G)) for k in INTERVAL_FIGURES}
    per_chunk = max(1, _CHUNK_FLOATS // max(G * (p + 3), n, 1))
    for b0 in range(0, n_boot, per_chunk):
        nb = min(per_chunk, n_boot - b0)
        pick = np.floor(rng.random((nb, n)) * n).astype(np.intp)
        counts = np.bincount((np.arange(nb)[:, None] * n + pick).ravel(),
                             minlength=nb * n).reshape(nb, n).astype(float)
        parts = sums.parts(counts, p)
        for k in INTERVAL_FIGURES:
            boot[k][b0:b0 + nb] = parts[k]
    jack = {k: np.empty((n, G)) for k in INTERVAL_FIGURES}
    per_jack = max(1, _CHUNK_FLOATS // max(G * (p + 3), 1))
    for i0 in range(0, n, per_jack):
        parts = sums.parts_without(np.arange(i0, min(i0 + per_jack, n)), p)
        for k in INTERVAL_FIGURES:
            jack[k][i0:i0 + per_jack] = parts[k]
    out = {}
    for k in INTERVAL_FIGURES:
        est = np.where(estimate["ok"][0], estimate[k][0], np.nan)
        jk = np.where(np.isfinite(jack[k]).any(axis=0), jack[k], 0.0)
        out[k] = bca_interval(est, boot[k], jk, alpha=1.0 - level)
    return out


class _BlockTerms:
    """Per-case terms of a block of raters on the same cases, centred at the full-sample
    means (the cues and criterion at theirs, each rater's judgments at the rater's), so the
    weighted sums lose no digits; :meth:`parts` turns count vectors into the lens figures."""

    def __init__(self, X: np.ndarray, crit: np.ndarray, Y: np.ndarray):
        n, p = X.shape
        self.n_cases, self.p, self.n_raters = n, p, Y.shape[1]
        W = np.column_stack([X, crit])
        Wc = W - W.mean(axis=0)
        Yc = Y - Y.mean(axis=0)
        iu, ju = np.triu_indices(p + 1)
        self.iu, self.ju = iu, ju
        # Shared: [w, w_i w_j (i <= j)] for w = [cues..., criterion].
        self.shared = np.column_stack([Wc, Wc[:, iu] * Wc[:, ju]])
        # Per rater, laid out (cases, term * raters): y, y^2, y * w_j.
        self.rater = np.concatenate([Yc, Yc * Yc, (Wc[:, :, None] * Yc[:, None, :]).reshape(n, -1)],
                                    axis=1)

    def parts(self, counts: np.ndarray, p: int) -> dict[str, np.ndarray]:
        return self._parts(counts.sum(axis=1), counts @ self.shared, counts @ self.rater, p)

    def parts_without(self, cases: np.ndarray, p: int) -> dict[str, np.ndarray]:
        """The figures with each of ``cases`` left out in turn (the full sums minus its terms)."""
        full_shared = self.shared.sum(axis=0)
        full_rater = self.rater.sum(axis=0)
        n = np.full(cases.size, self.n_cases - 1.0)
        return self._parts(n, full_shared - self.shared[cases], full_rater - self.rater[cases], p)

    def _parts(self, n: np.ndarray, shared: np.ndarray, rater: np.ndarray, p: int):
        """The lens figures (N, raters) from weighted sums of N count vectors, with the same
        rank rule and formulas as :func:`_lens_parts` (the cue model's inverse, the
        environment model and the criterion's sums once per count vector)."""
        N, G, q = n.size, self.n_raters, p + 1
        iu, ju = self.iu, self.ju
        sw = shared[:, :q]
        with np.errstate(invalid="ignore", divide="ignore"):
            shift_w = sw / n[:, None]
            W = np.empty((N, q, q))
            prod = shared[:, q:] - n[:, None] * shift_w[:, iu] * shift_w[:, ju]
            W[:, iu, ju] = prod
            W[:, ju, iu] = prod
            diag = np.arange(q)
            W[:, diag, diag] = np.maximum(W[:, diag, diag], 0.0)
            sy = rater[:, :G]
            shift_y = sy / n[:, None]
            Syy = np.maximum(rater[:, G:2 * G] - n[:, None] * shift_y * shift_y, 0.0)
            Swy = rater[:, 2 * G:].reshape(N, q, G) - n[:, None, None] * shift_w[:, :, None] * shift_y[:, None, :]
        Sxx, Sxc, Scc = W[:, :p, :p], W[:, :p, p], W[:, p, p]
        Sxy, Syc = Swy[:, :p, :], Swy[:, p, :]
        # The environment model once per count vector; its inverse (and rank rule) is the
        # judge model's too, as in _lens_parts.
        env = ols_from_sscp(GroupedSSCP(n=n, mean=np.zeros((N, q)), sscp=W), np.arange(p), p)
        rank_ok, b_e = env.rank_ok, env.coef
        b_s = np.matmul(env.xtx_inv, Sxy)
        env_rss = env.rss
        with np.errstate(invalid="ignore", divide="ignore"):
            judge_rss = np.where(rank_ok[:, None], np.maximum(Syy - np.einsum("npg,npg->ng", b_s, Sxy), 0.0),
                                 np.nan)
            Sxx_b_s = np.matmul(Sxx, b_s)
            explained_s = np.einsum("npg,npg->ng", b_s, Sxx_b_s)
            explained_e = np.einsum("gi,gij,gj->g", b_e, Sxx, b_e)[:, None]
            shared_fit = np.einsum("npg,np->ng", Sxx_b_s, b_e)
            Scc_ = Scc[:, None]
            r_a = Syc / np.sqrt(Syy * Scc_)
            r_s = np.sqrt(np.clip(explained_s / Syy, 0.0, 1.0))
            r_e = np.sqrt(np.clip(explained_e / Scc_, 0.0, 1.0))
            g = shared_fit / np.sqrt(explained_s * explained_e)
            residual_cov = Syc - np.einsum("npg,np->ng", b_s, Sxc) \
                - np.einsum("np,npg->ng", b_e, Sxy) + shared_fit
            exact = (judge_rss <= 1e-12 * Syy) | (env_rss <= 1e-12 * Scc)[:, None]
            c = np.where(exact, np.nan, residual_cov / np.sqrt(judge_rss * env_rss[:, None]))
        r_e = np.broadcast_to(r_e, (N, G))
        ok = rank_ok[:, None] & (Syy > 0) & (Scc_ > 0)
        return {"r_a": r_a, "g": g, "c": c, "r_e": r_e, "r_s": r_s, "ok": ok}


def _per_rater_intervals(Z: np.ndarray, group: np.ndarray, n_groups: int, p: int, *, n_boot: int,
                         rng: np.random.Generator, level: float) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """:func:`lens_intervals` with independent resamples for every rater."""
    sizes = np.bincount(group, minlength=n_groups)
    terms, means = _case_terms(Z, group, n_groups, sizes)
    n_max = terms.shape[1]
    live = np.arange(n_max)[None, :] < sizes[:, None]
    estimate = _lens_parts(_sscp_from_counts(live[:, None, :].astype(float), terms, means), p)
    boot = {k: np.empty((n_boot, n_groups)) for k in INTERVAL_FIGURES}
    every_slot_live = bool(live.all())   # raters of one size: no padding to drop
    per_chunk = max(1, _CHUNK_FLOATS // max(n_groups * n_max, 1))
    # The draws go chunk by chunk (their layout, rater by rater within a chunk, fixes which
    # draw goes to which resample), but the counts of several chunks share one product: a
    # product of 10 resamples per rater costs about as much as one of 20.
    per_product = per_chunk * max(1, -(-_RESAMPLES_PER_PRODUCT // per_chunk))
    for p0 in range(0, n_boot, per_product):
        pieces = []
        for b0 in range(p0, min(p0 + per_product, n_boot), per_chunk):
            nb = min(per_chunk, n_boot - b0)
            drawn = rng.random((n_groups, nb, n_max))
            drawn *= sizes[:, None, None]
            flat = drawn.astype(np.intp)   # the floor, the draws being non-negative
            flat += (np.arange(n_groups)[:, None, None] * nb + np.arange(nb)[None, :, None]) * n_max
            if not every_slot_live:
                flat = flat[np.broadcast_to(live[:, None, :], flat.shape)]
            counts = np.bincount(flat.ravel(), minlength=n_groups * nb * n_max)
            pieces.append(counts.reshape(n_groups, nb, n_max))
        counts = np.concatenate(pieces, axis=1) if len(pieces) > 1 else pieces[0]
        nb = counts.shape[1]
        parts = _interval_figures(np.matmul(counts.astype(float), terms), p)
        for k in INTERVAL_FIGURES:
            boot[k][p0:p0 + nb] = parts[k].reshape(n_groups, nb).T
    # Jackknife: the full sums less each case's terms (padding slots: the full sums,
    # masked below), a block of raters at a time to bound memory.
    jack_parts = {k: np.empty((n_groups, n_max)) for k in INTERVAL_FIGURES}
    per_block = max(1, _CHUNK_FLOATS // (n_max * terms.shape[2]))
    for g0 in range(0, n_groups, per_block):
        block = terms[g0:g0 + per_block]
        parts = _interval_figures(block.sum(axis=1)[:, None, :] - block, p)
        for k in INTERVAL_FIGURES:
            jack_parts[k][g0:g0 + per_block] = parts[k].reshape(-1, n_max)
    out = {}
    for k in INTERVAL_FIGURES:
        est = np.where(estimate["ok"], estimate[k], np.nan)
        jack = np.where(live, jack_parts[k].reshape(n_groups, n_max), np.nan).T
        # A rater with no finite leave-one-out value gets no acceleration (and, having no
        # estimate either in practice, no interval).
        jack = np.where(np.isfinite(jack).any(axis=0), jack, 0.0)
        out[k] = bca_interval(est, boot[k], jack, alpha=1.0 - level)
    return out


def _case_terms(Z: np.ndarray, group: np.ndarray, n_groups: int, sizes: np.ndarray):
    """Per rater, padded to the largest rater: the terms ``[1, z, z_i z_j (i <= j)]`` of each
    case with ``z`` centred at the rater's mean (so the sums lose no digits), and those means."""
    k = Z.shape[1]
    order, slot_group, position, _, n_max = padded_layout(group, n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.stack([np.bincount(group, weights=Z[:, j], minlength=n_groups) for j in range(k)],
                         axis=1) / sizes[:, None]
    centred = Z[order] - means[slot_group]
    iu, ju = np.triu_indices(k)
    # Row-major throughout: ``centred[:, iu]`` comes out column-major, and stacking it into
    # rows, then scattering the rows by two index arrays, took about 2 s wall at 2,000 linked raters.
    per_case = np.empty((len(order), 1 + k + iu.size))
    per_case[:, 0] = 1.0
    per_case[:, 1:1 + k] = centred
    np.multiply(np.take(centred, iu, axis=1), np.take(centred, ju, axis=1), out=per_case[:, 1 + k:])
    at = slot_group * n_max + position
    if at.size == n_groups * n_max and (at == np.arange(at.size)).all():
        return per_case.reshape(n_groups, n_max, -1), means   # no padding, rows in rater order
    terms = np.zeros((n_groups, n_max, per_case.shape[1]))
    terms.reshape(n_groups * n_max, -1)[at] = per_case
    return terms, means


def _sscp_from_counts(counts: np.ndarray, terms: np.ndarray, means: np.ndarray) -> GroupedSSCP:
    """Weighted SSCP of every (rater, count vector): counts (G, N, n_max) -> N*G groups in
    rater-major order (group g * N + j)."""
    return _sscp_from_sums(np.matmul(counts, terms), means)


def _sscp_from_sums(sums: np.ndarray, means: np.ndarray) -> GroupedSSCP:
    """:func:`_sscp_from_counts` from the weighted sums of the terms, (G, N, terms)."""
    G, N, _ = sums.shape
    k = means.shape[1]
    sums = sums.reshape(G * N, -1)
    n = sums[:, 0]
    first = sums[:, 1:1 + k]
    iu, ju = np.triu_indices(k)
    # One gather of the upper-triangle sums into full matrices (two scattered writes cost
    # several times more on millions of small matrices).
    where = np.empty((k, k), dtype=np.intp)
    where[iu, ju] = where[ju, iu] = 1 + k + np.arange(iu.size)
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = first / n[:, None]
        sscp = sums[:, where.ravel()].reshape(G * N, k, k)
        sscp -= n[:, None, None] * shift[:, :, None] * shift[:, None, :]
    # A column constant in a resample can come out a rounding error below zero.
    diag = np.arange(k)
    sscp[:, diag, diag] = np.maximum(sscp[:, diag, diag], 0.0)
    return GroupedSSCP(n=n, mean=np.repeat(means, N, axis=0) + shift, sscp=sscp)


def _interval_figures(sums: np.ndarray, p: int) -> dict[str, np.ndarray]:
    """r_a, G, C and R_e of every (rater, count vector) from the weighted sums of the
    per-case terms, (G, N, terms) -> (G * N,) each, as :func:`_lens_parts` gives them on
    :func:`_sscp_from_sums`, at a fraction of the cost on millions of resamples.

    With ``L`` the Cholesky factor of a resample's correlation-scaled cue matrix and
    ``z_s``, ``z_e`` the cue-judgment and cue-criterion cross-products (scaled) times
    ``L^-1``, the two models' explained sums are ``|z_s|^2`` and ``|z_e|^2`` and their
    shared part ``z_s . z_e`` (``b_s' S_xx b_e``); the residual covariance is
    ``S_yc - z_s . z_e``. No coefficients are needed. Full rank as in
    ``ols_from_sscp``: decided for certain where a bound allows, and the few resamples
    near the line go through :func:`_lens_parts` itself.
    """
    G, N, T = sums.shape
    k = int(round((np.sqrt(8 * (T - 1) + 9) - 3) / 2))   # T = 1 + k + k (k + 1) / 2
    ys, yc = p, p + 1
    ST = np.ascontiguousarray(sums.reshape(G * N, T).T)  # (terms, groups): steps on contiguous rows
    n = ST[0]
    iu, ju = np.triu_indices(k)
    where = np.empty((k, k), dtype=np.intp)
    where[iu, ju] = where[ju, iu] = 1 + k + np.arange(iu.size)
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = ST[1:1 + k] / n
        S = ST[where.ravel()].reshape(k, k, -1)
        # S_ij -= (n shift_i) shift_j a row at a time: the same products as one broadcast
        # expression, without its two temporaries of k x k x resamples.
        scaled, product = n * shift, np.empty_like(shift)
        for i in range(k):
            np.multiply(scaled[i], shift, out=product)
            S[i] -= product
        diag = np.arange(k)
        S[diag, diag] = np.maximum(S[diag, diag], 0.0)
        Syy, Scc, Syc = S[ys, ys], S[yc, yc], S[ys, yc]
    M, sure, safe, candidate = scaled_cue_factor(S, n, p)
    with np.errstate(invalid="ignore", divide="ignore"):
        z_s = (M * (S[:p, ys] / safe)[None]).sum(axis=1)
        z_e = (M * (S[:p, yc] / safe)[None]).sum(axis=1)
        explained_s = np.where(sure, (z_s * z_s).sum(axis=0), np.nan)
        explained_e = np.where(sure, (z_e * z_e).sum(axis=0), np.nan)
        shared = np.where(sure, (z_s * z_e).sum(axis=0), np.nan)
        judge_rss = np.maximum(Syy - explained_s, 0.0)
        env_rss = np.maximum(Scc - explained_e, 0.0)
        out = {"r_a": Syc / np.sqrt(Syy * Scc),
               "r_e": np.sqrt(np.clip(explained_e / Scc, 0.0, 1.0)),
               "g": shared / np.sqrt(explained_s * explained_e)}
        exact = (judge_rss <= 1e-12 * Syy) | (env_rss <= 1e-12 * Scc)
        out["c"] = np.where(exact | ~sure, np.nan, (Syc - shared) / np.sqrt(judge_rss * env_rss))
    near = np.flatnonzero(candidate & ~sure)
    if near.size:
        near_parts = _lens_parts(GroupedSSCP(n=n[near], mean=np.zeros((near.size, k)),
                                             sscp=np.ascontiguousarray(S[:, :, near].transpose(2, 0, 1))), p)
        for key in INTERVAL_FIGURES:
            out[key][near] = near_parts[key][:]
    return out
