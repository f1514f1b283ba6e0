"""Chance-corrected agreement on categories: Fleiss' kappa and Gwet's AC1.

Both read the same table: for every case, how many of its readers chose each
category (Fleiss 1971, Table 1 has this layout). With ``r_i`` readers of case ``i``
and ``r_ik`` of them choosing category ``k`` (``q`` categories):

.. math::

    p_a = \\frac{1}{n'} \\sum_{i: r_i \\ge 2} \\sum_k \\frac{r_{ik}(r_{ik} - 1)}{r_i (r_i - 1)},
    \\qquad \\pi_k = \\frac{1}{n} \\sum_i \\frac{r_{ik}}{r_i}

    \\kappa_F = \\frac{p_a - \\sum_k \\pi_k^2}{1 - \\sum_k \\pi_k^2}, \\qquad
    AC_1 = \\frac{p_a - p_e}{1 - p_e}, \\quad p_e = \\frac{1}{q - 1} \\sum_k \\pi_k (1 - \\pi_k)

``n'`` counts the cases with two or more readers (the only ones with a pair to
agree), ``n`` every case with a reader. ``r_{ik}(r_{ik} - 1) / (r_i (r_i - 1))`` is the
share of the case's reader pairs that chose the same category, so ``p_a`` is the mean,
over cases, of each case's share of agreeing pairs, and ``\\pi_k`` the mean, over cases,
of each case's share of readers choosing ``k``.

What is checked, and against what:

- *The same number of readers on every case* (whoever they are, as Fleiss 1971 allows):
  this is Fleiss' formula exactly, and kappa equals statsmodels' ``fleiss_kappa``. For
  AC1, statsmodels' Randolph kappa ``(p_a - 1/q)/(1 - 1/q)`` gives ``p_a`` and its Fleiss
  kappa then gives ``\\sum_k \\pi_k^2``; since the ``\\pi_k`` sum to one,
  ``\\sum_k \\pi_k (1 - \\pi_k) = 1 - \\sum_k \\pi_k^2``, so AC1 follows from those two
  numbers alone and matches ours to 1e-12 on Fleiss' (1971) table, on Krippendorff's
  (2011) units read by all four coders and on simulated panels. Verified: ``p_a``,
  ``\\sum_k \\pi_k^2`` (all that AC1's chance term needs) and the algebra. Resting on
  the written definition: AC1's form and its chance term ``p_e`` as Gwet (2008), Br. J.
  Math. Stat. Psychol. 61:29-48, gives them for two raters (``\\pi_k`` the mean of the
  two raters' margins, next item). That the same form with Fleiss' ``p_a`` and
  ``\\pi_k`` is his AC1 for more than two raters is as we recall the paper (from
  memory, not checked here).
- *Two readers on every case* (any two, a different pair from case to case): a case's
  agreement share is 1 if its two readers agree and 0 if not, and its category share the
  mean of the two readers' choices, so the form above equals Gwet's (2008) two-rater AC1
  on the pooled (q x q) table of the pairs, exactly; the tests check it to 1e-12 on Cohen's
  (1968) table and on simulated pairs.
- *A varying number of readers* (one case read by two, another by five): cases weigh
  the same in ``p_a`` and in ``\\pi_k`` however many read them. This is **our own rule**:
  it reduces to the two verified forms above, and we believe it is the generalisation
  in Gwet's *Handbook of Inter-Rater Reliability* (multiple raters, missing ratings), but
  that is from memory and was not checked against the book. Pooling reader pairs
  instead (weighting a case by its number of pairs) is the obvious alternative; it gives
  a different value in general. The unit tests check the code against this rule written
  out a second way (a loop over cases; agreeing pairs counted one by one on
  Krippendorff's data), which tests the code, not the rule. Fleiss' kappa uses the same rule.

The categories are those of the scale (every whole value between its ends on an
ordinal scale, 0 and 1 on a binary one), so a category nobody used still counts in
``q`` for AC1. Both coefficients treat the categories as unordered (exact
agreement only); Krippendorff's alpha at the ordinal level is the ordered companion.

The interval is a bias-corrected and accelerated bootstrap over cases (Efron 1987; the
acceleration from the leave-one-case-out values; readers held as they are), whose
coverage ``benchmarks/bench_category_agreement_coverage.py`` measures.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import DataError
from ..policy.resampling import bca_interval
from ..result_base import ResultMixin

CATEGORY_CI = ("bias-corrected and accelerated bootstrap over cases ({n_boot} resamples; readers of "
               "each case kept)")
CATEGORY_JACKKNIFE_CI = ("normal interval from the leave-one-case-out (jackknife) standard error "
                         "(readers of each case kept)")
COEFFICIENTS = (("fleiss_kappa", "Fleiss' kappa"), ("gwet_ac1", "Gwet's AC1"))


def category_counts(cases, values, *, categories=None) -> tuple[np.ndarray, np.ndarray]:
    """The (cases x categories) table of how many readers chose each category.

    Parameters
    ----------
    cases : the case of each judgment.
    values : the judgment (a category) of each judgment, same length.
    categories : every category of the scale, in order; default the values seen.

    Returns
    -------
    (counts, categories): counts[i, k] readers of the i-th case (in sorted order) who chose
    ``categories[k]``.
    """
    values = np.asarray(values, dtype=float)
    cases = np.asarray(cases)
    if values.shape != cases.shape:
        raise DataError("Category agreement needs one case per judgment (cases and values differ in length).")
    keep = np.isfinite(values)
    values, cases = values[keep], cases[keep]
    cats = np.unique(values) if categories is None else np.asarray(categories, dtype=float)
    where = np.searchsorted(cats, values)
    inside = (where < cats.size) & (cats[np.minimum(where, cats.size - 1)] == values)
    if not inside.all():
        odd = sorted(set(values[~inside].tolist()))[:5]
        raise DataError(f"Judgment value(s) {odd} are not among the categories {cats.tolist()}; "
                        "category agreement needs every judgment to be one of the scale's categories.")
    _, case_index = np.unique(cases, return_inverse=True)
    counts = np.zeros((int(case_index.max()) + 1 if case_index.size else 0, cats.size))
    np.add.at(counts, (case_index, where), 1.0)
    return counts, cats


def _case_terms(counts: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per case: its agreement share (NaN below two readers), its category shares, and whether
    it has a reader at all."""
    r = counts.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        agree = (counts * (counts - 1.0)).sum(axis=1) / (r * (r - 1.0))
        shares = counts / r[:, None]
    agree = np.where(r >= 2, agree, np.nan)
    shares = np.where(r[:, None] >= 1, shares, 0.0)
    return agree, shares, r >= 1


def _from_sums(sum_agree, n_pairable, sum_shares, n_rated) -> tuple[np.ndarray, np.ndarray]:
    """Fleiss' kappa and AC1 from the summed case terms (any leading shape; categories last)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        p_a = sum_agree / n_pairable
        pi = sum_shares / n_rated[..., None]
        q = sum_shares.shape[-1]
        pe_fleiss = (pi**2).sum(axis=-1)
        pe_gwet = (pi * (1.0 - pi)).sum(axis=-1) / (q - 1.0)
        return (p_a - pe_fleiss) / (1.0 - pe_fleiss), (p_a - pe_gwet) / (1.0 - pe_gwet)


def _coefficients(agree: np.ndarray, shares: np.ndarray, rated: np.ndarray,
                  weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fleiss' kappa and AC1 for each row of case ``weights`` (resamples x cases)."""
    pairable = np.isfinite(agree)
    return _from_sums(weights @ np.where(pairable, agree, 0.0), weights @ pairable.astype(float),
                      weights @ shares, weights @ rated.astype(float))


def _leave_one_out(agree: np.ndarray, shares: np.ndarray, rated: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Both coefficients with each case left out in turn (the jackknife), in O(cases x categories)."""
    pairable = np.isfinite(agree)
    terms = np.where(pairable, agree, 0.0)
    return _from_sums(terms.sum() - terms, pairable.sum() - pairable, shares.sum(axis=0) - shares,
                      rated.sum() - rated.astype(float))


def fleiss_kappa(counts) -> float:
    """Fleiss' (1971) kappa from a (cases x categories) table of reader counts (a varying number of
    readers per case follows our own rule, see the module notes)."""
    counts = _check_counts(counts)
    agree, shares, rated = _case_terms(counts)
    return float(_coefficients(agree, shares, rated, np.ones((1, counts.shape[0])))[0][0])


def gwet_ac1(counts) -> float:
    """Gwet's (2008) AC1 from a (cases x categories) table of reader counts (a varying number of
    readers per case follows our own rule, see the module notes)."""
    counts = _check_counts(counts)
    agree, shares, rated = _case_terms(counts)
    return float(_coefficients(agree, shares, rated, np.ones((1, counts.shape[0])))[1][0])


def _check_counts(counts) -> np.ndarray:
    table = np.asarray(counts, dtype=float)
    if table.ndim != 2 or table.shape[1] < 2:
        raise DataError("A category table needs one row per case and two or more category columns.")
    if (table < 0).any() or not np.all(table == np.round(table)):
        raise DataError("A category table holds counts of readers: whole numbers, zero or more.")
    return table


@dataclass(frozen=True)
class CategoryAgreement(ResultMixin):
    """One chance-corrected coefficient of agreement on categories, for one phase."""

    coefficient: str          # "fleiss_kappa" | "gwet_ac1"
    label: str
    estimate: float
    ci_low: float
    ci_high: float
    n_cases: int              # cases with two or more readers (the pairable ones)
    n_categories: int
    readers_min: int
    readers_max: int
    method: str


def category_agreement(first: pd.DataFrame, *, categories, n_boot: int = 500,
                       confidence: float = 0.95,
                       rng: np.random.Generator | int | None = None,
                       jackknife: bool = False) -> tuple[CategoryAgreement, ...]:
    """Fleiss' kappa and Gwet's AC1 of the panel's first judgments, each with a case-bootstrap interval.

    Parameters
    ----------
    first : DataFrame with ``case`` and ``judgment`` (one row per rater and case).
    categories : every category of the scale, in order (a category nobody chose still counts).
    n_boot : bootstrap resamples of the cases (0: no interval).
    confidence : level of the interval.
    rng : seed or Generator.
    jackknife : give the normal interval from the jackknife standard error instead of the
        bootstrap (the reduced form of very many cases, where the bootstrap's resample
        weights alone are resamples x cases draws): estimate +- z * SE with
        :math:`SE^2 = (n-1)/n \\sum_i (\\theta_{(i)} - \\bar\\theta_{(\\cdot)})^2` (Efron &
        Tibshirani 1993, ch. 11, from memory); ``n_boot`` is then not used.
    """
    counts, cats = category_counts(first["case"].to_numpy(), first["judgment"].to_numpy(),
                                   categories=categories)
    agree, shares, rated = _case_terms(counts)
    estimates = _coefficients(agree, shares, rated, np.ones((1, counts.shape[0])))
    readers = counts.sum(axis=1)
    lows, highs = [np.nan, np.nan], [np.nan, np.nan]
    method = "no interval"
    n = counts.shape[0]
    if jackknife and n >= 2:
        jack = np.column_stack(_leave_one_out(agree, shares, rated))
        z = stats.norm.ppf(0.5 + confidence / 2.0)
        for j, estimate in enumerate(e[0] for e in estimates):
            finite = jack[np.isfinite(jack[:, j]), j]
            if np.isfinite(estimate) and finite.size >= 2:
                se = float(np.sqrt((finite.size - 1.0) / finite.size * np.sum((finite - finite.mean()) ** 2)))
                lows[j], highs[j] = estimate - z * se, estimate + z * se
        method = CATEGORY_JACKKNIFE_CI
    elif n_boot > 0 and n >= 2:
        gen = np.random.default_rng(rng)
        weights = gen.multinomial(n, np.full(n, 1.0 / n), size=n_boot).astype(float)
        boot = np.column_stack(_coefficients(agree, shares, rated, weights))
        jack = np.column_stack(_leave_one_out(agree, shares, rated))
        for j, estimate in enumerate(e[0] for e in estimates):
            # undefined (one category only, say): no interval, rather than one from NaN resamples
            if np.isfinite(estimate) and np.isfinite(jack[:, j]).any():
                low, high = bca_interval(np.array([estimate]), boot[:, [j]], jack[:, [j]],
                                         alpha=1.0 - confidence)
                lows[j], highs[j] = float(low[0]), float(high[0])
        method = CATEGORY_CI.format(n_boot=n_boot)
    return tuple(
        CategoryAgreement(coefficient=name, label=label, estimate=float(estimates[j][0]),
                          ci_low=lows[j], ci_high=highs[j],
                          n_cases=int((readers >= 2).sum()), n_categories=int(cats.size),
                          readers_min=int(readers.min()) if readers.size else 0,
                          readers_max=int(readers.max()) if readers.size else 0, method=method)
        for j, (name, label) in enumerate(COEFFICIENTS))
