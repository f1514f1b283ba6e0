"""Agreement across raters on first judgments: ICC forms, Krippendorff's alpha, kappa
(Fleiss' kappa and Gwet's AC1 on categories come from :mod:`calibrate.agreement.categories`).

ICC forms follow Shrout & Fleiss (1979) and McGraw & Wong (1996): ``i`` is the
one-way form (1,·), ``a`` absolute agreement (A,· = Shrout & Fleiss 2,·), ``c``
consistency (C,· = Shrout & Fleiss 3,·); ``1`` is one rater, ``k`` the mean of the
raters a file had. On a complete design they come from the two-way ANOVA mean
squares with the F-based intervals of McGraw & Wong (1996, Table 7). On an
incomplete design they come from variance components (Henderson's method III,
see :mod:`calibrate.agreement.readers`), with intervals from a parametric
bootstrap of the crossed random-effects model on the same design (new cases, new
raters, new residuals; :func:`parametric_panels`), which carries the sampling of
raters as well as of cases; the two routes give the same estimates on complete
data. Alpha's interval comes from the same parametric bootstrap."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy import sparse
from scipy.stats import f as f_dist

from ..errors import DataError
from ..result_base import ResultMixin, jsonable
from .categories import COEFFICIENTS as CATEGORY_COEFFICIENTS
from .categories import CategoryAgreement, category_agreement
from .readers import ComponentEstimates, henderson_components
from .offsets import (
    CrossedLayout,
    check_first,
    check_scale,
    crossed_layout,
    fit_additive,
    fit_additive_many,
    fixed_design,
)

ICC_FORMS = (
    ("i1", "ICC(1,1)"), ("a1", "ICC(A,1)"), ("c1", "ICC(C,1)"),
    ("ik", "ICC(1,k)"), ("ak", "ICC(A,k)"), ("ck", "ICC(C,k)"),
)
LEVEL_OF_SCALE = {"continuous": "interval", "ordinal": "ordinal", "binary": "nominal"}
ALPHA_LEVELS = ("nominal", "ordinal", "interval", "ratio")
# One category holding this share of judgments makes chance-corrected coefficients
# low even under high raw agreement (the prevalence problem: Feinstein & Cicchetti
# 1990, from memory). The 0.80 threshold is common practice without a source.
DOMINANT_SHARE = 0.80


# ---------------------------------------------------------------------------
# ICC
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class IccEstimate(ResultMixin):
    """One ICC form with its interval."""

    form: str        # i1, a1, c1, ik, ak, ck
    label: str       # ICC(1,1), ICC(A,1), ...
    k: float         # raters averaged (1 for single-rater forms)
    estimate: float
    ci_low: float
    ci_high: float
    method: str = ""  # how the interval was made (F_CI or PARAMETRIC_CI)


CASE_BOOTSTRAP_CI = "percentile bootstrap over cases (the same raters kept)"
F_CI = "F distribution (McGraw & Wong 1996, Table 7; Satterthwaite df for the A forms)"
PARAMETRIC_CI = ("parametric bootstrap of the crossed random-effects model (new cases, raters "
                 "and residuals on the same design), percentile interval")


def icc_anova(ratings: np.ndarray, *, confidence: float = 0.95) -> tuple[IccEstimate, ...]:
    """Six ICC forms from a complete cases x raters matrix (two-way ANOVA).

    With ``n`` cases, ``k`` raters and mean squares for rows (cases) ``MSR``,
    columns (raters) ``MSC``, within rows ``MSW`` and residual ``MSE``:

    .. math::

        ICC(1,1) = \\frac{MSR - MSW}{MSR + (k-1) MSW}, \\quad
        ICC(A,1) = \\frac{MSR - MSE}{MSR + (k-1) MSE + k (MSC - MSE)/n}, \\quad
        ICC(C,1) = \\frac{MSR - MSE}{MSR + (k-1) MSE}

    and the average-measure forms :math:`(MSR - MSW)/MSR`,
    :math:`(MSR - MSE)/(MSR + (MSC - MSE)/n)`, :math:`(MSR - MSE)/MSR`
    (Shrout & Fleiss 1979, Table 2; McGraw & Wong 1996, Tables 4 and 7, which also
    give the intervals: F-based, Satterthwaite degrees of freedom for the A forms).
    """
    x = np.asarray(ratings, dtype=float)
    n, k = x.shape
    if n < 2 or k < 2:
        raise DataError("An ICC needs at least two cases and two raters.")
    grand = x.mean()
    ss_total = ((x - grand) ** 2).sum()
    ss_rows = k * ((x.mean(axis=1) - grand) ** 2).sum()
    ss_cols = n * ((x.mean(axis=0) - grand) ** 2).sum()
    ss_err = ss_total - ss_rows - ss_cols
    msr = ss_rows / (n - 1)
    msc = ss_cols / (k - 1)
    msw = (ss_total - ss_rows) / (n * (k - 1))
    mse = ss_err / ((n - 1) * (k - 1))
    tail = 0.5 + confidence / 2.0
    with np.errstate(invalid="ignore", divide="ignore"):
        est = {
            "i1": (msr - msw) / (msr + (k - 1) * msw),
            "a1": (msr - mse) / (msr + (k - 1) * mse + k * (msc - mse) / n),
            "c1": (msr - mse) / (msr + (k - 1) * mse),
            "ik": (msr - msw) / msr,
            "ak": (msr - mse) / (msr + (msc - mse) / n),
            "ck": (msr - mse) / msr,
        }
        ci = {}
        # one-way and consistency forms: exact F intervals
        for one, avg, ms_den, df_den in (("i1", "ik", msw, n * (k - 1)),
                                         ("c1", "ck", mse, (n - 1) * (k - 1))):
            f_obs = msr / ms_den
            f_low = f_obs / f_dist.ppf(tail, n - 1, df_den)
            f_high = f_obs * f_dist.ppf(tail, df_den, n - 1)
            ci[one] = ((f_low - 1) / (f_low + k - 1), (f_high - 1) / (f_high + k - 1))
            ci[avg] = (1 - 1 / f_low, 1 - 1 / f_high)
        # absolute agreement: Satterthwaite approximation
        rho = est["a1"]
        a = k * rho / (n * (1 - rho))
        b = 1 + k * rho * (n - 1) / (n * (1 - rho))
        v = (a * msc + b * mse) ** 2 / ((a * msc) ** 2 / (k - 1) + (b * mse) ** 2 / ((n - 1) * (k - 1)))
        f_star_low = f_dist.ppf(tail, n - 1, v)
        f_star_high = f_dist.ppf(tail, v, n - 1)
        ci["a1"] = (
            n * (msr - f_star_low * mse)
            / (f_star_low * (k * msc + (k * n - k - n) * mse) + n * msr),
            n * (f_star_high * msr - mse)
            / (k * msc + (k * n - k - n) * mse + n * f_star_high * msr),
        )
        ci["ak"] = (
            n * (msr - f_star_low * mse) / (f_star_low * (msc - mse) + n * msr),
            n * (f_star_high * msr - mse) / (msc - mse + n * f_star_high * msr),
        )
    return tuple(
        IccEstimate(form=form, label=label, k=float(k if form.endswith("k") else 1),
                    estimate=float(est[form]), ci_low=float(ci[form][0]), ci_high=float(ci[form][1]),
                    method=F_CI)
        for form, label in ICC_FORMS
    )


def icc_from_components(c: ComponentEstimates, k: float) -> dict[str, float]:
    """The six ICC forms from variance components, ``k`` readers per case.

    .. math::

        ICC(A,1) = \\frac{\\sigma^2_c}{\\sigma^2_c + \\sigma^2_r + \\sigma^2_e}, \\quad
        ICC(C,1) = \\frac{\\sigma^2_c}{\\sigma^2_c + \\sigma^2_e}, \\quad
        ICC(1,1) = \\frac{\\sigma^2_{c,1}}{\\sigma^2_{c,1} + \\sigma^2_w}

    and the ``k`` forms divide the error part by ``k`` (McGraw & Wong 1996, Table 4).
    Raw (possibly negative) components are used so that the values equal the
    ANOVA ones on a complete design.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        return {
            "i1": c.case_oneway / (c.case_oneway + c.within_oneway),
            "a1": c.case / (c.case + c.rater + c.residual),
            "c1": c.case / (c.case + c.residual),
            "ik": c.case_oneway / (c.case_oneway + c.within_oneway / k),
            "ak": c.case / (c.case + (c.rater + c.residual) / k),
            "ck": c.case / (c.case + c.residual / k),
        }



def icc_incomplete(
    first: pd.DataFrame,
    *,
    n_boot: int = 500,
    confidence: float = 0.95,
    rng: np.random.Generator | int | None = None,
) -> tuple[tuple[IccEstimate, ...], float]:
    """Six ICC forms from Henderson's method III components, parametric-bootstrap intervals.

    ``k`` for the average-measure forms is the harmonic mean number of readers
    per case (the number a file's mean rests on). Returns the estimates and ``k``.
    The intervals are percentile intervals over the panels of :func:`parametric_panels`
    (the basic interval, which reflects the draws about the estimate, covered ICC(A,1)
    less often: the rater component of 14 raters is skewed; ``benchmarks/bench_icc_coverage.py``).
    """
    layout = crossed_layout(check_first(first))
    return _icc_incomplete(layout, fit_additive(layout), n_boot=n_boot, confidence=confidence,
                           gen=np.random.default_rng(rng))


def _icc_incomplete(layout: CrossedLayout, fit, *, n_boot: int, confidence: float,
                    gen: np.random.Generator) -> tuple[tuple[IccEstimate, ...], float]:
    """:func:`icc_incomplete` on an indexed table and its additive fit."""
    readers = layout.readers_per_case()
    k = float(readers.size / np.sum(1.0 / readers))
    comps = henderson_components(fit)
    point = icc_from_components(comps, k)
    draws = icc_parametric_draws(layout, comps, k, n_boot, gen, factor=fit.factor)
    low, high = _percentile_interval(draws, confidence)
    return tuple(
        IccEstimate(form=form, label=label, k=k if form.endswith("k") else 1.0,
                    estimate=float(point[form]), ci_low=float(low[i]), ci_high=float(high[i]),
                    method=PARAMETRIC_CI)
        for i, (form, label) in enumerate(ICC_FORMS)
    ), k


def icc_parametric_draws(layout: CrossedLayout, comps: ComponentEstimates, k: float, n_boot: int,
                         gen: np.random.Generator, factor: tuple | None = None) -> np.ndarray:
    """(n_boot, 6) ICC forms (ICC_FORMS order) refitted on each panel of :func:`parametric_panels`
    (``factor``: the layout's reduced-system factor, when a fit already made it)."""
    draws = np.full((n_boot, len(ICC_FORMS)), np.nan)
    design = fixed_design(layout, factor)   # who read what stays fixed: one factor for every batch
    for rows, ys in parametric_panels(layout, comps, n_boot, gen):
        values = icc_from_components(henderson_components(fit_additive_many(layout, ys, design)), k)
        draws[rows] = np.column_stack([values[form] for form, _ in ICC_FORMS])
    return draws


def parametric_panels(layout: CrossedLayout, comps: ComponentEstimates, n_draws: int,
                      gen: np.random.Generator, *, max_values: int = 2_000_000):
    """Simulated panels on the observed design from the fitted crossed random-effects model.

    Each panel keeps who read what and draws new case effects, new rater effects
    and new residuals, independent normals with the fitted variances (a negative
    component counts as zero): :math:`y^*_{rc} = \\mu + a^*_c + b^*_r + e^*_{rc}`
    (Searle, Casella & McCulloch 1992, Variance Components, ch. 1 and 5, for the
    model; Efron & Tibshirani 1993, An Introduction to the Bootstrap, sec. 6.5, for
    the parametric bootstrap; chapters from memory). Drawing new raters is what carries rater sampling
    into the interval: resampling cases keeps the same few raters, and resampling
    raters puts one rater in a panel twice. Yields ``(rows, ys)`` with ``ys`` of shape
    (N, b) for draws ``rows``, at most ``max_values`` simulated judgments at a time.
    """
    sd = [np.sqrt(max(float(v), 0.0)) if np.isfinite(v) else 0.0
          for v in (comps.case, comps.rater, comps.residual)]
    n = layout.y.size
    mean = float(layout.y.mean())
    step = max(1, max_values // max(n, 1))
    for start in range(0, n_draws, step):
        b = min(step, n_draws - start)
        case = gen.normal(0.0, sd[0], size=(layout.n_cases, b))
        rater = gen.normal(0.0, sd[1], size=(layout.n_raters, b))
        noise = gen.normal(0.0, sd[2], size=(n, b))
        # ((mean + case) + rater) + noise, summed in place in that order (the same bits as
        # the plain expression, without its three temporary N x b arrays); mean + case once
        # per case rather than per judgment, and the rows gathered by np.take, which copies
        # rows of b values three times as fast as fancy indexing (0.57 s to 0.26 s for the
        # 40 million judgments of 100 panels of 400,000)
        case += mean
        panel = np.take(case, layout.case_index, axis=0)
        panel += np.take(rater, layout.rater_index, axis=0)
        noise += panel
        del panel
        yield slice(start, start + b), noise


def _percentile_interval(draws: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval per column, ignoring resamples where the statistic was undefined."""
    tail = (1.0 - confidence) / 2.0
    low = np.full(draws.shape[1], np.nan)
    high = np.full(draws.shape[1], np.nan)
    for j in range(draws.shape[1]):
        finite = draws[np.isfinite(draws[:, j]), j]
        if finite.size:
            low[j], high[j] = np.quantile(finite, [tail, 1.0 - tail])
    return low, high


# ---------------------------------------------------------------------------
# Krippendorff's alpha and pairwise agreement
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class _Units:
    """Pairable units (cases with two or more values) as counts per category."""

    categories: np.ndarray   # (V,) sorted distinct values
    counts: np.ndarray       # (U, V) values of each category in each unit
    m: np.ndarray            # (U,) values per unit
    sum1: np.ndarray         # (U,) sum of values
    sum2: np.ndarray         # (U,) sum of squared values


def _pairable_units(unit_index: np.ndarray, values: np.ndarray, *, with_counts: bool) -> _Units:
    unit_index = np.asarray(unit_index)
    values = np.asarray(values, dtype=float)
    keep = np.isfinite(values)
    _, unit_index = np.unique(unit_index[keep], return_inverse=True)
    values = values[keep]
    n_units = int(unit_index.max()) + 1 if unit_index.size else 0
    m_all = np.bincount(unit_index, minlength=n_units)
    pairable = m_all >= 2
    sel = pairable[unit_index]
    new_index = np.cumsum(pairable) - 1
    u, v = new_index[unit_index[sel]], values[sel]
    U = int(pairable.sum())
    cats, cat_index = np.unique(v, return_inverse=True)
    counts = np.zeros((U, cats.size))
    if with_counts and U:
        np.add.at(counts, (u, cat_index), 1.0)
    return _Units(
        categories=cats,
        counts=counts,
        m=m_all[pairable].astype(float),
        sum1=np.bincount(u, weights=v, minlength=U),
        sum2=np.bincount(u, weights=v**2, minlength=U),
    )


def _metric(level: str, cats: np.ndarray, marginals: np.ndarray) -> np.ndarray:
    """Difference function delta^2 (Krippendorff 2011, sec. 'metric differences').

    ``marginals``: (B, V) category totals n_c (the ordinal metric depends on them).
    Returns (B, V, V).
    """
    B, V = marginals.shape
    c, k = cats[:, None], cats[None, :]
    if level == "nominal":
        d = (c != k).astype(float)
    elif level == "interval":
        d = (c - k) ** 2
    elif level == "ratio":
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.where(c + k != 0, ((c - k) / (c + k)) ** 2, 0.0)
    else:  # ordinal: (sum_{g=c}^{k} n_g - (n_c + n_k) / 2)^2
        cum = np.cumsum(marginals, axis=1)
        idx = np.arange(V)
        lo, hi = np.minimum.outer(idx, idx), np.maximum.outer(idx, idx)
        between = cum[:, hi] - cum[:, lo] + marginals[:, lo]
        return (between - (marginals[:, :, None] + marginals[:, None, :]) / 2.0) ** 2
    return np.broadcast_to(d, (B, V, V))


def _alpha_from_weights(units: _Units, level: str, weights: np.ndarray) -> np.ndarray:
    """Alpha for each row of ``weights`` (B, U): unit multiplicities (1 = as observed).

    .. math:: \\alpha = 1 - (n - 1) \\frac{\\sum_{ck} o_{ck} \\delta^2_{ck}}{\\sum_{ck} n_c n_k \\delta^2_{ck}}

    with the coincidence matrix :math:`o_{ck} = \\sum_u (\\text{c-k pairs in } u)/(m_u - 1)`.
    For the interval level the sums are taken from unit moments, which avoids a
    values x values matrix for continuous judgments.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        if level == "interval":
            observed = weights @ ((2 * units.m * units.sum2 - 2 * units.sum1**2) / (units.m - 1))
            n = weights @ units.m
            s1, s2 = weights @ units.sum1, weights @ units.sum2
            expected = 2 * n * s2 - 2 * s1**2
            return 1.0 - (n - 1) * observed / expected
        V = units.categories.size
        # (n_uc n_uk - n_uc [c = k]) / (m_u - 1), entry by entry as that expression computes
        # it (n_uc * 0 is an exact zero off the diagonal), without its broadcasts over V x V
        per_unit = np.einsum("uc,uk->uck", units.counts, units.counts)
        diagonal = per_unit.reshape(-1, V * V)[:, ::V + 1]
        diagonal -= units.counts
        per_unit.reshape(-1, V * V)[:, ::V + 1] = diagonal
        per_unit /= (units.m - 1)[:, None, None]
        coincidence = (weights @ per_unit.reshape(per_unit.shape[0], -1)).reshape(-1, V, V)
    return _alpha_from_coincidence(coincidence, units.categories, level)


def _alpha_from_coincidence(coincidence: np.ndarray, categories: np.ndarray, level: str) -> np.ndarray:
    """Alpha for each (V, V) coincidence matrix in ``coincidence`` (B, V, V)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        marg = coincidence.sum(axis=2)
        n = marg.sum(axis=1)
        delta = _metric(level, categories, marg)
        observed = np.einsum("bck,bck->b", coincidence, delta)
        expected = np.einsum("bc,bk,bck->b", marg, marg, delta)
        return 1.0 - (n - 1) * observed / expected


def _interval_alpha_from_moments(m: np.ndarray, sum1: np.ndarray, sum2: np.ndarray) -> np.ndarray:
    """Interval alpha from per-unit counts ``m`` (U,) and sums of values and squares (U, B)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        observed = ((2 * m[:, None] * sum2 - 2 * sum1**2) / (m - 1)[:, None]).sum(axis=0)
        n = m.sum()
        expected = 2 * n * sum2.sum(axis=0) - 2 * sum1.sum(axis=0) ** 2
        return 1.0 - (n - 1) * observed / expected


def _bounds_below(bounds: np.ndarray, values: np.ndarray) -> np.ndarray:
    """How many of the sorted ``bounds`` lie strictly below each value: the index of the
    nearest category, the same as ``np.searchsorted(bounds, values)`` for finite values,
    by one comparison per bound (a handful of scale steps) instead of a binary search
    per value."""
    # small counts in one byte each: adding a comparison into a byte array is several times
    # faster than into machine integers (the nearest category of 40 million values: 0.2 s
    # against 1.1 s here)
    below = np.zeros(values.shape, dtype=np.int8 if bounds.size < 127 else np.intp)
    for bound in bounds:
        np.add(below, values > bound, out=below, casting="unsafe")
    return below


def alpha_parametric_draws(layout: CrossedLayout, comps: ComponentEstimates, level: str,
                           categories: np.ndarray | None, n_boot: int,
                           gen: np.random.Generator) -> np.ndarray:
    """Krippendorff's alpha on each panel of :func:`parametric_panels`, shape (n_boot,).

    With ``categories`` (sorted scale values) every simulated judgment is moved to
    the nearest category, so an ordinal or binary panel is simulated with the
    rounding and the scale ends of the real one; without, the values stay continuous.
    Cases read by one rater are not pairable and are left out, as in the estimate.
    """
    readers = layout.readers_per_case()
    keep = readers[layout.case_index] >= 2
    _, unit = np.unique(layout.case_index[keep], return_inverse=True)
    m = np.bincount(unit).astype(float)
    by_unit = sparse.csr_matrix((np.ones(unit.size), (unit, np.arange(unit.size))),
                                shape=(m.size, unit.size))
    draws = np.full(n_boot, np.nan)
    if m.size == 0:
        return draws
    V = 0 if categories is None else categories.size
    bounds = None if categories is None else (categories[1:] + categories[:-1]) / 2.0
    every_case = bool(keep.all())
    cells = None
    for rows, ys in parametric_panels(layout, comps, n_boot, gen):
        if not every_case:
            ys = ys[keep]
        if categories is None:
            draws[rows] = _interval_alpha_from_moments(m, by_unit @ ys, by_unit @ ys**2)
            continue
        nearest = _bounds_below(bounds, ys)
        if level == "interval":
            values = categories[nearest]
            draws[rows] = _interval_alpha_from_moments(m, by_unit @ values, by_unit @ values**2)
            continue
        # category counts per (unit, panel) by one bincount over the long form
        b = ys.shape[1]
        if cells is None or cells.shape[1] != b:   # the first cell of each (unit, panel)
            cells = (unit[:, None] * b + np.arange(b)[None, :]) * V
        cell = cells + nearest
        counts = np.bincount(cell.ravel(), minlength=m.size * b * V).astype(float).reshape(m.size, b, V)
        # coincidences per panel, sum_u n_uc n_uk / (m_u - 1), as one batched matrix product
        scaled = counts / (m - 1)[:, None, None]
        pairs = np.matmul(counts.transpose(1, 2, 0), scaled.transpose(1, 0, 2))
        pairs -= scaled.sum(axis=0)[:, :, None] * np.eye(categories.size)
        draws[rows] = _alpha_from_coincidence(pairs, categories, level)
    return draws


@dataclass(frozen=True)
class AlphaEstimate(ResultMixin):
    """Krippendorff's alpha at one level of measurement, with a case-bootstrap interval."""

    level: str
    estimate: float
    ci_low: float
    ci_high: float
    n: int              # pairable values
    n_cases: int        # pairable cases (two or more readers)
    n_boot: int
    method: str = ""    # how the interval was made


def krippendorff_alpha(
    cases,
    values,
    *,
    level: str,
    n_boot: int = 0,
    confidence: float = 0.95,
    rng: np.random.Generator | int | None = None,
) -> AlphaEstimate:
    """Krippendorff's alpha (Krippendorff 2011) from long data, with a bootstrap over cases.

    Parameters
    ----------
    cases : array of unit (case) ids, one per value.
    values : the judgments (NaN = missing, ignored).
    level : "nominal", "ordinal", "interval" or "ratio".
    n_boot : bootstrap resamples of pairable cases (0: no interval).

    Cases with a single value are not pairable and do not count. The interval is
    a percentile interval from resampling cases with replacement (common practice).
    """
    if level not in ALPHA_LEVELS:
        raise DataError(f"Alpha's level must be one of {', '.join(ALPHA_LEVELS)}; got {level!r}.")
    units = _pairable_units(np.asarray(cases), np.asarray(values, float), with_counts=level != "interval")
    U = units.m.size
    if U == 0:
        return AlphaEstimate(level, np.nan, np.nan, np.nan, 0, 0, n_boot, "none")
    estimate = float(_alpha_from_weights(units, level, np.ones((1, U)))[0])
    low = high = np.nan
    if n_boot > 0:
        gen = np.random.default_rng(rng)  # passes a Generator through
        w = gen.multinomial(U, np.full(U, 1.0 / U), size=n_boot).astype(float)
        draws = _alpha_from_weights(units, level, w)
        lo, hi = _percentile_interval(draws[:, None], confidence)
        low, high = float(lo[0]), float(hi[0])
    return AlphaEstimate(level, estimate, low, high, int(units.m.sum()), U, int(n_boot),
                         CASE_BOOTSTRAP_CI if n_boot > 0 else "none")


def pairwise_agreement(cases, values) -> tuple[float, float]:
    """Share of reader pairs on the same case who agree exactly, and within one scale point."""
    units = _pairable_units(np.asarray(cases), np.asarray(values, float), with_counts=True)
    if units.m.size == 0:
        return np.nan, np.nan
    n = units.counts
    pairs = float((units.m * (units.m - 1)).sum())
    gap = np.abs(units.categories[:, None] - units.categories[None, :])
    near = (gap <= 1.0 + 1e-9).astype(float)
    same = float((n**2 - n).sum())
    within_one = float(np.einsum("uc,ck,uk->", n, near, n) - n.sum())
    return same / pairs, within_one / pairs


def weighted_kappa(table, *, weights: str | np.ndarray | None = None) -> float:
    """Cohen's kappa, or weighted kappa (Cohen 1968), from a two-way table.

    .. math:: \\kappa_w = 1 - \\frac{\\sum_{ij} w_{ij} p_{ij}}{\\sum_{ij} w_{ij} p_{i\\cdot} p_{\\cdot j}}

    Parameters
    ----------
    table : (V, V) counts or proportions, rows the first judge, categories in scale order.
    weights : None (unweighted), "linear" (|i - j|), "quadratic" ((i - j)^2) or a
        (V, V) array of disagreement weights (zero on the diagonal).
    """
    p = np.asarray(table, dtype=float)
    if p.ndim != 2 or p.shape[0] != p.shape[1]:
        raise DataError("A kappa table must be square (the same categories for both judges).")
    p = p / p.sum()
    idx = np.arange(p.shape[0])
    if weights is None:
        w = (idx[:, None] != idx[None, :]).astype(float)
    elif isinstance(weights, str):
        if weights not in ("linear", "quadratic"):
            raise DataError(f"Kappa weights must be 'linear', 'quadratic', an array or None; got {weights!r}.")
        power = 1 if weights == "linear" else 2
        w = np.abs(idx[:, None] - idx[None, :]).astype(float) ** power
    else:
        w = np.asarray(weights, dtype=float)
        if w.shape != p.shape:
            raise DataError(f"Kappa weights must be a {p.shape} array; got {w.shape}.")
    expected = np.outer(p.sum(axis=1), p.sum(axis=0))
    with np.errstate(invalid="ignore", divide="ignore"):
        return float(1.0 - (w * p).sum() / (w * expected).sum())


# ---------------------------------------------------------------------------
# the panel-level function
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class AgreementResult(ResultMixin):
    """Agreement across raters on first judgments, for one phase."""

    design: str                      # "complete" | "incomplete"
    icc_method: str
    icc_ci_method: str
    readers_per_case: float
    icc: tuple[IccEstimate, ...]
    alpha: AlphaEstimate
    exact_agreement: float
    adjacent_agreement: float
    dominant_value: float
    dominant_share: float
    n_raters: int
    n_cases: int
    n_judgments: int
    warnings: tuple[str, ...] = ()
    categories: tuple[CategoryAgreement, ...] = ()   # Fleiss' kappa, Gwet's AC1 (ordinal, binary)
    reduced_forms: tuple[str, ...] = ()   # plain sentences: intervals in a reduced form on this size

    def category_values(self) -> dict[str, float | None]:
        """{'fleiss_kappa': ..., 'gwet_ac1': ...}; None on a continuous scale (no categories)."""
        found = {c.coefficient: c.estimate for c in self.categories}
        return {name: found.get(name) for name, _ in CATEGORY_COEFFICIENTS}

    def icc_values(self) -> dict[str, float]:
        return {e.form: e.estimate for e in self.icc}

    def to_dict(self) -> dict:
        has_icc = any(np.isfinite(e.estimate) for e in self.icc)
        return jsonable({
            "icc": self.icc_values() if has_icc else None,
            "icc_detail": {
                "design": self.design,
                "method": self.icc_method,
                "ci_method": self.icc_ci_method,
                "readers_per_case": self.readers_per_case,
                "forms": [e.to_dict() for e in self.icc],
            },
            "alpha": self.alpha.estimate,
            "alpha_detail": self.alpha.to_dict(),
            **self.category_values(),
            "category_detail": [c.to_dict() for c in self.categories],
            "exact_agreement": self.exact_agreement,
            "adjacent_agreement": self.adjacent_agreement,
            "dominant_category": {"value": self.dominant_value, "share": self.dominant_share},
            "n_raters": self.n_raters,
            "n_cases": self.n_cases,
            "n_judgments": self.n_judgments,
            "warnings": list(self.warnings),
        })

    def to_frame(self) -> pd.DataFrame:
        """One row per coefficient (six ICC forms and alpha)."""
        rows = [{"coefficient": e.label, "form": e.form, "k": e.k, "estimate": e.estimate,
                 "ci_low": e.ci_low, "ci_high": e.ci_high, "method": e.method} for e in self.icc]
        a = self.alpha
        rows.append({"coefficient": f"Krippendorff's alpha ({a.level})", "form": "alpha", "k": np.nan,
                     "estimate": a.estimate, "ci_low": a.ci_low, "ci_high": a.ci_high,
                     "method": a.method})
        rows += [{"coefficient": c.label, "form": c.coefficient, "k": np.nan, "estimate": c.estimate,
                  "ci_low": c.ci_low, "ci_high": c.ci_high, "method": c.method} for c in self.categories]
        return pd.DataFrame(rows)


# Simulated judgments the parametric bootstrap draws in full: 500 panels up to 80,000
# judgments (400 raters x 200 files). A larger panel gets fewer simulated panels, no fewer
# than PARAMETRIC_MIN_PANELS (coverage with 100: DEVELOPERS.md, "Speed at scale").
PARAMETRIC_FULL_VALUES = 40_000_000
PARAMETRIC_MIN_PANELS = 100
# Resamples x files of the Fleiss/AC1 case bootstrap in full (500 resamples up to 20,000
# files); above, the jackknife interval (its coverage: DEVELOPERS.md, "Speed at scale").
CATEGORY_BOOTSTRAP_VALUES = 10_000_000


def simulated_panel_count(n_judgments: int, n_boot: int) -> int:
    """Simulated panels for a panel of ``n_judgments``: all ``n_boot`` while they hold at most
    ``PARAMETRIC_FULL_VALUES`` judgments, else as many as that budget holds, at least
    ``PARAMETRIC_MIN_PANELS`` (never more than asked)."""
    if n_judgments * n_boot <= PARAMETRIC_FULL_VALUES:
        return n_boot
    return min(n_boot, max(PARAMETRIC_MIN_PANELS, PARAMETRIC_FULL_VALUES // max(n_judgments, 1)))


ALPHA_PARAMETRIC_CI = ("parametric bootstrap of the crossed random-effects model (new cases, "
                       "raters and residuals on the same design{rounding}), percentile interval")


def _alpha_with_parametric_interval(alpha: AlphaEstimate, layout: CrossedLayout, scale: str,
                                    scale_min: float | None, scale_max: float | None,
                                    n_boot: int, confidence: float,
                                    gen: np.random.Generator, fit=None) -> AlphaEstimate:
    """``alpha`` with the interval of :func:`alpha_parametric_draws` (none when n_boot is 0)."""
    if n_boot <= 0 or not np.isfinite(alpha.estimate):
        return alpha
    categories = None
    if scale != "continuous":
        categories = np.unique(layout.y)
        whole = np.all(categories == np.round(categories))
        if scale_min is not None and scale_max is not None and whole:
            categories = np.arange(np.ceil(scale_min), np.floor(scale_max) + 1.0)
    comps = henderson_components(fit_additive(layout) if fit is None else fit)
    if categories is not None and categories.size > 1:
        # the residual component of rounded judgments holds the rounding error too
        # (Sheppard's correction, step^2 / 12; Sheppard 1898, from memory): the
        # simulated latent judgments are rounded again, so take it out once
        step = float(np.min(np.diff(categories)))
        comps = replace(comps, residual=max(float(comps.residual) - step**2 / 12.0, 0.0))
    draws = alpha_parametric_draws(layout, comps, alpha.level, categories, n_boot, gen)
    low, high = (float(v[0]) for v in _percentile_interval(draws[:, None], confidence))
    rounding = "" if categories is None else (", moved to the nearest scale value, rounding "
                                              "variance taken out of the residual first")
    return replace(alpha, ci_low=low, ci_high=high, n_boot=int(n_boot),
                   method=f"{ALPHA_PARAMETRIC_CI.format(rounding=rounding)} ({n_boot} simulated panels)")


def panel_agreement(
    first: pd.DataFrame,
    *,
    scale: str,
    scale_min: float | None = None,
    scale_max: float | None = None,
    method: str = "auto",
    n_boot: int = 500,
    confidence: float = 0.95,
    rng: np.random.Generator | int | None = None,
    full_extras: bool = False,
) -> AgreementResult:
    """ICC forms, Krippendorff's alpha and raw agreement across the panel.

    Parameters
    ----------
    first : DataFrame with ``rater``, ``case``, ``judgment`` (one row per rater and case).
    scale : "continuous" (alpha at the interval level), "ordinal" (ordinal level,
        plus exact and within-one agreement) or "binary" (nominal level, exact agreement).
    scale_min, scale_max : accepted for a uniform call; the coefficients do not need them.
    method : "auto" (ANOVA when every rater judged every case, else components),
        "anova" (complete designs only) or "components".
    n_boot : simulated panels of the parametric bootstrap behind alpha's interval
        and, on an incomplete design, the ICC intervals.
    confidence : level of every interval.
    rng : seed or Generator (the same seed gives the same intervals).
    full_extras : the full intervals on any panel size. By default a large panel gets
        fewer simulated panels (:func:`simulated_panel_count`) and, with very many cases,
        the jackknife interval of Fleiss' kappa and AC1 (``CATEGORY_BOOTSTRAP_VALUES``);
        ``reduced_forms`` of the result says which.

    Notes
    -----
    Which interval runs when: on a complete design (every rater read every case)
    the ICC forms get McGraw & Wong's (1996) F-based intervals, which are exact for
    the one-way and consistency forms under normality and covered 93-97% in
    ``benchmarks/bench_icc_coverage.py``; on an incomplete design (or with
    ``method="components"``) they get the parametric bootstrap of
    :func:`parametric_panels`, whose simulated panels draw new raters as well as new
    cases. Alpha's interval always comes from that parametric bootstrap, with the
    simulated judgments moved to the nearest scale category on ordinal and binary
    scales after the rounding variance is taken out of the residual component, and a
    percentile interval (a normal model of a 0/1 scale is rough; its coverage was not
    measured).
    """
    check_scale(scale, scale_min, scale_max)
    if method not in ("auto", "anova", "components"):
        raise DataError(f"The ICC method must be 'auto', 'anova' or 'components'; got {method!r}.")
    data = check_first(first)
    gen = np.random.default_rng(rng)  # passes a Generator through
    layout = crossed_layout(data)
    R, C, N = layout.n_raters, layout.n_cases, layout.y.size
    complete = N == R * C
    warnings: list[str] = []
    if method == "anova" and not complete:
        raise DataError(
            f"The ANOVA route needs every rater to judge every case ({R} raters x {C} cases = "
            f"{R * C} judgments; there are {N}). Use method='components'."
        )
    reduced: list[str] = []
    panels = n_boot if full_extras else simulated_panel_count(N, n_boot)
    nan_icc = tuple(IccEstimate(f, lab, np.nan, np.nan, np.nan, np.nan) for f, lab in ICC_FORMS)
    readers = layout.readers_per_case()
    level = LEVEL_OF_SCALE[scale]
    alpha = krippendorff_alpha(layout.case_index, layout.y, level=level)
    if R < 2 or not (readers >= 2).any():
        icc, k = nan_icc, np.nan
        ci_method = "none"
        route = "none"
        warnings.append("No case was read by two or more raters: agreement cannot be measured.")
    else:
        fit = fit_additive(layout)   # one fit for the ICC components and alpha's simulated panels
        if complete and method != "components":
            ratings = np.full((C, R), np.nan)
            ratings[layout.case_index, layout.rater_index] = layout.y
            icc, k = icc_anova(ratings, confidence=confidence), float(R)
            route = "two-way ANOVA mean squares (Shrout & Fleiss 1979; McGraw & Wong 1996)"
            ci_method = F_CI
        else:
            icc, k = _icc_incomplete(layout, fit, n_boot=panels, confidence=confidence, gen=gen)
            route = ("variance components of the crossed random-effects model, Henderson's "
                     "method III; k = harmonic mean readers per case")
            ci_method = f"{PARAMETRIC_CI} ({panels} simulated panels)"
        alpha = _alpha_with_parametric_interval(alpha, layout, scale, scale_min, scale_max,
                                                panels, confidence, gen, fit=fit)
        if panels < n_boot:
            which = ("Alpha's interval comes" if complete and method != "components"
                     else "The ICC intervals and alpha's interval come")
            reduced.append(f"{which} from {panels} simulated panels instead of {n_boot} on this panel "
                           f"size ({N:,} judgments; each panel simulates every judgment).")
    exact = adjacent = dom_value = dom_share = np.nan
    categories = ()
    if scale != "continuous":
        exact, adjacent = pairwise_agreement(layout.case_index, layout.y)
        if scale == "binary":
            adjacent = np.nan
        jackknife = not full_extras and n_boot * C > CATEGORY_BOOTSTRAP_VALUES
        # the layout's case codes follow the sorted case ids, so the counts come in the same
        # order as from the ids themselves, without sorting the ids as text again
        coded = pd.DataFrame({"case": layout.case_index, "judgment": layout.y})
        categories = category_agreement(coded, categories=_scale_categories(layout.y, scale, scale_min,
                                                                           scale_max),
                                        n_boot=n_boot, confidence=confidence, rng=gen,
                                        jackknife=jackknife)
        if jackknife:
            reduced.append(f"The intervals of Fleiss' kappa and Gwet's AC1 come from the jackknife standard "
                           f"error instead of a {n_boot}-resample bootstrap on this panel size ({C:,} files).")
        values, counts = np.unique(layout.y, return_counts=True)
        top = int(np.argmax(counts))
        dom_value, dom_share = float(values[top]), float(counts[top] / counts.sum())
        if dom_share >= DOMINANT_SHARE:
            warnings.append(
                f"One judgment value ({dom_value:g}) makes up {dom_share:.0%} of all judgments; "
                "chance-corrected coefficients (alpha, kappa, ICC) can be low even when raters "
                "mostly agree. Read exact agreement beside them."
            )
    return AgreementResult(
        design="complete" if complete else "incomplete",
        icc_method=route,
        icc_ci_method=ci_method,
        readers_per_case=float(k),
        icc=icc,
        alpha=alpha,
        exact_agreement=float(exact),
        adjacent_agreement=float(adjacent),
        dominant_value=float(dom_value),
        dominant_share=float(dom_share),
        n_raters=R, n_cases=C, n_judgments=N,
        warnings=tuple(warnings),
        categories=categories,
        reduced_forms=tuple(reduced),
    )


def _scale_categories(y: np.ndarray, scale: str, scale_min: float | None,
                      scale_max: float | None) -> np.ndarray:
    """The categories Fleiss' kappa and AC1 count: 0 and 1 on a binary scale, every whole
    value between the ends of an ordinal one (with any other value seen)."""
    seen = np.unique(y)
    if scale == "binary":
        return np.union1d(seen, [0.0, 1.0])
    if scale_min is not None and scale_max is not None:
        return np.union1d(seen, np.arange(np.ceil(scale_min), np.floor(scale_max) + 1.0))
    return seen
