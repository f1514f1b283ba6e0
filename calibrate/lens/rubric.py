r"""Rubric alignment, the excluded-attribute check and the proxy check.

Rubric alignment
    Each rater's policy (least squares of judgment on the cues, on that rater's
    cases) is put on the rubric's basis: ``standardized`` weights are the raw
    weights times the cue's standard deviation over every case judged in the
    phase (one common yardstick, so a rater who applies the rubric exactly on any
    subset of cases reproduces it), ``raw`` weights are as fitted. A cue's share is
    its weight over the sum of absolute weights, sign kept. A categorical cue
    (several dummy columns) or a numeric cue with a missing-value indicator gets
    one share: the sum of the absolute weights of its columns, signed by the main
    column for a numeric cue and left positive for a categorical one (a level
    contrast has no single direction). Misallocation is
    ``1/2 * sum_j |share_j - rubric_j|``: 0 when the rater weighs the cues as the
    rubric does, 1 when the weight sits on wholly different cues.
    ``g_rubric`` is G between the rater's model and the rubric composite
    ``sum_j rubric_j * x_j`` on the basis (categorical cues leave the composite).

Excluded-attribute check
    Each attribute that must not count is added to the rater's policy. The gain in
    R^2 is tested with the nested F test (continuous and ordinal judgments) or the
    likelihood-ratio test of two logistic fits (binary judgments), and the p-values
    of all raters x attributes are Holm-adjusted. The proxy check names the cues
    strongly related to each attribute (first canonical correlation), because a
    rater can lean on an attribute through them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special, stats

from ..data.cues import CueDesign
from ..data.rows import JudgmentRows, RaterLookup, line_up, standard_deviations
from ..errors import DataError
from ..policy.linalg import grouped_sscp, ols_from_sscp
from ..pvalues import holm_adjust
from ..result_base import ResultMixin

ASSOCIATION_CAUTION = (
    "A flag here is a statistical association between an attribute and the judgments, "
    "to be looked into; it is not proof of intent. Any decision about a person follows "
    "the institution's policies and applicable law."
)
EXCLUDED_FLAG = "excluded_attribute"


# --------------------------------------------------------------------------- rubric


@dataclass(frozen=True)
class RaterAlignment(ResultMixin):
    """One rater against the rubric. ``to_dict()`` is the rater's ``alignment`` block."""

    rater: str
    n: int
    misallocation: float
    most_over: str | None
    most_under: str | None
    g_rubric: float
    shares: dict[str, float]
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class AlignmentResult(RaterLookup, ResultMixin):
    basis: str
    rubric_shares: dict[str, float]
    raters: tuple[RaterAlignment, ...]
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        """Tidy: one row per rater x cue with the rater's share and the rubric's."""
        records = [
            {"rater": r.rater, "cue": cue, "share": r.shares.get(cue, np.nan),
             "rubric_share": self.rubric_shares[cue], "misallocation": r.misallocation,
             "g_rubric": r.g_rubric}
            for r in self.raters for cue in self.rubric_shares
        ]
        return pd.DataFrame(records)


def _cue_shares(weights: np.ndarray, design: CueDesign) -> np.ndarray:
    """(G, n_cues) signed shares from (G, p) column weights on the rubric's basis."""
    groups = design.cue_groups()
    magnitude = np.stack([np.abs(weights[:, cols]).sum(axis=1) for cols in groups], axis=1)
    sign = np.stack([
        np.ones(weights.shape[0]) if design.kinds.get(cue) == "categorical"
        else np.sign(weights[:, cols[0]])
        for cue, cols in zip(design.cues, groups)
    ], axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return sign * magnitude / magnitude.sum(axis=1, keepdims=True)


def _validate_rubric(design: CueDesign, rubric: dict[str, float], basis: str) -> np.ndarray:
    if basis not in ("standardized", "raw"):
        raise DataError(f"The rubric basis must be 'standardized' or 'raw'; got {basis!r}.")
    unknown = sorted(set(rubric) - set(design.cues))
    if unknown:
        raise DataError(
            f"The rubric names cue(s) {', '.join(unknown)} that are not in the cue design "
            f"(cues: {', '.join(design.cues)})."
        )
    weights = np.array([float(rubric.get(cue, 0.0)) for cue in design.cues])
    total = np.abs(weights).sum()
    if not np.isfinite(total) or total == 0:
        raise DataError("The rubric weights are all zero (or not numbers); give at least one cue a weight.")
    return weights / total


def rubric_alignment(design: CueDesign, first: pd.DataFrame, rubric: dict[str, float], *,
                     basis: str = "standardized") -> AlignmentResult:
    r"""How far each rater's weights sit from the rubric's.

    Parameters
    ----------
    design, first : the phase's cue design and first judgments.
    rubric : cue -> intended weight (rescaled here so that the absolute weights sum to 1;
        cues not named get 0).
    basis : ``"standardized"`` (weights on cues z-scored over all judged cases) or
        ``"raw"`` (weights on the cues as they are in the table).

    Returns
    -------
    AlignmentResult
        Per rater: signed cue shares :math:`s_j = w_j / \sum_k |w_k|`, misallocation
        :math:`\tfrac12 \sum_j |s_j - \rho_j|`, the cues with the largest positive and
        negative share difference (None when no share differs by more than 1e-9), and
        ``g_rubric`` = corr(rater's fitted values, rubric composite) on the rater's cases.
    """
    rubric_share = _validate_rubric(design, rubric, basis)
    rows = line_up(design, first)
    p = design.n_columns
    fit_stats = grouped_sscp(np.column_stack([rows.X, rows.y]), rows.group, rows.n_raters)
    fit = ols_from_sscp(fit_stats, list(range(p)), p)
    sd = standard_deviations(design, rows.design_row) if basis == "standardized" else np.ones(p)
    on_basis = fit.coef * sd
    shares = _cue_shares(on_basis, design)

    # Rubric composite per design column on the raw scale; categorical cues leave it.
    column_weight = np.zeros(p)
    warnings: list[str] = []
    for cue, share, cols in zip(design.cues, rubric_share, design.cue_groups()):
        if share == 0 or not cols:
            continue
        if design.kinds.get(cue) == "categorical":
            warnings.append(
                f"Cue '{cue}' is categorical: its rubric share is compared with the rater's, "
                "but it has no direction, so it is left out of the rubric composite behind g_rubric."
            )
            continue
        with np.errstate(invalid="ignore", divide="ignore"):
            column_weight[cols[0]] = share / sd[cols[0]]
    Sxx = fit_stats.sscp[:, :p, :p]
    with np.errstate(invalid="ignore", divide="ignore"):
        cross = np.einsum("gi,gij,j->g", fit.coef, Sxx, column_weight)
        g_rubric = cross / np.sqrt(np.einsum("gi,gij,gj->g", fit.coef, Sxx, fit.coef)
                                   * np.einsum("i,gij,j->g", column_weight, Sxx, column_weight))
        difference = shares - rubric_share
        misallocation = 0.5 * np.abs(difference).sum(axis=1)
    counts = rows.counts()
    raters = []
    for i, name in enumerate(rows.raters):
        notes = []
        if not fit.rank_ok[i] or not np.isfinite(misallocation[i]):
            notes.append(f"Rater '{name}': the policy cannot be fitted on {int(counts[i])} cases; "
                         "no alignment figures.")
            raters.append(RaterAlignment(name, int(counts[i]), float("nan"), None, None,
                                         float("nan"), {}, tuple(notes)))
            continue
        over, under = int(np.argmax(difference[i])), int(np.argmin(difference[i]))
        raters.append(RaterAlignment(
            rater=name,
            n=int(counts[i]),
            misallocation=float(misallocation[i]),
            most_over=design.cues[over] if difference[i, over] > 1e-9 else None,
            most_under=design.cues[under] if difference[i, under] < -1e-9 else None,
            g_rubric=float(g_rubric[i]),
            shares={c: float(s) for c, s in zip(design.cues, shares[i])},
            warnings=tuple(notes),
        ))
    return AlignmentResult(
        basis=basis,
        rubric_shares={c: float(s) for c, s in zip(design.cues, rubric_share)},
        raters=tuple(raters),
        warnings=tuple(dict.fromkeys(warnings)),
    )


# --------------------------------------------------------------- excluded attributes


@dataclass(frozen=True)
class AttributeTest(ResultMixin):
    """One rater x one excluded attribute."""

    attribute: str
    n: int
    delta_r2: float
    statistic: float
    df_num: float
    df_den: float
    test: str
    p_value: float
    p_adjusted: float
    flagged: bool


@dataclass(frozen=True)
class RaterExcluded(ResultMixin):
    """All attribute tests of one rater; ``to_dict()`` gives the ``excluded`` block."""

    rater: str
    tests: tuple[AttributeTest, ...]
    flags: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        keys = ("delta_r2", "p_value", "p_adjusted", "flagged", "statistic", "test", "n")
        out = {}
        for t in self.tests:
            full = t.to_dict()
            out[t.attribute] = {k: full[k] for k in keys}
        return out


@dataclass(frozen=True)
class ProxyCue(ResultMixin):
    attribute: str
    cue: str
    association: float
    strong: bool


@dataclass(frozen=True)
class ExcludedResult(RaterLookup, ResultMixin):
    """Excluded-attribute check of one phase.

    ``attribute_predictability`` is the first canonical correlation between all cues
    and the attribute (for a numeric attribute: the multiple correlation).
    """

    raters: tuple[RaterExcluded, ...]
    proxies: tuple[ProxyCue, ...]
    attribute_predictability: dict[str, float]
    attribute_kinds: dict[str, str]
    alpha: float
    caution: str = ASSOCIATION_CAUTION
    warnings: tuple[str, ...] = ()

    def proxies_of(self, attribute: str) -> list[str]:
        """Cues strongly related to ``attribute``, strongest first."""
        hits = [p for p in self.proxies if p.attribute == attribute and p.strong]
        return [p.cue for p in sorted(hits, key=lambda p: -p.association)]

    def to_dict(self) -> dict:
        return {
            "raters": [{"rater": r.rater, "excluded": r.to_dict(), "flags": list(r.flags),
                        "warnings": list(r.warnings)} for r in self.raters],
            "proxies": [p.to_dict() for p in self.proxies],
            "attribute_predictability": {k: (v if np.isfinite(v) else None)
                                         for k, v in self.attribute_predictability.items()},
            "attribute_kinds": dict(self.attribute_kinds),
            "alpha": self.alpha,
            "caution": self.caution,
            "warnings": list(self.warnings),
        }

    def to_frame(self) -> pd.DataFrame:
        """Tidy: one row per rater x attribute."""
        return pd.DataFrame([{"rater": r.rater, **t.to_dict()} for r in self.raters for t in r.tests])


def attribute_columns(values: pd.Series) -> tuple[str, np.ndarray, list[str]]:
    """Encode one excluded attribute: numeric as one column, otherwise dummies.

    Booleans and numbers are numeric; anything else is categorical with the most
    frequent level as reference (ties by sort order), as for categorical cues.
    Missing values are NaN in every column.
    """
    if pd.api.types.is_bool_dtype(values) or pd.api.types.is_numeric_dtype(values):
        x = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
        return "numeric", x[:, None], [str(values.name)]
    present = values.notna().to_numpy()
    text = values.astype("string")
    counts = text[present].value_counts()
    levels = sorted(counts.index.tolist(), key=lambda lv: (-counts[lv], str(lv)))
    cols, names = [], []
    for level in sorted(levels[1:], key=str):
        cols.append(np.where(present, (text == level).fillna(False).to_numpy(dtype=float), np.nan))
        names.append(f"{values.name}={level}")
    block = np.column_stack(cols) if cols else np.full((len(values), 0), np.nan)
    return "categorical", block, names


def canonical_correlation(A: np.ndarray, B: np.ndarray) -> float:
    """First canonical correlation between column blocks A and B (rows = cases).

    Equals |r| for two single columns and the multiple correlation when one block
    has a single column (Hotelling 1936). Constant or redundant columns are dropped.
    """
    def basis(M):
        M = M - M.mean(axis=0)
        if M.shape[1] == 0:
            return M
        u, s, _ = np.linalg.svd(M, full_matrices=False)
        keep = s > 1e-10 * max(s.max(initial=0.0), 1e-300)
        return u[:, keep]
    Qa, Qb = basis(A), basis(B)
    if Qa.shape[1] == 0 or Qb.shape[1] == 0:
        return float("nan")
    return float(min(np.linalg.svd(Qa.T @ Qb, compute_uv=False).max(), 1.0))


def batched_logistic(W: np.ndarray, y: np.ndarray, group: np.ndarray, n_groups: int, *,
                     max_iter: int = 50, tol: float = 1e-10) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Logistic regression of 0/1 ``y`` on ``W`` (intercept column included) per group.

    Newton-Raphson for all groups at once: the gradient and Hessian of each group's
    log-likelihood are accumulated with ``bincount`` and solved in one batched call
    (pseudo-inverse, so a rank-deficient group does not stop the others).

    Returns
    -------
    deviance : (G,) -2 log-likelihood at the estimate
    coef : (G, q)
    converged : (G,) bool (False under separation, where the likelihood has no maximum)
    """
    m, q = W.shape
    coef = np.zeros((n_groups, q))
    converged = np.zeros(n_groups, dtype=bool)
    pairs = [(i, j) for i in range(q) for j in range(i, q)]
    for _ in range(max_iter):
        eta = np.einsum("mq,mq->m", W, coef[group])
        prob = special.expit(eta)
        weight = prob * (1.0 - prob)
        resid = y - prob
        grad = np.stack([np.bincount(group, weights=W[:, j] * resid, minlength=n_groups)
                         for j in range(q)], axis=1)
        hess = np.empty((n_groups, q, q))
        for i, j in pairs:
            h = np.bincount(group, weights=weight * W[:, i] * W[:, j], minlength=n_groups)
            hess[:, i, j] = hess[:, j, i] = h
        step = np.einsum("gij,gj->gi", np.linalg.pinv(hess, rcond=1e-12, hermitian=True), grad)
        # A cap on the step keeps a group drifting to separation from overflowing.
        size = np.abs(step).max(axis=1, keepdims=True)
        step = np.where(size > 5.0, step * 5.0 / np.maximum(size, 1e-300), step)
        step[converged] = 0.0
        coef += step
        converged |= np.abs(step).max(axis=1) < tol
        if converged.all():
            break
    eta = np.einsum("mq,mq->m", W, coef[group])
    loglik = y * -np.logaddexp(0.0, -eta) + (1.0 - y) * -np.logaddexp(0.0, eta)
    deviance = -2.0 * np.bincount(group, weights=loglik, minlength=n_groups)
    return deviance, coef, converged


def _nested_f(rows: JudgmentRows, A: np.ndarray, p: int):
    """Nested F of the attribute columns A over the cues, for every rater at once."""
    q = A.shape[1]
    Z = np.column_stack([rows.X, A, rows.y])
    s = grouped_sscp(Z, rows.group, rows.n_raters)
    reduced = ols_from_sscp(s, list(range(p)), p + q)
    full = ols_from_sscp(s, list(range(p + q)), p + q)
    df_num = np.full(rows.n_raters, float(q))
    df_den = full.df_resid.astype(float)
    rss_r, rss_f, tss = reduced.rss.copy(), full.rss.copy(), full.tss
    # A rater whose cases leave an attribute column constant or redundant (a level never
    # seen) is refitted alone with the effective rank, so the test keeps its true df.
    for g in np.flatnonzero(~full.rank_ok & reduced.rank_ok):
        idx = rows.group == g
        rr, rf, rank_r, rank_f, n = _rank_aware_rss(rows.X[idx], A[idx], rows.y[idx])
        rss_r[g], rss_f[g] = rr, rf
        df_num[g], df_den[g] = rank_f - rank_r, n - rank_f
    with np.errstate(invalid="ignore", divide="ignore"):
        delta = (rss_r - rss_f) / tss
        F = ((rss_r - rss_f) / df_num) / (rss_f / df_den)
        p_value = stats.f.sf(F, df_num, df_den)
    bad = ~reduced.rank_ok | (df_num < 1) | (df_den < 1) | ~(tss > 0)
    return (np.where(bad, np.nan, np.maximum(delta, 0.0)), np.where(bad, np.nan, F),
            df_num, df_den, np.where(bad, np.nan, p_value), rows.counts())


def _rank_aware_rss(X, A, y):
    one = np.ones((len(y), 1))
    def rss(M):
        coef, _, rank, _ = np.linalg.lstsq(M, y, rcond=None)
        return float(((y - M @ coef) ** 2).sum()), int(rank)
    rr, kr = rss(np.hstack([one, X]))
    rf, kf = rss(np.hstack([one, X, A]))
    return rr, rf, kr, kf, len(y)


def _likelihood_ratio(rows: JudgmentRows, A: np.ndarray, p: int):
    one = np.ones((rows.y.size, 1))
    dev_r, _, conv_r = batched_logistic(np.hstack([one, rows.X]), rows.y, rows.group, rows.n_raters)
    dev_f, _, conv_f = batched_logistic(np.hstack([one, rows.X, A]), rows.y, rows.group, rows.n_raters)
    n = rows.counts()
    events = np.bincount(rows.group, weights=rows.y, minlength=rows.n_raters)
    # On binary judgments McFadden's (1974) deviance share stands in for the R^2 gain.
    null_p = np.clip(events / np.maximum(n, 1), 1e-300, 1 - 1e-16)
    null_dev = -2.0 * (events * np.log(null_p) + (n - events) * np.log1p(-null_p))
    q = A.shape[1]
    with np.errstate(invalid="ignore", divide="ignore"):
        lr = np.maximum(dev_r - dev_f, 0.0)
        delta = lr / null_dev
        p_value = stats.chi2.sf(lr, q)
    bad = (events == 0) | (events == n) | (n < p + q + 2)
    return (np.where(bad, np.nan, delta), np.where(bad, np.nan, lr), np.full(rows.n_raters, float(q)),
            np.full(rows.n_raters, np.nan), np.where(bad, np.nan, p_value), n, ~(conv_r & conv_f) & ~bad)


def excluded_check(design: CueDesign, first: pd.DataFrame, excluded: pd.DataFrame, *,
                   scale: str = "continuous", alpha: float = 0.05,
                   proxy_threshold: float = 0.5) -> ExcludedResult:
    r"""Does an attribute that must not count add to a rater's policy?

    For each rater and attribute the attribute's columns are added to the cue model
    on the rater's cases where the attribute is known. Continuous and ordinal
    judgments: :math:`\Delta R^2 = (RSS_0 - RSS_1)/TSS` and the nested F test
    :math:`F = [(RSS_0 - RSS_1)/q] / [RSS_1/(n - p - q - 1)]`. Binary judgments: the
    likelihood-ratio test :math:`2(\ell_1 - \ell_0) \sim \chi^2_q` of two logistic
    fits, with McFadden's deviance share as ``delta_r2``. All raters x attributes are
    Holm-adjusted together (Holm 1979); ``flagged`` is ``p_adjusted < alpha``.

    Proxy check: for each attribute and cue, the first canonical correlation between
    the cue's columns and the attribute's over all judged cases; a cue at or above
    ``proxy_threshold`` (0.5, a large correlation by common practice; Cohen 1988, from
    memory) is named as a proxy.

    Parameters
    ----------
    excluded : DataFrame indexed by case id, one column per attribute (numeric or
        categorical, inferred from the dtype).
    scale : "continuous", "ordinal" or "binary" (0/1 judgments).
    """
    if scale not in ("continuous", "ordinal", "binary"):
        raise DataError(f"scale must be 'continuous', 'ordinal' or 'binary'; got {scale!r}.")
    if excluded.shape[1] == 0:
        raise DataError("No excluded attribute was given.")
    rows = line_up(design, first)
    if scale == "binary" and not np.isin(rows.y, (0.0, 1.0)).all():
        raise DataError("Binary judgments must be coded 0 and 1 for the excluded-attribute check.")
    p = design.n_columns
    table = excluded.copy()
    table.index = table.index.astype(str)
    if table.index.has_duplicates:
        raise DataError("The excluded-attribute table has more than one row for some case ids.")
    table = table.reindex(list(design.case_ids))

    kinds, results, warnings = {}, {}, []
    predictability, proxies = {}, []
    judged = np.unique(rows.design_row)
    for attribute in table.columns:
        kind, block, _ = attribute_columns(table[attribute])
        kinds[str(attribute)] = kind
        if block.shape[1] == 0:
            warnings.append(f"Attribute '{attribute}' has a single value (or none); it cannot be tested.")
            continue
        known = np.isfinite(block[rows.design_row]).all(axis=1)
        sub = rows.subset(known)
        A = block[sub.design_row]
        if scale == "binary":
            *out, unconverged = _likelihood_ratio(sub, A, p)
            for g in np.flatnonzero(unconverged):
                warnings.append(f"Rater '{rows.raters[g]}': the logistic fits with '{attribute}' did not "
                                "converge (the cues separate the decisions); the test is approximate.")
            results[str(attribute)] = (*out, "likelihood_ratio")
        else:
            results[str(attribute)] = (*_nested_f(sub, A, p), "nested_f")
        ok_rows = judged[np.isfinite(block[judged]).all(axis=1)]
        predictability[str(attribute)] = canonical_correlation(design.matrix[ok_rows], block[ok_rows])
        for cue, cols in zip(design.cues, design.cue_groups()):
            r = canonical_correlation(design.matrix[np.ix_(ok_rows, cols)], block[ok_rows])
            proxies.append(ProxyCue(str(attribute), cue, r, bool(np.isfinite(r) and r >= proxy_threshold)))

    names = list(results)
    p_matrix = np.column_stack([results[a][4] for a in names]) if names else np.empty((rows.n_raters, 0))
    adjusted = holm_adjust(p_matrix.ravel()).reshape(p_matrix.shape)
    raters = []
    for g, rater in enumerate(rows.raters):
        tests, notes = [], []
        for k, attribute in enumerate(names):
            delta, stat, df1, df2, pv, n, test = results[attribute]
            if not np.isfinite(pv[g]):
                notes.append(f"Rater '{rater}': '{attribute}' cannot be tested on {int(n[g])} cases "
                             "(too few cases, constant judgments, or the attribute does not vary).")
            tests.append(AttributeTest(
                attribute=attribute, n=int(n[g]), delta_r2=float(delta[g]), statistic=float(stat[g]),
                df_num=float(df1[g]), df_den=float(df2[g]), test=test, p_value=float(pv[g]),
                p_adjusted=float(adjusted[g, k]),
                flagged=bool(np.isfinite(adjusted[g, k]) and adjusted[g, k] < alpha),
            ))
        flags = (EXCLUDED_FLAG,) if any(t.flagged for t in tests) else ()
        raters.append(RaterExcluded(rater, tuple(tests), flags, tuple(notes)))
    return ExcludedResult(
        raters=tuple(raters),
        proxies=tuple(proxies),
        attribute_predictability=predictability,
        attribute_kinds=kinds,
        alpha=alpha,
        warnings=tuple(warnings),
    )
