"""Why raters disagree: the rater-pairs view and policy homogeneity, for one phase.

Where two readers part ways follows Hammond's interpersonal lens model: for two raters
``a`` and ``b`` who judged the same cases, fit each rater's policy (OLS of the
judgment on the cues) on exactly those shared cases. Then

.. math::

    r_{ab} = G_{ab} R_a R_b + C_{ab} \\sqrt{1 - R_a^2} \\sqrt{1 - R_b^2}

holds exactly, where ``r_ab`` is the correlation of the two raters' judgments,
``R_a`` and ``R_b`` their consistencies (multiple correlations), ``G_ab`` the
correlation of their fitted policies and ``C_ab`` the correlation of their
residuals (Hammond, Wilkins & Todd 1966, Psychological Bulletin 65:221-232;
Tucker 1964, Psychological Review 71:528-530, for the identity; citations from
memory).

Policy homogeneity asks whether the raters weigh the cues differently at all:
separate slopes per rater against common slopes with a separate intercept per
rater. Raters differ in their error variance, so the headline test is a Wald
test of equal slopes with a separate error variance per rater, with a
parametric-bootstrap p-value (Krishnamoorthy, Lu & Mathew 2007, from memory);
the classical nested-model F test, which assumes one error variance, is
reported beside it.

Everything is vectorized across raters and rater pairs through
:func:`calibrate.policy.linalg.grouped_sscp`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as sps

from ..data.cues import CueDesign
from ..data.rows import JudgmentRows, line_up
from ..errors import DataError
from ..policy.linalg import grouped_sscp, ols_from_sscp
from ..result_base import ResultMixin, jsonable

#: Default limit on the number of rater pairs kept in full (the furthest apart).
#: 2,016 pairs is every pair of a 64-rater panel.
#: Shared cases a pair needs per cue term (with terms + 3 the least): a rule of our own,
#: loose because the view describes a pair, it does not test one.
CASES_PER_TERM = 4.0
DEFAULT_MAX_PAIRS = 2016

# Pair rows are materialised in chunks of at most this many (pair x case) cells,
# which bounds memory at roughly 8 bytes x (cues + 2) x this number.
_CELLS_PER_CHUNK = 4_000_000


# ---------------------------------------------------------------------------
# Where two readers part ways
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class RaterPair(ResultMixin):
    """Interpersonal lens model for one pair of raters on their shared cases.

    Attributes
    ----------
    rater_a, rater_b : the pair (``rater_a`` sorts first).
    n : number of shared cases (first judgments of both, complete cues).
    r : correlation of the two raters' judgments (r_ab).
    g : correlation of the two fitted policies (G).
    c : correlation of the two residuals (C); NaN when a policy fits perfectly.
    r_s_a, r_s_b : each rater's consistency R_s, refitted on the shared cases.
    mean_gap : mean of (a - b) over the shared cases (positive: a scores higher).
    loss_inconsistency : 1 - R_a R_b, agreement lost to inconsistency.
    loss_weighting : R_a R_b (1 - G), agreement lost to weighing cues differently.
    unmodelled : C sqrt(1 - R_a^2) sqrt(1 - R_b^2), agreement from shared
        judgment outside the linear policies.
        ``1 - r = loss_inconsistency + loss_weighting - unmodelled`` exactly.
    main_source : "weighting" or "inconsistency", the larger of the two losses.
    dropped_terms : design columns left out of both policies for this pair because
        they are constant on the shared cases (say a category neither rater met
        together); the figures are those of the model without them.
    """

    rater_a: str
    rater_b: str
    n: int
    r: float
    g: float
    c: float
    r_s_a: float
    r_s_b: float
    mean_gap: float
    loss_inconsistency: float
    loss_weighting: float
    unmodelled: float
    main_source: str | None
    dropped_terms: tuple[str, ...] = ()


@dataclass(frozen=True)
class RaterPairsResult(ResultMixin):
    """Where two readers part ways for one phase.

    pairs : the kept pairs, furthest apart (lowest r) first.
    n_pairs_eligible : pairs with at least ``min_shared`` shared cases.
    n_pairs_kept : ``len(pairs)``; fewer than eligible when ``max_pairs`` cut the list.
    """

    pairs: tuple[RaterPair, ...]
    n_pairs_eligible: int
    n_pairs_kept: int
    min_shared: int           # the threshold applied: shared cases a pair needs
    max_pairs: int
    warnings: tuple[str, ...] = ()
    cases_per_term: float | None = None   # the rule behind min_shared (None: min_shared given)
    n_terms: int = 0
    n_pairs_total: int = 0    # every pair of raters in the phase
    most_shared: int = 0      # the most cases any pair shares
    threshold: str = ""       # the rule in words, for results.json and the report
    left_out: str | None = None   # why pairs are left out, in words (None: every pair is in)

    def to_frame(self) -> pd.DataFrame:
        columns = [f for f in RaterPair.__dataclass_fields__]
        return pd.DataFrame([p.to_dict() for p in self.pairs], columns=columns)


#: Above this many rater x case cells the judgments are kept as sparse matrices (a linked
#: design of 2,000 raters and 100,000 cases would take 1.6 GB a dense copy, and its
#: pair products would run over every empty cell).
_DENSE_CELLS = 20_000_000
#: ... and below this share of judged cells, whatever the size: the sparse products then
#: cost less (400 raters x 2,000 cases, measured: at 5% 0.048 s sparse against 0.085 s
#: dense, at 10% 0.074 against 0.085, at 20% 0.197 against 0.091; the linked 400-rater
#: bench panel, 1% judged, 0.03 s against 0.90 s). Shared-case counts are the same either
#: way, the screening correlations agree to about 1e-15.
_DENSE_FILL = 0.10


class _RaterCaseTable:
    """The judgments by rater and design row, dense (NaN where not judged) or sparse.

    ``screen()`` gives every pair's shared-case count and judgment correlation by
    matrix products; ``shared_rows(a, b)`` the cases both raters of each pair read, from
    each rater's run of judgments sorted by case (no dense row is made for a pair).
    """

    def __init__(self, rows: JudgmentRows, n_cases: int, *, dense_cells: int | None = None):
        key = rows.group * n_cases + rows.design_row
        order = np.argsort(key, kind="stable")
        key = key[order]
        if (key[1:] == key[:-1]).any():
            raise DataError("The first-judgment table has more than one row for some "
                            "(rater, case); keep only each rater's first judgment of a case.")
        self.shape = (rows.n_raters, n_cases)
        self.group, self.case, self.y = rows.group, rows.design_row, rows.y
        # each rater's judgments as one run, cases ascending
        self.sorted_case, self.sorted_y = rows.design_row[order], rows.y[order]
        self.count = np.bincount(rows.group, minlength=rows.n_raters)
        self.start = np.cumsum(self.count) - self.count
        limit = _DENSE_CELLS if dense_cells is None else dense_cells
        self.dense = None
        cells = rows.n_raters * n_cases
        if cells <= limit and rows.y.size >= _DENSE_FILL * cells:
            self.dense = np.full(self.shape, np.nan)
            self.dense[self.group, self.case] = self.y

    def _runs(self, raters: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The judgments of ``raters[k]`` one run after another: (k of each entry, entry)."""
        counts = self.count[raters]
        total = int(counts.sum())
        owner = np.repeat(np.arange(raters.size), counts)
        first_of_run = np.cumsum(counts) - counts
        entry = np.repeat(self.start[raters] - first_of_run, counts) + np.arange(total)
        return owner, entry

    def shared_rows(self, a: np.ndarray, b: np.ndarray):
        """Every case read by both raters of pair k = (a[k], b[k]): ``(pair, case, y_a, y_b)``,
        ordered by pair, then case (the order of ``np.nonzero`` on a pairs x cases mask)."""
        n_cases = self.shape[1]
        pair_a, entry_a = self._runs(a)
        pair_b, entry_b = self._runs(b)
        key_a = pair_a * n_cases + self.sorted_case[entry_a]   # ascending: by pair, then case
        key_b = pair_b * n_cases + self.sorted_case[entry_b]
        if key_b.size == 0:
            hit = np.zeros(key_a.size, dtype=bool)
            at = np.zeros(key_a.size, dtype=np.intp)
        else:
            at = np.minimum(np.searchsorted(key_b, key_a), key_b.size - 1)
            hit = key_b[at] == key_a
        entry_a = entry_a[hit]
        return (pair_a[hit], self.sorted_case[entry_a], self.sorted_y[entry_a],
                self.sorted_y[entry_b[at[hit]]])

    def screen(self) -> tuple[np.ndarray, np.ndarray]:
        """Shared-case counts and judgment correlations for every pair, by matrix products.

        Used only to choose which pairs to analyse in full; the reported figures
        come from the exact refits.
        """
        if self.dense is not None:
            return _screen_pairs(self.dense)
        from scipy import sparse

        R = self.shape[0]
        with np.errstate(invalid="ignore", divide="ignore"):
            centre = (np.bincount(self.group, weights=self.y, minlength=R)
                      / np.bincount(self.group, minlength=R))
        M = sparse.csr_matrix((np.ones(self.y.size), (self.group, self.case)), shape=self.shape)
        Y0 = sparse.csr_matrix((self.y - centre[self.group], (self.group, self.case)), shape=self.shape)
        n = (M @ M.T).toarray()
        sum_a = (Y0 @ M.T).toarray()
        sq_a = (Y0.multiply(Y0) @ M.T).toarray()
        cross = (Y0 @ Y0.T).toarray()
        return n, _screen_correlations(n, sum_a, sq_a, cross)


def _screen_pairs(Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shared-case counts and judgment correlations for every pair of rows of a dense table."""
    seen = np.isfinite(Y)
    M = seen.astype(float)
    with np.errstate(invalid="ignore"):
        centre = np.nanmean(np.where(seen, Y, np.nan), axis=1, keepdims=True)
    Y0 = np.where(seen, Y - np.nan_to_num(centre), 0.0)
    n = M @ M.T
    sum_a = Y0 @ M.T                       # [a, b]: sum of a's judgments on shared cases
    sq_a = (Y0 * Y0) @ M.T
    cross = Y0 @ Y0.T
    return n, _screen_correlations(n, sum_a, sq_a, cross)


def _screen_correlations(n, sum_a, sq_a, cross) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = cross - sum_a * sum_a.T / n
        var_a = sq_a - sum_a ** 2 / n
        return cov / np.sqrt(var_a * var_a.T)


def compare_rater_pairs(
    design: CueDesign,
    first: pd.DataFrame,
    *,
    cases_per_term: float = CASES_PER_TERM,
    min_shared: int | None = None,
    max_pairs: int = DEFAULT_MAX_PAIRS,
) -> RaterPairsResult:
    """Interpersonal lens model for every pair of raters with enough shared cases.

    For raters a and b and the cases S both judged (first judgments, complete
    cues), both policies are refitted on S by OLS, so that

    .. math::

        r_{ab} = G R_a R_b + C \\sqrt{1-R_a^2}\\sqrt{1-R_b^2}

    is an identity (Tucker 1964; Hammond, Wilkins & Todd 1966). It splits the
    pair's shortfall from perfect agreement exactly into
    ``1 - r = (1 - R_a R_b) + R_a R_b (1 - G) - C sqrt(1-R_a^2) sqrt(1-R_b^2)``:
    inconsistency, different weighting, and shared unmodelled judgment.

    Parameters
    ----------
    design : the phase's cue design.
    first : long table with columns ``rater``, ``case``, ``judgment`` (one row per
        rater and case).
    cases_per_term : a pair needs this many shared cases per model term (cue column),
        and never fewer than terms + 3, so both policies can be fitted with a residual.
    min_shared : a fixed number of shared cases instead of the per-term rule (terms + 3
        still the least).
    max_pairs : keep at most this many pairs, the furthest apart first (lowest
        r on shared cases); the default keeps every pair of a 64-rater panel.

    Returns
    -------
    RaterPairsResult

    Raises
    ------
    DataError
        Missing columns, unknown cases, or a repeated (rater, case) row.
        Judgments that are missing or whose case lacks a cue under a ``drop``
        rule are left out and counted in a warning.
    """
    if (min_shared is not None and min_shared < 1) or max_pairs < 1 or not cases_per_term > 0:
        raise DataError("min_shared and max_pairs must be positive integers and cases_per_term "
                        "a positive number.")
    rows = line_up(design, first)
    warnings: list[str] = []
    if rows.n_dropped:
        warnings.append(f"{rows.n_dropped} judgment(s) left out of the rater-pairs view because "
                        "the judgment or a cue of the case is missing.")
    X = design.matrix
    p = X.shape[1]
    table = _RaterCaseTable(rows, X.shape[0])
    n_shared, r_screen = table.screen()
    need, threshold = _pair_threshold(p, cases_per_term, min_shared)
    a_idx, b_idx = np.triu_indices(rows.n_raters, k=1)
    shared = n_shared[a_idx, b_idx]
    eligible = shared >= need
    a_idx, b_idx = a_idx[eligible], b_idx[eligible]
    n_eligible = int(a_idx.size)
    most = int(shared.max()) if shared.size else 0
    left_out = _left_out_reason(shared, need, threshold, most)
    if n_eligible == 0 and shared.size:
        warnings.append(f"The rater-pairs view is empty: {left_out}.")
    if n_eligible > max_pairs:
        screen = r_screen[a_idx, b_idx]
        keep = _lowest(np.where(np.isnan(screen), np.inf, screen), max_pairs)
        a_idx, b_idx = a_idx[keep], b_idx[keep]
        warnings.append(f"{n_eligible} rater pairs share enough cases; only the "
                        f"{max_pairs} furthest apart are kept.")
    complete = np.isfinite(X).all(axis=1)
    column_ss = ((X[complete] - X[complete].mean(axis=0)) ** 2).sum(axis=0)
    parts = [_pair_lens(X, column_ss, s.stop - s.start, *table.shared_rows(a_idx[s], b_idx[s]))
             for s in _chunks(a_idx.size, max(1, _CELLS_PER_CHUNK // max(1, X.shape[0])))]
    fields = {k: np.concatenate([part[k] for part in parts]) if parts else np.zeros(0)
              for k in ("n", "r", "g", "c", "r_s_a", "r_s_b", "mean_gap", "unmodelled",
                        "rank_ok", "dropped")}
    if not parts:
        fields["dropped"] = np.zeros((0, p), dtype=bool)
    bad = ~fields["rank_ok"].astype(bool)
    if bad.any():
        names = [f"{rows.raters[a]}-{rows.raters[b]}" for a, b in zip(a_idx[bad], b_idx[bad])]
        warnings.append(
            f"{int(bad.sum())} pair(s) have constant judgments or collinear cues on their "
            f"shared cases, so their policies cannot be separated ({', '.join(names[:5])}"
            f"{' ...' if len(names) > 5 else ''}); their figures are empty."
        )
    n_dropped = int((fields["dropped"].any(axis=1) & ~bad).sum())
    if n_dropped:
        warnings.append(f"{n_dropped} pair(s) share only cases on which some design column is "
                        "constant; that column is left out of both policies for the pair "
                        "(listed in its dropped_terms).")
    with np.errstate(invalid="ignore"):
        loss_incons = 1.0 - fields["r_s_a"] * fields["r_s_b"]
        loss_weight = fields["r_s_a"] * fields["r_s_b"] * (1.0 - fields["g"])
    order = np.lexsort((b_idx, a_idx, np.where(np.isnan(fields["r"]), np.inf, fields["r"])))
    pairs = []
    for k in order:
        li, lw = float(loss_incons[k]), float(loss_weight[k])
        source = None
        if np.isfinite(li) and np.isfinite(lw):
            source = "weighting" if lw > li else "inconsistency"
        pairs.append(RaterPair(
            rater_a=rows.raters[a_idx[k]], rater_b=rows.raters[b_idx[k]],
            n=int(fields["n"][k]), r=float(fields["r"][k]), g=float(fields["g"][k]),
            c=float(fields["c"][k]), r_s_a=float(fields["r_s_a"][k]),
            r_s_b=float(fields["r_s_b"][k]), mean_gap=float(fields["mean_gap"][k]),
            loss_inconsistency=li, loss_weighting=lw,
            unmodelled=float(fields["unmodelled"][k]), main_source=source,
            dropped_terms=tuple(design.columns[j] for j in np.flatnonzero(fields["dropped"][k])),
        ))
    return RaterPairsResult(
        pairs=tuple(pairs), n_pairs_eligible=n_eligible, n_pairs_kept=len(pairs),
        min_shared=int(need), max_pairs=int(max_pairs), warnings=tuple(warnings),
        cases_per_term=None if min_shared is not None else float(cases_per_term), n_terms=int(p),
        n_pairs_total=int(shared.size), most_shared=most, threshold=threshold, left_out=left_out,
    )


def _pair_threshold(n_terms: int, cases_per_term: float, min_shared: int | None) -> tuple[int, str]:
    """Shared cases a pair needs, and the rule in words ("12 cases (4 per cue term x 3 terms)")."""
    floor = n_terms + 3   # both refits keep a residual degree of freedom beyond intercept and terms
    if min_shared is not None:
        need = max(int(min_shared), floor)
        return need, f"{need} cases (a fixed number; at least terms + 3 = {floor})"
    per_term = int(np.ceil(cases_per_term * n_terms))
    need = max(per_term, floor)
    rule = f"{cases_per_term:g} per cue term x {n_terms} term{'s' if n_terms != 1 else ''}"
    if need > per_term:
        rule += f" = {per_term}, raised to terms + 3 = {floor} so both policies keep a residual"
    return need, f"{need} cases ({rule})"


def _left_out_reason(shared: np.ndarray, need: int, threshold: str, most: int) -> str | None:
    """Why pairs are left out, in words; None when every pair shares enough cases."""
    short = shared < need
    if not short.any():
        return None
    if short.all():
        return f"no pair shares the {threshold} needed; the most any pair shares is {most}"
    share_none = int((shared == 0).sum())
    none_part = f" ({share_none} of them share no case)" if share_none else ""
    return (f"{int(short.sum())} of {shared.size} pairs share fewer than the {threshold} needed{none_part}; "
            f"the most such a pair shares is {int(shared[short].max())}")


def _lowest(key: np.ndarray, count: int) -> np.ndarray:
    """Positions of the ``count`` smallest keys, ties to the earlier position, in position
    order: ``np.sort(np.lexsort((positions, key))[:count])`` by one partition instead of a
    full sort (two million pairs of a 2,000-rater panel: 0.55 s to 0.02 s)."""
    if count >= key.size:
        return np.arange(key.size)
    cut = np.partition(key, count - 1)[count - 1]
    below = key < cut
    at_cut = np.flatnonzero(key == cut)[:count - int(below.sum())]
    below[at_cut] = True
    return np.flatnonzero(below)


def _chunks(total: int, size: int):
    for start in range(0, total, size):
        yield slice(start, min(total, start + size))


#: A design column whose centred sum of squares on a pair's shared cases is below this
#: share of its sum of squares over all the design's cases is taken as constant there
#: (rounding in a two-pass centred sum is about 1e-16 of it; our choice, generous).
_CONSTANT_SHARE = 1e-10


def _drop_constant_columns(st, column_ss: np.ndarray, p: int) -> np.ndarray:
    """Neutralise, in place, the design columns constant on each pair's cases.

    Such a column's row and column of the SSCP are zeroed and its diagonal set to 1,
    so OLS gives it a weight of exactly 0 and every other figure is that of the
    model without it (the column is then orthogonal to everything). Returns the
    (pairs, p) mask of dropped columns.
    """
    diag = np.einsum("gii->gi", st.sscp[:, :p, :p])
    dropped = diag <= _CONSTANT_SHARE * np.maximum(column_ss, np.finfo(float).tiny)[None, :]
    g, j = np.nonzero(dropped)
    st.sscp[g, j, :] = 0.0
    st.sscp[g, :, j] = 0.0
    st.sscp[g, j, j] = 1.0
    return dropped


def _pair_lens(X: np.ndarray, column_ss: np.ndarray, n_pairs: int, pair: np.ndarray,
               case: np.ndarray, y_a: np.ndarray, y_b: np.ndarray) -> dict:
    """Exact lens-model components for ``n_pairs`` pairs from the rows of their shared cases
    (``pair``, ``case``, and the two raters' judgments ``y_a``, ``y_b``, by pair then case).

    Design columns constant on a pair's shared cases (against ``column_ss``, each column's
    sum of squares over the design) are dropped for that pair
    (:func:`_drop_constant_columns`) rather than leaving the pair without figures.
    """
    p = X.shape[1]
    Z = np.column_stack([X[case], y_a, y_b])
    st = grouped_sscp(Z, pair, n_pairs)
    dropped = _drop_constant_columns(st, column_ss, p)
    cues = np.arange(p)
    fit_a = ols_from_sscp(st, cues, p)
    fit_b = ols_from_sscp(st, cues, p + 1)
    Sxx = st.sscp[:, :p, :p]
    Sxy_a, Sxy_b = st.sscp[:, :p, p], st.sscp[:, :p, p + 1]
    S_aa, S_bb, S_ab = st.sscp[:, p, p], st.sscp[:, p + 1, p + 1], st.sscp[:, p, p + 1]
    ba, bb = fit_a.coef, fit_b.coef
    # Sums of squares and cross-products of fitted values and residuals, expanded
    # from the SSCP so that no row is revisited.
    fit_aa = np.einsum("gi,gij,gj->g", ba, Sxx, ba)
    fit_bb = np.einsum("gi,gij,gj->g", bb, Sxx, bb)
    fit_ab = np.einsum("gi,gij,gj->g", ba, Sxx, bb)
    res_aa = S_aa - 2.0 * np.einsum("gi,gi->g", ba, Sxy_a) + fit_aa
    res_bb = S_bb - 2.0 * np.einsum("gi,gi->g", bb, Sxy_b) + fit_bb
    res_ab = (S_ab - np.einsum("gi,gi->g", ba, Sxy_b) - np.einsum("gi,gi->g", bb, Sxy_a)
              + fit_ab)
    rank_ok = fit_a.rank_ok & fit_b.rank_ok & (S_aa > 0) & (S_bb > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.sqrt(S_aa * S_bb)
        out = {
            "n": st.n,
            "r": S_ab / scale,
            "g": fit_ab / np.sqrt(fit_aa * fit_bb),
            "c": res_ab / np.sqrt(res_aa * res_bb),
            "r_s_a": np.sqrt(fit_aa / S_aa),
            "r_s_b": np.sqrt(fit_bb / S_bb),
            "mean_gap": st.mean[:, p] - st.mean[:, p + 1],
            "unmodelled": res_ab / scale,
        }
    for key in ("r", "g", "c", "r_s_a", "r_s_b", "unmodelled"):
        out[key] = np.where(rank_ok, out[key], np.nan)
    out["rank_ok"] = rank_ok
    out["dropped"] = dropped
    return out

# ---------------------------------------------------------------------------
# Policy homogeneity
# ---------------------------------------------------------------------------

HOMOGENEITY_METHOD = (
    "Wald test of equal slopes with a separate error variance per rater, "
    "parametric bootstrap p-value"
)

#: Number of parametric-bootstrap draws behind the homogeneity p-values.
DEFAULT_HOMOGENEITY_RESAMPLES = 1999


@dataclass(frozen=True)
class SlopeEqualityTest(ResultMixin):
    """One test that the raters share the same weights (on all cues or on one cue).

    statistic : Wald statistic T with a separate error variance per rater.
    df : number of restrictions, (raters - 1) x columns tested.
    p_value : parametric-bootstrap p-value of T (valid with unequal variances).
    p_value_chi2 : the large-sample chi-square(df) p-value of T, for reference
        (too small when raters have few cases).
    classical_statistic, classical_df_num, classical_df_den, classical_p_value :
        the nested-model F test that pools one error variance for all raters.
    """

    cue: str | None
    statistic: float
    df: float
    p_value: float
    p_value_chi2: float
    classical_statistic: float
    classical_df_num: float
    classical_df_den: float
    classical_p_value: float


@dataclass(frozen=True)
class HomogeneityResult(ResultMixin):
    """Do the raters weigh the cues differently? Overall and per cue, for one phase.

    ``statistic``/``p_value`` are the robust test on all cues together;
    ``per_cue`` holds the same test on each cue's weight(s) alone.
    """

    method: str
    statistic: float
    df: float
    p_value: float
    classical_statistic: float
    classical_p_value: float
    n_raters: int
    n: int
    n_resamples: int
    overall: SlopeEqualityTest
    per_cue: tuple[SlopeEqualityTest, ...]
    raters_left_out: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        out = {k: jsonable(getattr(self, k)) for k in (
            "method", "statistic", "df", "p_value", "classical_statistic",
            "classical_p_value", "n_raters", "n", "n_resamples")}
        out["overall"] = self.overall.to_dict()
        out["per_cue"] = {t.cue: t.to_dict() for t in self.per_cue}
        out["raters_left_out"] = list(self.raters_left_out)
        out["warnings"] = list(self.warnings)
        return out

    def to_frame(self) -> pd.DataFrame:
        tests = [self.overall, *self.per_cue]
        frame = pd.DataFrame([t.to_dict() for t in tests])
        frame.insert(0, "scope", ["all cues"] + ["cue"] * len(self.per_cue))
        return frame


def heterogeneity_wald(estimates: np.ndarray, precisions: np.ndarray) -> np.ndarray:
    """Wald statistic that K groups share one parameter vector, batched.

    With estimates :math:`b_r` and precision matrices :math:`W_r = V_r^{-1}`,
    :math:`\\bar b = (\\sum_r W_r)^{-1} \\sum_r W_r b_r` and

    .. math::

        T = \\sum_r (b_r - \\bar b)^\\top W_r (b_r - \\bar b),

    which equals the Wald statistic of the K - 1 contrasts
    :math:`b_r - b_K` with block-diagonal covariance (exact identity).

    Parameters
    ----------
    estimates : (..., K, q) array.
    precisions : (..., K, q, q) array.

    Returns
    -------
    (...,) array of T.
    """
    weighted = np.einsum("...rij,...rj->...i", precisions, estimates)
    b_bar = np.linalg.solve(precisions.sum(axis=-3), weighted[..., None])[..., 0]
    d = estimates - b_bar[..., None, :]
    return np.einsum("...ri,...rij,...rj->...", d, precisions, d)


#: Draws x raters x cues of the homogeneity bootstrap handled at a time: 2 MB blocks, so
#: each block's drawn weights are read by every test while still in cache.
_NULL_BLOCK_CELLS = 1 << 18


def null_wald(z: np.ndarray, factor: np.ndarray, scale: np.ndarray,
              tests: list[tuple[np.ndarray | None, np.ndarray]]) -> list[np.ndarray]:
    """:func:`heterogeneity_wald` of every test for many null draws, a block of draws at a time.

    Draw ``b`` of rater ``r`` has weights ``b_br = factor[r] z[b, r]`` (all columns) and
    precision ``W_br = scale[b, r] * precision`` on a test's columns (the bootstrap keeps each
    rater's ``(X_r'X_r)`` and redraws only the error variance), so every sum over raters is
    a product with the draw's scales and no (draws, raters, q, q) array is built:
    ``sum_r W_br = scale @ precision`` and, with ``b_bar`` solving
    ``(sum_r W_br) b_bar = sum_r W_br b_br``,
    ``T_b = sum_r b_br' W_br b_br - b_bar' sum_r W_br b_br`` (expanding the quadratic form
    of :func:`heterogeneity_wald`; exact identity). The drawn weights exist only a block
    of draws at a time, read by every test while in cache (the whole (raters, p, draws)
    array of 2,000 raters was 256 MB, read once per test).

    Parameters
    ----------
    z : (B, K, p) standard normal draws.
    factor : (K, p, p) with ``factor[r] @ factor[r].T`` each rater's null covariance of the
        weights (``s_r^2 (X_r'X_r)^-1``: its Cholesky factor times ``s_r``).
    scale : (B, K) each draw's precision multiplier per rater (``1 / s_r*^2``).
    tests : ``(cols, precision)`` per test: the columns tested (None: every column) and
        the (K, q, q) precisions on them.

    Returns
    -------
    One (B,) array of T per test.
    """
    B, K, p = z.shape
    rows_of = np.swapaxes(factor, 1, 2)                 # row form: b_br' = z_br' factor_r'
    # Tests of one column each are run together: their precisions are scalars per rater.
    single = [t for t, (cols, P) in enumerate(tests) if cols is not None and cols.size == 1]
    several = [t for t in range(len(tests)) if t not in single]
    one_cols = np.array([int(tests[t][0][0]) for t in single], dtype=np.intp)
    one_precision = np.stack([tests[t][1][:, 0, 0] for t in single], axis=1) if single else None
    one_total = scale @ one_precision if single else None                  # (B, tests)
    totals = {t: (scale @ tests[t][1].reshape(K, -1)).reshape(B, *tests[t][1].shape[1:])
              for t in several}
    out = [np.empty(B) for _ in tests]
    block = max(1, _NULL_BLOCK_CELLS // max(1, K * p))
    for start in range(0, B, block):
        stop = min(B, start + block)
        drawn = np.matmul(z[start:stop].transpose(1, 0, 2), rows_of)   # (K, draws, p)
        along = scale[start:stop].T[:, :, None]                        # (K, draws, 1)
        for t in several:
            cols, P = tests[t]
            est = drawn if cols is None else drawn[:, :, cols]
            weighted_each = np.matmul(est, P)                          # P symmetric
            weighted_each *= along
            weighted = weighted_each.sum(axis=0)                       # (draws, q)
            quad = np.einsum("rbi,rbi->b", est, weighted_each)
            b_bar = np.linalg.solve(totals[t][start:stop], weighted[..., None])[..., 0]
            out[t][start:stop] = quad - np.einsum("bi,bi->b", b_bar, weighted)
        if single:
            est = drawn[:, :, one_cols]                                # (K, draws, tests)
            weighted_each = est * one_precision[:, None, :]
            weighted_each *= along
            weighted = weighted_each.sum(axis=0)                       # (draws, tests)
            quad = np.einsum("rbt,rbt->bt", est, weighted_each)
            T = quad - weighted * weighted / one_total[start:stop]
            for i, t in enumerate(single):
                out[t][start:stop] = T[:, i]
    return out


def _partial_sscp(sscp: np.ndarray, keep: np.ndarray, given: np.ndarray) -> np.ndarray:
    """Per-group SSCP of columns ``keep`` after regressing out columns ``given``."""
    S_kk = sscp[:, keep[:, None], keep[None, :]]
    if given.size == 0:
        return S_kk
    S_gg = sscp[:, given[:, None], given[None, :]]
    S_gk = sscp[:, given[:, None], keep[None, :]]
    return S_kk - np.einsum("gij,gik->gjk", S_gk, np.linalg.solve(S_gg, S_gk))


def _classical_f(sscp: np.ndarray, tested: np.ndarray, p: int, n_total: float,
                 rss_full: float):
    """Nested F: separate slopes on every cue vs common slopes on the ``tested`` columns.

    Both models keep a separate intercept per rater and separate slopes on the
    other columns; by Frisch-Waugh the reduced model's residual sum of squares
    comes from the pooled partial SSCP of (tested columns, judgment).
    """
    K = sscp.shape[0]
    others = np.setdiff1d(np.arange(p), tested)
    part = _partial_sscp(sscp, np.append(tested, p), others).sum(axis=0)
    q = tested.size
    Sxx, Sxy, Syy = part[:q, :q], part[:q, q], part[q, q]
    rss_reduced = Syy - Sxy @ np.linalg.solve(Sxx, Sxy)
    df_num = float((K - 1) * q)
    df_den = float(n_total - K * (p + 1))
    F = ((rss_reduced - rss_full) / df_num) / (rss_full / df_den)
    return float(F), df_num, df_den, float(sps.f.sf(F, df_num, df_den))


def _empty_homogeneity(cues, K, n, n_resamples, left_out, warnings) -> HomogeneityResult:
    def empty(cue):
        return SlopeEqualityTest(cue, *([np.nan] * 8))

    return HomogeneityResult(
        method=HOMOGENEITY_METHOD, statistic=np.nan, df=np.nan, p_value=np.nan,
        classical_statistic=np.nan, classical_p_value=np.nan, n_raters=K, n=n,
        n_resamples=n_resamples, overall=empty(None), per_cue=tuple(empty(c) for c in cues),
        raters_left_out=left_out, warnings=tuple(warnings))


def policy_homogeneity(
    design: CueDesign,
    first: pd.DataFrame,
    *,
    n_resamples: int = DEFAULT_HOMOGENEITY_RESAMPLES,
    rng: np.random.Generator | int | None = None,
) -> HomogeneityResult:
    """Test whether the raters' policies share the same cue weights.

    Full model: a separate intercept and separate slopes per rater (each
    rater's own policy, :math:`b_r` with covariance
    :math:`V_r = s_r^2 (X_r^\\top X_r)^{-1}`, :math:`s_r^2` on
    :math:`f_r = n_r - p - 1` degrees of freedom). Reduced model: a separate
    intercept per rater and common slopes.

    The robust test uses the Wald statistic of equal slopes with each rater's
    own error variance (:func:`heterogeneity_wald`). Its chi-square reference
    is too liberal with few cases per rater, so the p-value comes from a
    parametric bootstrap under the null (Krishnamoorthy, Lu & Mathew 2007,
    Computational Statistics & Data Analysis 51:5731-5742, for the one-way
    case; citation from memory): draw :math:`b_r^* \\sim N(0, s_r^2 (X_r^\\top X_r)^{-1})` and
    :math:`s_r^{*2} = s_r^2 \\chi^2_{f_r} / f_r`, recompute T, and count
    :math:`p = (1 + \\#\\{T^* \\ge T\\}) / (B + 1)`. T does not depend on the
    common slope, so the draws need no refit. The classical nested-model F,
    which pools one error variance, is reported beside it.

    Per cue, the same tests run on that cue's weight(s) (all dummies of a
    categorical cue together), with separate slopes kept on the other cues.
    Raters whose policy cannot be fitted (fewer than p + 3 cases with complete
    cues, constant judgments, collinear cues on their cases) are left out and
    named in ``raters_left_out``.

    Parameters
    ----------
    design : the phase's cue design.
    first : long table with columns ``rater``, ``case``, ``judgment``.
    n_resamples : parametric-bootstrap draws (B).
    rng : seed or generator; same input and seed give the same p-values.

    Returns
    -------
    HomogeneityResult
        NaN statistics plus a warning when fewer than two raters can be fitted.
    """
    if n_resamples < 1:
        raise DataError("n_resamples must be a positive integer.")
    rng = np.random.default_rng(rng)
    rows = line_up(design, first)
    X = design.matrix
    p = X.shape[1]
    st = grouped_sscp(np.column_stack([rows.X, rows.y]), rows.group, rows.n_raters)
    fit = ols_from_sscp(st, np.arange(p), p)
    with np.errstate(invalid="ignore"):
        usable = fit.rank_ok & (fit.df_resid >= 2) & (fit.rss > 0)
    left_out = tuple(r for r, ok in zip(rows.raters, usable) if not ok)
    warnings = []
    if rows.n_dropped:
        warnings.append(f"{rows.n_dropped} judgment(s) left out of the homogeneity test "
                        "because the judgment or a cue of the case is missing.")
    if left_out:
        warnings.append(
            f"{len(left_out)} rater(s) left out of the homogeneity test because their policy "
            f"cannot be fitted (too few cases, constant judgments or collinear cues): "
            f"{', '.join(left_out[:10])}{' ...' if len(left_out) > 10 else ''}."
        )
    cue_names = [c for c, g in zip(design.cues, design.cue_groups()) if g]
    groups = [np.asarray(g, dtype=np.intp) for g in design.cue_groups() if g]
    K = int(usable.sum())
    n_total = float(st.n[usable].sum())
    if K < 2 or p == 0:
        warnings.append("Policy homogeneity needs at least two raters with a fitted policy.")
        return _empty_homogeneity(cue_names, K, int(n_total), n_resamples, left_out, warnings)

    b = fit.coef[usable]
    s2 = fit.sigma2[usable]
    f = fit.df_resid[usable]
    M = fit.xtx_inv[usable]                     # (K, p, p): (X_r'X_r)^-1, centred
    rss_full = float(fit.rss[usable].sum())
    # Null draws shared by every test, so overall and per-cue p-values agree in
    # their randomness: b* ~ N(0, s2 M), s2* = s2 chi2_f / f.
    factor = np.linalg.cholesky(M) * np.sqrt(s2)[:, None, None]
    z = rng.standard_normal((n_resamples, K, p))
    s2_star = s2[None, :] * rng.chisquare(f[None, :].repeat(n_resamples, 0)) / f[None, :]
    every = [np.arange(p)] + groups
    precisions = [np.linalg.inv(M[:, cols[:, None], cols[None, :]]) for cols in every]
    T_stars = null_wald(z, factor, 1.0 / s2_star,
                        [(None if cols.size == p else cols, P) for cols, P in zip(every, precisions)])
    del z

    def one_test(cue: str | None, cols: np.ndarray, M_inv: np.ndarray, T_star: np.ndarray) -> SlopeEqualityTest:
        T = float(heterogeneity_wald(b[:, cols], M_inv / s2[:, None, None]))
        df = float((K - 1) * cols.size)
        p_boot = (1.0 + np.count_nonzero(T_star >= T)) / (n_resamples + 1.0)
        cF, cd1, cd2, cp = _classical_f(st.sscp[usable], cols, p, n_total, rss_full)
        return SlopeEqualityTest(cue, T, df, float(p_boot), float(sps.chi2.sf(T, df)),
                                 cF, cd1, cd2, cp)

    tests = [one_test(cue, cols, P, T_star)
             for cue, cols, P, T_star in zip([None] + cue_names, every, precisions, T_stars)]
    overall, per_cue = tests[0], tuple(tests[1:])
    return HomogeneityResult(
        method=HOMOGENEITY_METHOD, statistic=overall.statistic, df=overall.df,
        p_value=overall.p_value, classical_statistic=overall.classical_statistic,
        classical_p_value=overall.classical_p_value, n_raters=K, n=int(n_total),
        n_resamples=int(n_resamples), overall=overall, per_cue=per_cue,
        raters_left_out=left_out, warnings=tuple(warnings))
