"""Severity, range use and central tendency of raters on an incomplete design.

Raters rarely read the same files, so a rater's raw mean mixes how lenient they
are with how good their files happened to be. The additive model

.. math:: y_{rc} = \\mu + a_c + b_r + e_{rc}

(file effect :math:`a_c`, rater effect :math:`b_r`, both fixed) separates the two.
Raters can only be compared through files they share: the rater-file network is
split into connected parts first, and offsets are centred to mean zero within
each part (they are not comparable across parts).

The module also holds the crossed-design machinery that
:mod:`calibrate.agreement.readers` and :mod:`calibrate.agreement.icc` build on: the
file effects are absorbed, so only an ``R x R`` system is solved (``R`` raters),
never a dense matrix over all judgments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import linalg as sla
from scipy import sparse
from scipy.sparse import csgraph
from scipy.stats import norm

from ..errors import DataError, DataProblem, DegenerateFitError
from ..result_base import ResultMixin

SCALES = ("continuous", "ordinal", "binary")


# ---------------------------------------------------------------------------
# input checks shared by the panel-level modules
# ---------------------------------------------------------------------------

def check_scale(scale: str, scale_min: float | None, scale_max: float | None) -> None:
    """Raise DataError for an unknown scale name or an empty scale range."""
    if scale not in SCALES:
        raise DataError(
            f"The judgment scale must be one of {', '.join(SCALES)}; got {scale!r}. "
            "Set [judgment] scale in the study spec."
        )
    if scale_min is not None and scale_max is not None and not scale_max > scale_min:
        raise DataError(
            f"The judgment scale's max ({scale_max}) must be above its min ({scale_min}). "
            "Fix [judgment] min and max in the study spec."
        )


def check_table(frame: pd.DataFrame, columns: tuple[str, ...], what: str) -> pd.DataFrame:
    """Check that ``frame`` has ``columns`` with numbers where numbers are due.

    Returns the frame restricted to those columns. Raises DataError naming every
    missing column and every row whose number is missing.
    """
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"The {what} table must be a pandas DataFrame; got {type(frame).__name__}.")
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise DataError(
            f"The {what} table lacks column(s) {', '.join(missing)}; "
            f"it has: {', '.join(map(str, frame.columns))}."
        )
    out = frame.loc[:, list(columns)].copy()
    problems = []
    for col in columns:
        if col in ("rater", "case"):
            out[col] = out[col].astype(str)
            continue
        values = pd.to_numeric(out[col], errors="coerce")
        bad = np.flatnonzero(~np.isfinite(values.to_numpy(dtype=float)))
        for i in bad[:20]:
            problems.append(DataProblem(
                f"{what}: '{col}' is missing or not a number for rater "
                f"'{out['rater'].iloc[i]}', case '{out['case'].iloc[i]}'.",
                column=col,
            ))
        out[col] = values.astype(float)
    if problems:
        raise DataError(problems)
    return out.reset_index(drop=True)


def check_first(first: pd.DataFrame) -> pd.DataFrame:
    """Validate the first-judgment table: one numeric judgment per (rater, case)."""
    out = check_table(first, ("rater", "case", "judgment"), "first-judgment")
    if _repeats_a_pair(out):
        dup = out.duplicated(["rater", "case"], keep=False)
        shown = out.loc[dup, ["rater", "case"]].drop_duplicates().head(5)
        pairs = "; ".join(f"rater '{r}', case '{c}'" for r, c in shown.itertuples(index=False))
        raise DataError(
            f"The first-judgment table has more than one row for {int(dup.sum())} "
            f"(rater, case) rows, e.g. {pairs}. Keep only the first judgment per rater and case "
            "(later ones are repeats)."
        )
    if out.empty:
        raise DataError("The first-judgment table is empty: there is nothing to analyse.")
    return out


def _repeats_a_pair(table: pd.DataFrame) -> bool:
    """Whether some (rater, case) comes twice, from integer codes (a missing id is a code of
    its own, as ``duplicated`` counts it): 0.04 s against 0.07 s for 400,000 rows, and the
    check runs once for each of the agreement stage's four functions."""
    raters, _ = pd.factorize(table["rater"])
    cases, names = pd.factorize(table["case"])
    key = np.sort((raters.astype(np.int64) + 1) * (len(names) + 1) + (cases + 1))
    return bool((key[1:] == key[:-1]).any())


def tidy_rows(items, *, join: tuple[str, ...] = ("flags",), drop: tuple[str, ...] = ()) -> pd.DataFrame:
    """One row per dataclass item; tuple fields named in ``join`` become ';'-joined text."""
    rows = []
    for item in items:
        row = {}
        for name in item.__dataclass_fields__:
            if name in drop:
                continue
            value = getattr(item, name)
            row[name] = ";".join(value) if name in join else value
        rows.append(row)
    return pd.DataFrame(rows)


def middle_band(scale: str, low: float, high: float) -> tuple[float, float] | None:
    """Judgments counted as 'middle of the scale' for central tendency (our own rule).

    Ordinal: the middle category (odd number of categories) or the two middle ones
    (even number). Continuous: the middle third of the range. Binary: none.
    """
    centre = (low + high) / 2.0
    if scale == "ordinal":
        return centre - 0.5, centre + 0.5
    if scale == "continuous":
        third = (high - low) / 6.0
        return centre - third, centre + third
    return None


# ---------------------------------------------------------------------------
# crossed rater x case layout and the additive fit
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class CrossedLayout:
    """First judgments indexed for the rater x case network (raters and cases sorted)."""

    raters: tuple[str, ...]
    cases: tuple[str, ...]
    rater_index: np.ndarray = field(repr=False)
    case_index: np.ndarray = field(repr=False)
    y: np.ndarray = field(repr=False)

    @property
    def n_raters(self) -> int:
        return len(self.raters)

    @property
    def n_cases(self) -> int:
        return len(self.cases)

    def incidence(self, values: np.ndarray | None = None) -> sparse.csr_matrix:
        """(R, C) sparse matrix with ``values`` (default 1) where a rater read a case."""
        v = np.ones(self.y.size) if values is None else values
        return sparse.csr_matrix(
            (v, (self.rater_index, self.case_index)), shape=(self.n_raters, self.n_cases)
        )

    def readers_per_case(self) -> np.ndarray:
        return np.bincount(self.case_index, minlength=self.n_cases).astype(float)


def crossed_layout(first: pd.DataFrame) -> CrossedLayout:
    """Index a validated first-judgment table (see :func:`check_first`)."""
    rater_index, raters = pd.factorize(first["rater"], sort=True)
    case_index, cases = pd.factorize(first["case"], sort=True)
    return CrossedLayout(
        # tolist() first: iterating the text index itself costs a conversion per id (0.09 s
        # against 0.006 s for 100,000 case ids)
        raters=tuple(map(str, raters.tolist())),
        cases=tuple(map(str, cases.tolist())),
        rater_index=rater_index.astype(np.intp),
        case_index=case_index.astype(np.intp),
        y=first["judgment"].to_numpy(dtype=float),
    )


def connected_parts(
    layout: CrossedLayout, case_weights: np.ndarray | None = None
) -> tuple[int, np.ndarray, np.ndarray]:
    """Connected parts of the bipartite rater-case network.

    Returns ``(n_parts, part_of_rater, part_of_case)``; parts are numbered by
    number of judgments (largest first, ties by first rater name). A rater or
    case with no judgment (zero case weight in a resample) gets part -1.
    """
    R, C = layout.n_raters, layout.n_cases
    keep = np.ones(layout.y.size, bool) if case_weights is None else case_weights[layout.case_index] > 0
    ri, ci = layout.rater_index[keep], layout.case_index[keep]
    graph = sparse.csr_matrix((np.ones(ri.size), (ri, R + ci)), shape=(R + C, R + C))
    _, labels = csgraph.connected_components(graph, directed=False)
    present = np.zeros(R + C, bool)
    present[ri] = True
    present[R + ci] = True
    raw = labels[present]
    uniq, inverse = np.unique(raw, return_inverse=True)
    size = np.bincount(labels[ri], minlength=labels.max() + 1)[uniq]
    _, first_of_label = np.unique(labels, return_index=True)
    first_node = first_of_label[uniq]
    order = np.lexsort((first_node, -size))
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    part = np.full(R + C, -1, dtype=np.intp)
    part[present] = rank[inverse]
    return int(uniq.size), part[:R], part[R:]


@dataclass(frozen=True)
class AdditiveFit:
    """Least-squares fit of the additive rater + case model (fixed effects).

    Sums of squares are about the grand mean; ``ss_rater_given_case`` is the
    reduction R(rater | case) and ``ss_residual`` the residual of the full
    additive model. Counts are weighted when case weights (bootstrap counts) are used.
    """

    offsets: np.ndarray            # (R,) rater effects, sum zero within each part
    offset_var_unit: np.ndarray    # (R,) diag of the generalized inverse; var = sigma^2 * this
    part_of_rater: np.ndarray
    part_of_case: np.ndarray
    n_parts: int
    grand_mean: float
    n: float
    n_cases: float
    n_raters: int
    sum_readers_sq_over_n: float   # sum_c n_c^2 / N, for the one-way n0
    ss_total: float
    ss_cases: float
    ss_raters: float
    ss_within_cases: float
    ss_rater_given_case: float
    ss_residual: float
    offset_cov_unit: np.ndarray | None = None   # (R, R) generalized inverse A^+ (with_variance only)
    # cho_factor of the constrained reduced system when one was made (incomplete design,
    # dense route), so that fixed_design need not factor the same matrix again
    factor: tuple | None = field(default=None, repr=False)

    @property
    def df_residual(self) -> float:
        return self.n - (self.n_cases + self.n_raters - self.n_parts)

    @property
    def ss_case_given_rater(self) -> float:
        return self.ss_total - self.ss_residual - self.ss_raters


def fit_additive(
    layout: CrossedLayout,
    *,
    case_weights: np.ndarray | None = None,
    with_variance: bool = False,
    iterative: bool = False,
) -> AdditiveFit:
    """Fit y = mu + a_case + b_rater + e by absorbing the case effects.

    The rater effects solve the reduced normal equations
    :math:`(D_r - N D_c^{-1} N^\\top) b = N (y - \\bar y_{case})`, an ``R x R``
    system made non-singular by adding :math:`E E^\\top` (``E`` the rater-by-part
    indicator), which forces the sum-to-zero constraint within every part
    (the rows of the reduced matrix sum to zero within a part, so ``E`` spans its
    null space). With case weights ``w`` every case counts ``w`` times, which is
    exactly the fit on a data set with that case repeated ``w`` times.

    ``iterative=True`` solves by preconditioned conjugate gradients on the sparse
    matrix instead of a dense Cholesky factor (much faster for many raters, used
    in bootstrap loops); ``with_variance`` needs the dense route. A complete design
    (every rater read every case, no case weights) needs no solve: there the reduced
    matrix is :math:`C (I - J/R)`.
    """
    R, C = layout.n_raters, layout.n_cases
    w_case = np.ones(C) if case_weights is None else np.asarray(case_weights, float)
    w = w_case[layout.case_index]
    y = layout.y
    ci, ri = layout.case_index, layout.rater_index
    n_c = np.bincount(ci, minlength=C).astype(float)          # readers per case (unweighted)
    with np.errstate(invalid="ignore", divide="ignore"):
        case_mean = np.bincount(ci, weights=y, minlength=C) / n_c
    n_r = np.bincount(ri, weights=w, minlength=R)
    N = float(w.sum())
    grand = float((w * y).sum() / N)
    dev_case = y - case_mean[ci]
    ss_total = float((w * (y - grand) ** 2).sum())
    ss_within = float((w * dev_case**2).sum())
    with np.errstate(invalid="ignore", divide="ignore"):
        rater_mean = np.bincount(ri, weights=w * y, minlength=R) / n_r
    ss_raters = float(np.nansum(n_r * (rater_mean - grand) ** 2))

    n_parts, part_r, part_c = connected_parts(layout, w_case if case_weights is not None else None)
    rhs = np.bincount(ri, weights=w * dev_case, minlength=R)
    present = part_r >= 0
    var_unit = np.full(R, np.nan)
    cov_unit = factor = None
    if case_weights is None and layout.y.size == R * C:
        # complete design (every rater read every case once): the reduced matrix is
        # C (I - J/R), so the offsets are the raters' mean deviations from the case means
        # and A^+ = (I - J/R) / C, with no system to solve
        offsets = rhs / C
        if with_variance:
            cov_unit = (np.eye(R) - 1.0 / R) / C
            var_unit = np.diag(cov_unit).copy()
    elif with_variance or not iterative:
        reduced, indicator, pin = _reduced_system(layout, w, n_r, n_c, n_parts, part_r)
        system = reduced.toarray() + indicator @ indicator.T + np.diag(pin)
        factor = sla.cho_factor(system, lower=True, check_finite=False)
        offsets = sla.cho_solve(factor, rhs, check_finite=False)
        if with_variance:
            inv = _inverse_from_factor(factor)
            # (A + E E')^{-1} = A^+ + sum_parts 1 1' / R_part^2 on each part's block
            raters_per_part = np.bincount(part_r[present], minlength=n_parts).astype(float)
            same_part = (part_r[:, None] == part_r[None, :]) & present[:, None] & present[None, :]
            part_size = np.where(present, raters_per_part[np.maximum(part_r, 0)], np.nan)
            cov_unit = inv - np.where(same_part, 1.0 / part_size[:, None] ** 2, 0.0)
            cov_unit[~present, :] = np.nan
            cov_unit[:, ~present] = np.nan
            var_unit = np.diag(cov_unit).copy()
    else:
        reduced, indicator, pin = _reduced_system(layout, w, n_r, n_c, n_parts, part_r)
        offsets = _solve_iteratively(reduced.tocsr(), indicator, pin, rhs)
    offsets[~present] = np.nan
    reduction = float(np.dot(np.where(present, offsets, 0.0), rhs))
    return AdditiveFit(
        offsets=offsets,
        offset_var_unit=var_unit,
        part_of_rater=part_r,
        part_of_case=part_c,
        n_parts=n_parts,
        grand_mean=grand,
        n=N,
        n_cases=float(w_case[n_c > 0].sum()),
        n_raters=int(present.sum()),
        sum_readers_sq_over_n=float((w_case * n_c**2).sum() / N),
        ss_total=ss_total,
        ss_cases=ss_total - ss_within,
        ss_raters=ss_raters,
        ss_within_cases=ss_within,
        ss_rater_given_case=reduction,
        ss_residual=max(ss_within - reduction, 0.0),
        offset_cov_unit=cov_unit,
        factor=factor if case_weights is None else None,
    )


def _inverse_from_factor(factor) -> np.ndarray:
    """The inverse of a symmetric positive definite matrix from its ``cho_factor``
    (LAPACK ``potri``: a third of the work of solving against the identity)."""
    c, lower = factor
    inv, info = sla.lapack.dpotri(c, lower=lower)
    if info != 0:
        raise DegenerateFitError("The rater + case model could not be inverted; the rater network is too thin.")
    inv = np.tril(inv) if lower else np.triu(inv)
    return inv + (inv.T - np.diag(np.diag(inv)))


def _reduced_system(layout: CrossedLayout, w: np.ndarray, n_r: np.ndarray, n_c: np.ndarray,
                    n_parts: int, part_r: np.ndarray):
    """The reduced normal-equation matrix after absorbing cases, and what makes it non-singular.

    Returns ``(reduced, indicator, pin)``: the sparse ``D_r - N_w D_c^{-1} N^T``, the
    rater-by-part indicator ``E`` and the pin for raters absent from a resample.
    """
    R = layout.n_raters
    reduced = sparse.diags(n_r) - layout.incidence(w) @ sparse.diags(1.0 / n_c) @ layout.incidence().T
    present = part_r >= 0
    indicator = np.zeros((R, max(n_parts, 1)))
    indicator[np.flatnonzero(present), part_r[present]] = 1.0
    pin = (~present).astype(float)        # absent raters: effect pinned to 0
    return reduced, indicator, pin


@dataclass(frozen=True)
class FixedDesign:
    """What :func:`fit_additive_many` needs of a design that stays fixed between fits:
    the case and rater summing matrices over judgments, the counts, the connected
    parts and the Cholesky factor of the reduced system. Built once by
    :func:`fixed_design` and shared by every batch of a parametric bootstrap (the
    factor is the expensive part: an ``R x R`` Cholesky per batch before)."""

    by_case: sparse.csr_matrix      # (C, N) sums judgments per case
    by_rater: sparse.csr_matrix     # (R, N) sums judgments per rater
    readers_per_case: np.ndarray    # (C,)
    judgments_per_rater: np.ndarray  # (R,)
    n_parts: int
    part_of_rater: np.ndarray
    part_of_case: np.ndarray
    factor: tuple                   # scipy.linalg.cho_factor of the constrained reduced system


def fixed_design(layout: CrossedLayout, factor: tuple | None = None) -> FixedDesign:
    """The fixed part of :func:`fit_additive_many` on ``layout`` (see :class:`FixedDesign`);
    ``factor``: the reduced system's factor from :func:`fit_additive` on the same layout
    (``AdditiveFit.factor``), made here when absent."""
    R, C = layout.n_raters, layout.n_cases
    ci, ri = layout.case_index, layout.rater_index
    n_c = layout.readers_per_case()
    n_r = np.bincount(ri, minlength=R).astype(float)
    by_case = sparse.csr_matrix((np.ones(ci.size), (ci, np.arange(ci.size))), shape=(C, ci.size))
    by_rater = sparse.csr_matrix((np.ones(ri.size), (ri, np.arange(ri.size))), shape=(R, ri.size))
    n_parts, part_r, part_c = connected_parts(layout)
    if factor is None:
        reduced, indicator, pin = _reduced_system(layout, np.ones(ci.size), n_r, n_c, n_parts, part_r)
        system = reduced.toarray() + indicator @ indicator.T + np.diag(pin)
        factor = sla.cho_factor(system, lower=True, check_finite=False)
    return FixedDesign(by_case=by_case, by_rater=by_rater, readers_per_case=n_c,
                       judgments_per_rater=n_r, n_parts=n_parts, part_of_rater=part_r,
                       part_of_case=part_c, factor=factor)


def fit_additive_many(layout: CrossedLayout, ys: np.ndarray,
                      design: FixedDesign | None = None) -> AdditiveFit:
    """:func:`fit_additive` for many judgment vectors on one design at once.

    ``ys`` is (N, B): column ``b`` holds judgments in the layout's row order (who read
    what stays fixed). The design matrix does not change between columns, so the
    reduced system is factored once and every sum of squares is a column
    operation; the returned fit's sums of squares are (B,) arrays and its offsets
    (R, B). Used by the parametric bootstrap of :mod:`calibrate.agreement.icc`, which
    passes ``design`` (from :func:`fixed_design`) so that batches share one factor.
    """
    ys = np.asarray(ys, dtype=float)
    d = fixed_design(layout) if design is None else design
    R, C = layout.n_raters, layout.n_cases
    ci = layout.case_index
    N = float(ys.shape[0])
    n_c, n_r = d.readers_per_case, d.judgments_per_rater
    grand = ys.mean(axis=0)
    dev_case = ys - np.take(d.by_case @ ys / n_c[:, None], ci, axis=0)   # take: rows of a few panels, fast
    ss_total = ((ys - grand) ** 2).sum(axis=0)
    ss_within = (dev_case**2).sum(axis=0)
    ss_raters = (n_r[:, None] * (d.by_rater @ ys / n_r[:, None] - grand) ** 2).sum(axis=0)
    rhs = d.by_rater @ dev_case
    offsets = sla.cho_solve(d.factor, rhs, check_finite=False)
    reduction = (offsets * rhs).sum(axis=0)
    return AdditiveFit(
        offsets=offsets, offset_var_unit=np.full(R, np.nan), part_of_rater=d.part_of_rater,
        part_of_case=d.part_of_case, n_parts=d.n_parts, grand_mean=grand, n=N, n_cases=float(C),
        n_raters=R, sum_readers_sq_over_n=float((n_c**2).sum() / N),
        ss_total=ss_total, ss_cases=ss_total - ss_within, ss_raters=ss_raters,
        ss_within_cases=ss_within, ss_rater_given_case=reduction,
        ss_residual=np.maximum(ss_within - reduction, 0.0),
    )


def robust_offset_variance(layout: CrossedLayout, fit: AdditiveFit, form: str = "HC2") -> np.ndarray:
    """Heteroscedasticity-robust (HC2 or HC3) variances of the rater offsets, shape (R,).

    The offsets are linear in the judgments, :math:`b = A^+ Z^\\top y` with ``Z``
    the rater indicators centred within each case, so their robust covariance is
    :math:`A^+ Z^\\top \\Omega Z A^+` with :math:`\\Omega = diag(e_i^2 / (1 - h_i)^p)`,
    ``p = 1`` for HC2 and ``p = 2`` for HC3 (MacKinnon & White 1985; Long & Ervin
    2000; both as statsmodels implements them, which the tests compare against). The leverage of the full rater + case model splits into the case part and
    the rater part, :math:`h_i = 1/n_c + z_i^\\top A^+ z_i`; with few readers per case
    the case part alone is large (1/4 with four readers), and HC3's second power of
    :math:`1 - h_i` then over-corrects. A judgment with :math:`h_i = 1` (its case read
    by one rater) has a zero residual and a zero row of ``Z``: it carries no weight.
    Needs ``fit`` from ``with_variance=True``.
    """
    if form not in ROBUST_FORMS:
        raise DataError(f"The robust form must be one of {', '.join(ROBUST_FORMS)}; got {form!r}.")
    pinv = np.nan_to_num(fit.offset_cov_unit)
    R, C = layout.n_raters, layout.n_cases
    ri, ci, y = layout.rater_index, layout.case_index, layout.y
    n_c = layout.readers_per_case()
    offsets = np.nan_to_num(fit.offsets)
    case_mean = np.bincount(ci, weights=y, minlength=C) / n_c
    mean_offset = np.bincount(ci, weights=offsets[ri], minlength=C) / n_c
    resid = y - case_mean[ci] - (offsets[ri] - mean_offset[ci])
    power = {"HC2": 1.0, "HC3": 2.0}[form]
    if y.size == R * C:
        variance = _robust_variance_complete(resid, ri, R, C, power)
    else:
        variance = _robust_variance_incomplete(layout, pinv, resid, n_c, power)
    variance[fit.part_of_rater < 0] = np.nan
    return variance


def _hc_weights(resid: np.ndarray, leverage: np.ndarray, power: float) -> np.ndarray:
    """HC2/HC3 weights e^2 / (1 - h)^p; a judgment with h = 1 carries none."""
    free = 1.0 - leverage
    return np.where(free > 1e-9, resid**2 / np.where(free > 1e-9, free, 1.0) ** power, 0.0)


def _robust_variance_complete(resid: np.ndarray, ri: np.ndarray, R: int, C: int,
                              power: float) -> np.ndarray:
    """The robust variances on a complete design, in closed form.

    There ``A^+ = (I - J/R)/C`` and every case's mean indicator ``m_c = 1/R`` lies in its
    null space, so every judgment has the leverage of the balanced two-way model,
    :math:`h = 1/R + (1 - 1/R)/C`, and the rows of ``Z A^+`` are
    :math:`(e_r - 1/R)/C`; with :math:`\\Omega_r` the summed weights of rater ``r``:
    :math:`var(b_s) = [\\Omega_s (1 - 1/R)^2 + (\\Omega - \\Omega_s)/R^2] / C^2`.
    """
    leverage = np.full(resid.size, 1.0 / R + (1.0 - 1.0 / R) / C)
    per_rater = np.bincount(ri, weights=_hc_weights(resid, leverage, power), minlength=R)
    return (per_rater * (1.0 - 1.0 / R) ** 2 + (per_rater.sum() - per_rater) / R**2) / C**2


# judgment pairs (i, j) on the same case that the robust offset variances of an
# incomplete design hold at once (a few arrays of this length, 16 MB each)
ROBUST_BLOCK_VALUES = 2_000_000


def _case_pairs(case_index: np.ndarray, n_cases: int, max_pairs: int):
    """Every ordered pair (i, j) of judgments of the same case (i = j included), yielded
    as index arrays a block of cases at a time (at most ``max_pairs`` pairs a block
    unless one case alone has more)."""
    counts = np.bincount(case_index, minlength=n_cases)
    order = np.argsort(case_index, kind="stable")
    start = np.concatenate([[0], np.cumsum(counts)[:-1]])
    pairs_upto = np.cumsum(counts.astype(np.int64) ** 2)
    c0 = 0
    while c0 < n_cases:
        done = pairs_upto[c0 - 1] if c0 else 0
        c1 = max(int(np.searchsorted(pairs_upto, done + max_pairs, side="right")), c0 + 1)
        rows = order[start[c0]:start[c1 - 1] + counts[c1 - 1]]
        n = counts[case_index[rows]]
        i = np.repeat(rows, n)
        within = np.arange(i.size) - np.repeat(np.cumsum(n) - n, n)
        j = order[np.repeat(start[case_index[rows]], n) + within]
        yield i, j
        c0 = c1


def _robust_variance_incomplete(layout: CrossedLayout, pinv: np.ndarray, resid: np.ndarray,
                                n_c: np.ndarray, power: float) -> np.ndarray:
    """The robust variances on an incomplete design: :math:`diag(A^+ M A^+)` with
    :math:`M = Z^\\top \\Omega Z`, an ``R x R`` matrix with an entry only where two raters
    read a case in common.

    For judgments ``i, j`` of one case ``c`` (:math:`n_c` readers, weights :math:`\\omega`,
    :math:`W_c = \\sum_{i \\in c} \\omega_i`) the pair adds
    :math:`\\delta_{ij}\\omega_i - (\\omega_i + \\omega_j)/n_c + W_c/n_c^2` to
    :math:`M_{r_i r_j}`, and the leverages need only :math:`A^+` on those pairs:
    :math:`(A^+ m_c)_{r_i} = \\sum_{j \\in c} A^+_{r_i r_j} / n_c` and
    :math:`m_c^\\top A^+ m_c = \\sum_{i, j \\in c} A^+_{r_i r_j} / n_c^2`. The work grows
    with the pairs (:math:`\\sum_c n_c^2`) and ``R^2`` per nonzero column of ``M``, never
    with raters x cases.
    """
    R, C = layout.n_raters, layout.n_cases
    ri, ci = layout.rater_index, layout.case_index
    pair_at_i = np.zeros(resid.size)      # sum_j A+[r_i, r_j] over the judgments j of i's case
    for i, j in _case_pairs(ci, C, ROBUST_BLOCK_VALUES):
        pair_at_i += np.bincount(i, weights=pinv[ri[i], ri[j]], minlength=resid.size)
    pinv_m = pair_at_i / n_c[ci]                                      # (A^+ m_c)_{r_i}
    quad_case = np.bincount(ci, weights=pair_at_i, minlength=C) / n_c**2   # m_c' A^+ m_c
    leverage = 1.0 / n_c[ci] + np.diag(pinv)[ri] - 2.0 * pinv_m + quad_case[ci]
    omega = _hc_weights(resid, leverage, power)
    omega_case = np.bincount(ci, weights=omega, minlength=C)
    middle = sparse.csr_matrix((R, R))
    for i, j in _case_pairs(ci, C, ROBUST_BLOCK_VALUES):
        nc = n_c[ci[i]]
        weight = (np.where(i == j, omega[i], 0.0) - (omega[i] + omega[j]) / nc
                  + omega_case[ci[i]] / nc**2)
        middle = middle + sparse.csr_matrix((weight, (ri[i], ri[j])), shape=(R, R))
    if middle.nnz > R * R // 4:
        product = middle.toarray() @ pinv
    else:
        product = np.asarray(middle @ pinv)
    return (pinv * product).sum(axis=0)


def _solve_iteratively(reduced, indicator, pin, rhs) -> np.ndarray:
    """Conjugate gradients on (reduced + E E' + diag(pin)) x = rhs, Jacobi-preconditioned."""
    from scipy.sparse.linalg import LinearOperator, cg

    def apply(x):
        return reduced @ x + indicator @ (indicator.T @ x) + pin * x

    diag = reduced.diagonal() + (indicator**2).sum(axis=1) + pin
    size = rhs.size
    operator = LinearOperator((size, size), matvec=apply, dtype=float)
    precondition = LinearOperator((size, size), matvec=lambda x: x / diag, dtype=float)
    solution, info = cg(operator, rhs, rtol=1e-12, atol=0.0, maxiter=20 * size, M=precondition)
    if info != 0:
        raise DegenerateFitError("The rater + case model did not converge; the rater network is too thin.")
    return solution


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class RaterSeverity(ResultMixin):
    """One rater's offset, range use and central tendency.

    ``offset`` > 0: more lenient than the panel on the same files (higher
    judgments), < 0: more severe. ``sd_ratio`` is the spread of the rater's own
    judgments over the spread of the other readers' severity-adjusted judgments
    on the same files (below 1: uses less of the scale). ``middle_share`` is the
    share of the rater's judgments in the middle of the scale, beside the other
    readers' share on the same files.
    """

    rater: str
    n: int
    part: int
    estimate: float
    se: float           # heteroscedasticity-robust (se_method: HC2 or HC3)
    se_pooled: float    # from the one pooled residual variance, for comparison
    ci_low: float
    ci_high: float
    own_sd: float
    panel_sd: float
    sd_ratio: float
    middle_share: float
    panel_middle_share: float
    flags: tuple[str, ...] = ()
    se_method: str = "HC2"

    def to_dict(self) -> dict:
        from ..result_base import jsonable

        return jsonable({
            "offset": self.estimate,
            "se": self.se,
            "se_method": self.se_method,
            "se_pooled": self.se_pooled,
            "ci_low": self.ci_low,
            "ci_high": self.ci_high,
            "n": self.n,
            "part": self.part,
            "range_use": {"sd_ratio": self.sd_ratio, "own_sd": self.own_sd, "panel_sd": self.panel_sd},
            "central_tendency": {
                "middle_share": self.middle_share,
                "panel_middle_share": self.panel_middle_share,
            },
            "flags": list(self.flags),
        })


@dataclass(frozen=True)
class ConnectedPart(ResultMixin):
    """A set of raters linked to each other through shared files."""

    part: int
    raters: tuple[str, ...]
    n_cases: int
    n_judgments: int


@dataclass(frozen=True)
class SeverityResult(ResultMixin):
    """Severity of every rater in one phase, plus the network's connected parts."""

    raters: tuple[RaterSeverity, ...]
    parts: tuple[ConnectedPart, ...]
    connected: bool
    grand_mean: float
    residual_sd: float
    df_residual: float
    n_judgments: int
    offset_margin: float
    method: str
    warnings: tuple[str, ...] = ()

    def offsets(self) -> dict[str, float]:
        return {r.rater: r.estimate for r in self.raters}

    def for_rater(self, rater: str) -> RaterSeverity:
        for r in self.raters:
            if r.rater == rater:
                return r
        raise KeyError(rater)

    def to_frame(self) -> pd.DataFrame:
        return tidy_rows(self.raters)


# ---------------------------------------------------------------------------
# the public function
# ---------------------------------------------------------------------------

_MIN_CASES_FOR_FLAGS = 10
SEVERITY_METHOD = (
    "least-squares additive rater + case model, offsets centred within each connected part; "
    "standard errors heteroscedasticity-robust {form} (MacKinnon & White 1985), normal intervals"
)
ROBUST_FORMS = ("HC2", "HC3")


def severity(
    first: pd.DataFrame,
    *,
    scale: str,
    scale_min: float | None = None,
    scale_max: float | None = None,
    offset_margin: float | None = None,
    confidence: float = 0.95,
    robust_form: str = "HC2",
) -> SeverityResult:
    """Rater offsets, range use and central tendency on an incomplete design.

    Parameters
    ----------
    first : DataFrame with ``rater``, ``case``, ``judgment`` (one row per rater and case).
    scale : "continuous", "ordinal" or "binary".
    scale_min, scale_max : ends of the judgment scale; when absent the observed
        range is used (with a warning) for the middle band and the flag margin.
    offset_margin : smallest offset worth a flag, in judgment units. Default
        5% of the scale range (our own rule of thumb, no published source).
    confidence : level of the offset intervals.
    robust_form : "HC2" (default) or "HC3", the heteroscedasticity-robust SE.

    Returns
    -------
    SeverityResult

    Notes
    -----
    Offsets are the rater effects :math:`b_r` of the additive fixed-effects model
    :math:`y_{rc} = \\mu + a_c + b_r + e_{rc}` (least squares, sum of :math:`b_r`
    zero within each connected part), with
    with the heteroscedasticity-robust standard error of :func:`robust_offset_variance`,
    HC2 by default (MacKinnon & White 1985): raters differ in how noisy they are, and
    one pooled residual variance gave the noisiest rater too short an interval
    (85% coverage). HC2 rather than HC3 because HC3 over-covered in every design
    measured (about 98% for 95% intervals) while HC2 stayed within 93-97%
    (``benchmarks/bench_severity_coverage.py``; DEVELOPERS.md). ``se_pooled`` keeps the
    classical :math:`\\hat\\sigma \\sqrt{[A^+]_{rr}}` (``A`` the reduced
    normal-equation matrix after absorbing the case effects,
    :math:`\\hat\\sigma^2 = SSE / (N - C - R + K)`, ``K`` parts; Searle 1971, Linear
    Models, ch. 7; from memory) beside it. Intervals are estimate +- z SE.

    Flags (fixed identifiers; only for raters with at least 10 files):

    - ``lenient`` / ``severe``: the offset's interval lies wholly above
      ``+offset_margin`` / below ``-offset_margin``;
    - ``narrow_range`` / ``wide_range``: ``sd_ratio`` below 0.67 / above 1.5;
    - ``central_tendency``: ``middle_share`` exceeds the other readers' share on
      the same files by 0.20 or more.

    The thresholds are our own rules of thumb (no published source).
    """
    check_scale(scale, scale_min, scale_max)
    if robust_form not in ROBUST_FORMS:
        raise DataError(f"The robust form must be one of {', '.join(ROBUST_FORMS)}; got {robust_form!r}.")
    data = check_first(first)
    layout = crossed_layout(data)
    warnings: list[str] = []
    low, high = scale_min, scale_max
    if low is None or high is None:
        low = float(data["judgment"].min()) if low is None else low
        high = float(data["judgment"].max()) if high is None else high
        warnings.append(
            "The scale's ends were not given; the observed lowest and highest judgments "
            f"({low:g}, {high:g}) stand in for them."
        )
    if offset_margin is None:
        offset_margin = 0.05 * (high - low) if high > low else 0.0

    fit = fit_additive(layout, with_variance=True)
    df = fit.df_residual
    with np.errstate(invalid="ignore", divide="ignore"):
        sigma2 = fit.ss_residual / df if df > 0 else np.nan
        se_pooled = np.sqrt(sigma2 * fit.offset_var_unit)
        se = np.sqrt(robust_offset_variance(layout, fit, robust_form)) if df > 0 else np.full(layout.n_raters, np.nan)
    if not df > 0:
        warnings.append(
            "No residual degrees of freedom in the rater + case model (too few shared files): "
            "offsets have no standard error."
        )
    z = norm.ppf(0.5 + confidence / 2.0)
    R = layout.n_raters
    ri, ci, y = layout.rater_index, layout.case_index, layout.y
    n_r = np.bincount(ri, minlength=R)
    n_c = layout.readers_per_case()

    # spread: own judgments against the other readers' severity-adjusted judgments on the same files
    adjusted = y - np.nan_to_num(fit.offsets)[ri]
    own_sd = _group_sd(ri, y, R)
    s_case = np.bincount(ci, weights=adjusted, minlength=layout.n_cases)
    q_case = np.bincount(ci, weights=adjusted**2, minlength=layout.n_cases)
    n_other = np.bincount(ri, weights=n_c[ci] - 1.0, minlength=R)
    s_other = np.bincount(ri, weights=s_case[ci] - adjusted, minlength=R)
    q_other = np.bincount(ri, weights=q_case[ci] - adjusted**2, minlength=R)
    with np.errstate(invalid="ignore", divide="ignore"):
        var_other = (q_other - s_other**2 / n_other) / (n_other - 1.0)
        panel_sd = np.where(n_other > 1, np.sqrt(np.maximum(var_other, 0.0)), np.nan)
        sd_ratio = own_sd / panel_sd

    band = middle_band(scale, low, high)
    if band is None:
        middle_share = panel_middle = np.full(R, np.nan)
    else:
        tol = 1e-9 * max(1.0, abs(high - low))
        is_mid = ((y >= band[0] - tol) & (y <= band[1] + tol)).astype(float)
        mid_case = np.bincount(ci, weights=is_mid, minlength=layout.n_cases)
        with np.errstate(invalid="ignore", divide="ignore"):
            middle_share = np.bincount(ri, weights=is_mid, minlength=R) / n_r
            panel_middle = np.bincount(ri, weights=mid_case[ci] - is_mid, minlength=R) / n_other

    if fit.n_parts > 1:
        warnings.append(
            f"The raters fall into {fit.n_parts} groups that share no files; offsets are "
            "centred within each group and cannot be compared across groups."
        )
    raters = []
    for r in range(R):
        lo_ci, hi_ci = fit.offsets[r] - z * se[r], fit.offsets[r] + z * se[r]
        flags = []
        if n_r[r] >= _MIN_CASES_FOR_FLAGS:
            if lo_ci > offset_margin:
                flags.append("lenient")
            if hi_ci < -offset_margin:
                flags.append("severe")
            if sd_ratio[r] < 0.67:
                flags.append("narrow_range")
            if sd_ratio[r] > 1.5:
                flags.append("wide_range")
            if middle_share[r] - panel_middle[r] >= 0.20:
                flags.append("central_tendency")
        raters.append(RaterSeverity(
            rater=layout.raters[r], n=int(n_r[r]), part=int(fit.part_of_rater[r]),
            estimate=float(fit.offsets[r]), se=float(se[r]), se_pooled=float(se_pooled[r]),
            ci_low=float(lo_ci), ci_high=float(hi_ci),
            own_sd=float(own_sd[r]), panel_sd=float(panel_sd[r]), sd_ratio=float(sd_ratio[r]),
            middle_share=float(middle_share[r]), panel_middle_share=float(panel_middle[r]),
            flags=tuple(flags), se_method=robust_form,
        ))
    parts = []
    for k in range(fit.n_parts):
        members = tuple(layout.raters[i] for i in np.flatnonzero(fit.part_of_rater == k))
        in_part = fit.part_of_case[ci] == k
        parts.append(ConnectedPart(
            part=k, raters=members,
            n_cases=int((fit.part_of_case == k).sum()), n_judgments=int(in_part.sum()),
        ))
    return SeverityResult(
        raters=tuple(raters),
        parts=tuple(parts),
        connected=fit.n_parts == 1,
        grand_mean=fit.grand_mean,
        residual_sd=float(np.sqrt(sigma2)),
        df_residual=float(df),
        n_judgments=int(fit.n),
        offset_margin=float(offset_margin),
        method=SEVERITY_METHOD.format(form=robust_form),
        warnings=tuple(warnings),
    )


def _group_sd(groups: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """Sample SD (n - 1) of ``values`` within each group; NaN below two values."""
    n = np.bincount(groups, minlength=n_groups).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(groups, weights=values, minlength=n_groups) / n
        ss = np.bincount(groups, weights=(values - mean[groups]) ** 2, minlength=n_groups)
        return np.where(n > 1, np.sqrt(ss / (n - 1.0)), np.nan)
