"""How many readers a file needs: variance components, D-study, decision flips.

The G-study treats first judgments as a cases x raters design with one judgment
per cell (Cronbach, Gleser, Nanda & Rajaratnam 1972; Brennan 2001, Generalizability
Theory, ch. 2-4). Files are rarely read by every rater, so the components are
estimated with Henderson's method III (fitting constants): each factor's
sum of squares is the reduction it brings after the other factor is fitted, and
the components solve the equations that set those reductions to their
expectations. On a complete design the reductions are the usual ANOVA sums of
squares and the estimates are the ANOVA (expected mean squares) estimates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..result_base import ResultMixin, jsonable
from .offsets import AdditiveFit, check_first, crossed_layout, fit_additive

ESTIMATOR = (
    "Henderson's method III (fitting constants) for the crossed cases x raters "
    "random-effects model; equals the ANOVA estimates on a complete design"
)


@dataclass(frozen=True)
class ComponentEstimates:
    """Raw (possibly negative) variance components from one fit (floats), or from
    :func:`~calibrate.agreement.offsets.fit_additive_many` (one array entry per fit)."""

    case: float
    rater: float
    residual: float
    case_oneway: float      # between-case component ignoring raters (one-way model)
    within_oneway: float    # within-case variance of the one-way model


def henderson_components(fit: AdditiveFit) -> ComponentEstimates:
    """Solve Henderson's method III equations from an additive fit.

    With one judgment per (case, rater) cell, ``N`` judgments, ``C`` cases,
    ``R`` raters and ``K`` connected parts:

    .. math::

        E[SSE] &= (N - C - R + K)\\,\\sigma^2_e \\\\
        E[R(r \\mid c)] &= (R - K)\\,\\sigma^2_e + (N - C)\\,\\sigma^2_r \\\\
        E[R(c \\mid r)] &= (C - K)\\,\\sigma^2_e + (N - R)\\,\\sigma^2_c

    (the coefficients :math:`N - \\sum_c \\sum_r n_{cr}^2 / n_c = N - C` follow
    because every :math:`n_{cr}` is 0 or 1; Searle, Casella & McCulloch 1992,
    Variance Components, sec. 5.5, from memory). The one-way components use
    :math:`n_0 = (N - \\sum_c n_c^2 / N) / (C - 1)`.
    """
    N, C, R, K = fit.n, fit.n_cases, float(fit.n_raters), float(fit.n_parts)
    ss_residual = np.asarray(fit.ss_residual, dtype=float)
    nan = np.full(ss_residual.shape, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        df_e = N - C - R + K
        residual = ss_residual / df_e if df_e > 0 else nan
        rater = (fit.ss_rater_given_case - (R - K) * residual) / (N - C) if N > C else nan
        case = (fit.ss_case_given_rater - (C - K) * residual) / (N - R) if N > R else nan
        within = fit.ss_within_cases / (N - C) if N > C else nan
        between = fit.ss_cases / (C - 1.0) if C > 1 else nan
        n0 = (N - fit.sum_readers_sq_over_n) / (C - 1.0) if C > 1 else np.nan
        case_oneway = (between - within) / n0
    if ss_residual.ndim:   # many fits at once (fit_additive_many): arrays
        return ComponentEstimates(*(np.asarray(v, dtype=float) for v in
                                    (case, rater, residual, case_oneway, within)))
    return ComponentEstimates(float(case), float(rater), float(residual),
                              float(case_oneway), float(within))


@dataclass(frozen=True)
class VarianceComponents(ResultMixin):
    """Variance components for cases, raters and residual (cases x raters interaction + error).

    ``case``, ``rater``, ``residual`` are the values used downstream (a negative
    estimate set to zero, listed in ``set_to_zero``); the ``*_raw`` fields keep
    the estimates as computed.
    """

    case: float
    rater: float
    residual: float
    case_raw: float
    rater_raw: float
    residual_raw: float
    set_to_zero: tuple[str, ...]
    estimator: str
    n_judgments: int
    n_cases: int
    n_raters: int
    n_parts: int
    readers_per_case: float   # harmonic mean over cases


@dataclass(frozen=True)
class DStudyRow(ResultMixin):
    """Coefficients for the mean of ``raters`` readers per file."""

    raters: int
    g_rel: float   # relative (norm-referenced): sigma2_c / (sigma2_c + sigma2_e / k)
    phi: float     # absolute (criterion-referenced): sigma2_c / (sigma2_c + (sigma2_r + sigma2_e) / k)


@dataclass(frozen=True)
class FlipRow(ResultMixin):
    """How often a file near the cut-off changes side with other readers.

    ``flip_rate``: two independent sets of ``raters`` readers put the file on
    different sides. ``wrong_side_rate``: one set of readers puts it on the other
    side from its true standing. ``flip_rate_adjusted``: as ``flip_rate`` when
    scores are severity-adjusted (rater variance removed). ``se`` is the Monte
    Carlo standard error of ``flip_rate``.
    """

    raters: int
    flip_rate: float
    wrong_side_rate: float
    flip_rate_adjusted: float
    se: float


@dataclass(frozen=True)
class GStudyResult(ResultMixin):
    """G-study and D-study for one phase."""

    components: VarianceComponents
    d_study: tuple[DStudyRow, ...]
    readers_needed: dict            # {"g_rel": {"0.70": k, "0.80": k}, "phi": {...}}; None = not within 100
    flips: tuple[FlipRow, ...]
    cut_off: float | None
    near: float
    n_sim: int
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        c = self.components
        return jsonable({
            "variance_components": {
                "case": c.case, "rater": c.rater, "residual": c.residual,
                "raw": {"case": c.case_raw, "rater": c.rater_raw, "residual": c.residual_raw},
                "set_to_zero": list(c.set_to_zero),
                "estimator": c.estimator,
                "n_judgments": c.n_judgments, "n_cases": c.n_cases, "n_raters": c.n_raters,
                "readers_per_case": c.readers_per_case,
            },
            "d_study": [row.to_dict() for row in self.d_study],
            "readers_needed": self.readers_needed,
            "flips": [row.to_dict() for row in self.flips],
            "cut_off": self.cut_off,
            "near": self.near,
            "warnings": list(self.warnings),
        })

    def to_frame(self) -> pd.DataFrame:
        """One row per number of readers: D-study coefficients and, with a cut-off, flip rates."""
        frame = pd.DataFrame([row.to_dict() for row in self.d_study])
        if self.flips:
            frame = frame.merge(pd.DataFrame([f.to_dict() for f in self.flips]), on="raters", how="left")
        return frame


def d_study_coefficients(case: float, rater: float, residual: float, k) -> tuple[np.ndarray, np.ndarray]:
    """Relative coefficient and Phi for ``k`` readers per file (Brennan 2001, eq. 2.x; from memory).

    .. math::

        E\\rho^2(k) = \\frac{\\sigma^2_c}{\\sigma^2_c + \\sigma^2_e / k}, \\qquad
        \\Phi(k) = \\frac{\\sigma^2_c}{\\sigma^2_c + (\\sigma^2_r + \\sigma^2_e) / k}
    """
    k = np.asarray(k, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        g_rel = case / (case + residual / k)
        phi = case / (case + (rater + residual) / k)
    return g_rel, phi


def _smallest_k(case: float, rater: float, residual: float, target: float, k_max: int = 100):
    ks = np.arange(1, k_max + 1)
    g_rel, phi = d_study_coefficients(case, rater, residual, ks)
    out = {}
    for name, values in (("g_rel", g_rel), ("phi", phi)):
        hit = np.flatnonzero(values >= target)
        out[name] = int(ks[hit[0]]) if hit.size else None
    return out



def flip_rates(
    rater: float,
    residual: float,
    *,
    cut_off: float,
    near: float = 0.5,
    max_readers: int = 5,
    n_sim: int = 20000,
    rng: np.random.Generator | int | None = None,
) -> tuple[FlipRow, ...]:
    """Simulate how often a file within ``near`` of ``cut_off`` changes side.

    A file's true score is drawn uniformly within ``cut_off +- near``; each set
    of ``k`` readers adds the mean of ``k`` rater effects (variance ``rater``)
    and ``k`` residuals (variance ``residual``), all normal. The case component
    does not enter: the files are conditioned to lie near the cut-off.
    """
    gen = np.random.default_rng(rng)  # passes a Generator through
    rows = []
    sd_r, sd_e = np.sqrt(max(rater, 0.0)), np.sqrt(max(residual, 0.0))
    for k in range(1, max_readers + 1):
        true = cut_off + gen.uniform(-near, near, size=n_sim)
        rater_means = gen.normal(0.0, sd_r, size=(2, n_sim, k)).mean(axis=2)
        error_means = gen.normal(0.0, sd_e, size=(2, n_sim, k)).mean(axis=2)
        above_true = true >= cut_off
        above = true + rater_means + error_means >= cut_off
        above_adj = true + error_means >= cut_off
        flip = above[0] != above[1]
        rate = float(flip.mean())
        rows.append(FlipRow(
            raters=k,
            flip_rate=rate,
            wrong_side_rate=float((above[0] != above_true).mean()),
            flip_rate_adjusted=float((above_adj[0] != above_adj[1]).mean()),
            se=float(np.sqrt(rate * (1.0 - rate) / n_sim)),
        ))
    return tuple(rows)


def variance_components(first: pd.DataFrame) -> VarianceComponents:
    """Variance components (cases, raters, residual) of first judgments; see :func:`henderson_components`."""
    data = check_first(first)
    layout = crossed_layout(data)
    fit = fit_additive(layout)
    return _components_from_fit(fit, layout.readers_per_case())


def _components_from_fit(fit: AdditiveFit, readers: np.ndarray) -> VarianceComponents:
    raw = henderson_components(fit)
    values = {"case": raw.case, "rater": raw.rater, "residual": raw.residual}
    zeroed = tuple(name for name, v in values.items() if v < 0)
    used = {name: (0.0 if v < 0 else v) for name, v in values.items()}
    readers = readers[readers > 0]
    return VarianceComponents(
        case=used["case"], rater=used["rater"], residual=used["residual"],
        case_raw=raw.case, rater_raw=raw.rater, residual_raw=raw.residual,
        set_to_zero=zeroed,
        estimator=ESTIMATOR,
        n_judgments=int(fit.n), n_cases=int(fit.n_cases), n_raters=fit.n_raters,
        n_parts=fit.n_parts,
        readers_per_case=float(readers.size / np.sum(1.0 / readers)),
    )


def generalizability(
    first: pd.DataFrame,
    *,
    cut_off: float | None = None,
    near: float = 0.5,
    max_readers: int = 10,
    n_sim: int = 20000,
    rng: np.random.Generator | int | None = None,
) -> GStudyResult:
    """G-study and D-study of the cases x raters design for one phase.

    Parameters
    ----------
    first : DataFrame with ``rater``, ``case``, ``judgment``.
    cut_off : a decision threshold on the judgment scale; with it, flip rates
        are simulated for 1-5 readers per file.
    near : half-width of the band around ``cut_off`` that the simulated files lie in.
    max_readers : the D-study table runs from 1 to this many readers.
    n_sim : simulated files per number of readers.
    rng : seed or Generator for the simulation.

    Returns
    -------
    GStudyResult

    Notes
    -----
    The relative coefficient suits comparing files that were all read by the
    same readers; when each file gets its own readers (the usual case), rater
    variance enters the error and Phi is the figure to read, unless scores are
    severity-adjusted (Brennan 2001, sec. 4.4 on nested designs; from memory).
    A negative component estimate is set to zero and said so in ``warnings``.
    """
    data = check_first(first)
    layout = crossed_layout(data)
    fit = fit_additive(layout)
    comps = _components_from_fit(fit, layout.readers_per_case())
    warnings = []
    for name in comps.set_to_zero:
        raw = getattr(comps, f"{name}_raw")
        warnings.append(
            f"The {name} variance component came out negative ({raw:.4g}) and is set to zero; "
            "its true value is probably small."
        )
    for name in ("case", "rater", "residual"):
        if not np.isfinite(getattr(comps, name)):
            warnings.append(
                f"The {name} variance component cannot be estimated from this design "
                "(too few files with two or more readers)."
            )
    if fit.n_parts > 1:
        warnings.append(
            f"The raters fall into {fit.n_parts} groups that share no files; the components "
            "pool them."
        )
    ks = np.arange(1, max_readers + 1)
    g_rel, phi = d_study_coefficients(comps.case, comps.rater, comps.residual, ks)
    d_rows = tuple(DStudyRow(raters=int(k), g_rel=float(g), phi=float(p))
                   for k, g, p in zip(ks, g_rel, phi))
    needed = {"g_rel": {}, "phi": {}}
    for target in (0.70, 0.80):
        hits = _smallest_k(comps.case, comps.rater, comps.residual, target)
        for name in needed:
            needed[name][f"{target:.2f}"] = hits[name]
    flips: tuple[FlipRow, ...] = ()
    if cut_off is not None and np.isfinite(comps.residual) and np.isfinite(comps.rater):
        flips = flip_rates(comps.rater, comps.residual,
                           cut_off=float(cut_off), near=near, n_sim=n_sim, rng=rng)
    return GStudyResult(
        components=comps, d_study=d_rows, readers_needed=needed, flips=flips,
        cut_off=None if cut_off is None else float(cut_off), near=float(near), n_sim=int(n_sim),
        warnings=tuple(warnings),
    )
