"""The per-file view: raw mean, severity-adjusted score, spread, and files to read again.

A file's raw mean depends on who happened to read it. Removing each reader's
offset (from :func:`calibrate.agreement.offsets.severity`) gives the adjusted score, which
is the file's estimated value in the additive rater + case model. With a cut-off, each file
gets ``change_probability``: the chance that one more reading moves its adjusted score to
the other side of the cut-off (:func:`change_probability`). Two reasons put a file on the
"needs another read" list, which is ranked by that chance:

- ``may_change``: that chance is at least ``change_level`` (20%, our own choice);
- ``high_disagreement``: its readers disagree more than the panel's residual
  spread explains (a chi-square screen on the severity-adjusted judgments).

``near_cut_off`` (the cut-off inside the file's 95% interval) is kept as a column: on the
demo it held 306 of 700 files, most of them with little chance of changing side.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import chi2, norm

from ..errors import DataError
from ..result_base import ResultMixin, jsonable
from .offsets import SeverityResult, check_first, crossed_layout, tidy_rows


@dataclass(frozen=True)
class FileRow(ResultMixin):
    """One file's standing."""

    case: str
    n_readers: int
    raw_mean: float
    adjusted: float
    se: float             # of the adjusted score, from the residual SD alone
    spread_sd: float      # SD of the readers' raw judgments
    spread_range: float   # highest minus lowest raw judgment
    disagreement_p: float
    part: int
    needs_another_read: bool
    reasons: tuple[str, ...]
    change_probability: float = float("nan")   # one more reading moves it across the cut-off
    near_cut_off: bool = False                 # the cut-off lies inside its interval


@dataclass(frozen=True)
class FileView(ResultMixin):
    """One row per file, plus the rules that built the list."""

    files: tuple[FileRow, ...]
    cut_off: float | None
    confidence: float
    disagreement_level: float
    warnings: tuple[str, ...] = ()
    change_level: float = 0.20
    case_variance: float = float("nan")   # spread of the files' true values (for the change chance)

    def ranked(self) -> tuple[FileRow, ...]:
        """Every file, the most likely to change side with one more reading first; files
        without a chance (no cut-off) by their disagreement p-value; ties keep file order."""
        def key(f: FileRow):
            p = f.change_probability
            return (-(p if np.isfinite(p) else -1.0),
                    f.disagreement_p if np.isfinite(f.disagreement_p) else 2.0)
        return tuple(sorted(self.files, key=key))

    def needs_another_read(self) -> tuple[str, ...]:
        """The files to read again, the most likely to change first."""
        return tuple(f.case for f in self.ranked() if f.needs_another_read)

    def n_may_change(self) -> int:
        return sum("may_change" in f.reasons for f in self.files)

    def to_dict(self) -> dict:
        return jsonable({
            "cut_off": self.cut_off,
            "confidence": self.confidence,
            "disagreement_level": self.disagreement_level,
            "change_level": self.change_level,
            "case_variance": self.case_variance,
            "n_may_change": self.n_may_change(),
            "needs_another_read": list(self.needs_another_read()),
            "files": [f.to_dict() for f in self.files],
            "warnings": list(self.warnings),
        })

    def to_frame(self) -> pd.DataFrame:
        """One row per file, ranked (``change_rank`` 1 = the most likely to change side)."""
        frame = tidy_rows(self.ranked(), join=("reasons",))
        frame.insert(1, "change_rank", np.arange(1, len(frame) + 1))
        return frame


def change_probability(adjusted, n_readers, *, cut_off: float, residual_sd: float, mean: float,
                       case_variance: float) -> np.ndarray:
    """The chance that one more reading moves each file's adjusted score across ``cut_off``.

    Model (the additive rater + case model behind the adjusted scores, normal errors): a
    reader's severity-adjusted judgment of file c is :math:`z = \\theta_c + e`, with
    :math:`e \\sim N(0, \\sigma^2)` (``residual_sd``); the files' true values spread as
    :math:`\\theta_c \\sim N(\\mu, \\tau^2)` (``mean``, ``case_variance``). The file's
    decision is its adjusted mean :math:`m_c` of :math:`n_c` readings against the cut-off
    :math:`k` (at or above: yes). Given :math:`m_c`, the true value is
    :math:`N(\\mu + w(m_c - \\mu),\\ w\\sigma^2/n_c)` with
    :math:`w = \\tau^2 / (\\tau^2 + \\sigma^2/n_c)`, so a fresh reading is
    :math:`z \\sim N(\\mu + w(m_c - \\mu),\\ \\sigma^2 (1 + w/n_c))`. With it the mean becomes
    :math:`(n_c m_c + z)/(n_c + 1)`, which crosses :math:`k` exactly when :math:`z` passes
    :math:`t = (n_c + 1)k - n_c m_c`; the probability is that normal's mass beyond
    :math:`t` on the far side. So a file's mean, its readers (their number and the panel's
    residual spread of the adjusted judgments) and the cut-off decide it; the shrinkage
    toward :math:`\\mu` keeps a file with few readers from looking settled by luck.
    Left out: the uncertainty of the readers' offsets and of the variance estimates, and
    rounding to a scale's steps (measured in ``benchmarks/bench_change_probability.py``).
    """
    m = np.asarray(adjusted, dtype=float)
    n = np.asarray(n_readers, dtype=float)
    sigma2 = float(residual_sd) ** 2
    tau2 = max(float(case_variance), 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        w = tau2 / (tau2 + sigma2 / n)
        centre = mean + w * (m - mean)
        sd = np.sqrt(sigma2 * (1.0 + w / n))
        gap = ((n + 1.0) * cut_off - n * m - centre) / sd
        above = m >= cut_off
        p = np.where(above, norm.cdf(gap), norm.sf(gap))
    return np.where(np.isfinite(m) & (n > 0) & np.isfinite(sd) & (sd > 0), p, np.nan)


def file_view(
    first: pd.DataFrame,
    severity_result: SeverityResult,
    *,
    cut_off: float | None = None,
    confidence: float = 0.95,
    disagreement_level: float = 0.01,
    change_level: float = 0.20,
) -> FileView:
    """Per-file raw and severity-adjusted scores, spread, and the files to read again.

    Parameters
    ----------
    first : the same first-judgment table the severity result was computed on.
    severity_result : from :func:`calibrate.agreement.offsets.severity`.
    cut_off : a decision threshold on the judgment scale (optional).
    confidence : level of the interval that decides ``near_cut_off``.
    disagreement_level : a file is flagged ``high_disagreement`` when its
        chi-square p-value falls below this (0.01: our own choice, to keep the
        list short on large panels; no correction across files).
    change_level : a file is flagged ``may_change`` when one more reading moves it
        across the cut-off with at least this chance (0.20: our own choice).

    Notes
    -----
    With adjusted judgments :math:`z_{rc} = y_{rc} - b_r`, the adjusted score is
    :math:`\\bar z_c` (equal to :math:`\\hat\\mu + \\hat a_c` in the additive
    model), its SE :math:`\\hat\\sigma / \\sqrt{n_c}` (the uncertainty of the
    offsets is left out), and the disagreement screen compares
    :math:`\\sum_r (z_{rc} - \\bar z_c)^2 / \\hat\\sigma^2` with a chi-square on
    :math:`n_c - 1` df, which is approximate: the residual df of a file are
    slightly fewer, so the screen errs towards flagging too few.
    A file is ``near_cut_off`` when the cut-off lies inside
    :math:`\\bar z_c \\pm z_{1-\\alpha/2}\\, SE`. The spread of the files' true values
    for :func:`change_probability` is estimated by moments from the adjusted scores:
    :math:`\\hat\\tau^2 = \\max(0, \\mathrm{var}(\\bar z_c) - \\mathrm{mean}(SE_c^2))`.
    """
    data = check_first(first)
    layout = crossed_layout(data)
    offsets = severity_result.offsets()
    unknown = sorted(set(layout.raters) - set(offsets))
    if unknown:
        raise DataError(
            f"The severity result has no offset for rater(s) {', '.join(unknown[:5])}: "
            "compute severity on the same first-judgment table."
        )
    warnings = []
    C = layout.n_cases
    ci, y = layout.case_index, layout.y
    b = np.array([offsets[r] for r in layout.raters])[layout.rater_index]
    if not np.all(np.isfinite(b)):
        warnings.append("Some raters have no offset; their judgments enter the adjusted scores unadjusted.")
        b = np.nan_to_num(b)
    z = y - b
    n = np.bincount(ci, minlength=C).astype(float)
    raw_mean = np.bincount(ci, weights=y, minlength=C) / n
    adjusted = np.bincount(ci, weights=z, minlength=C) / n
    with np.errstate(invalid="ignore", divide="ignore"):
        spread_sd = np.sqrt(np.bincount(ci, weights=(y - raw_mean[ci]) ** 2, minlength=C) / (n - 1.0))
        spread_sd = np.where(n > 1, spread_sd, np.nan)
    highest = np.full(C, -np.inf)
    lowest = np.full(C, np.inf)
    np.maximum.at(highest, ci, y)
    np.minimum.at(lowest, ci, y)
    sigma = severity_result.residual_sd
    with np.errstate(invalid="ignore", divide="ignore"):
        ss_adj = np.bincount(ci, weights=(z - adjusted[ci]) ** 2, minlength=C)
        p_dis = np.where(n > 1, chi2.sf(ss_adj / sigma**2, n - 1.0), np.nan)
        se = sigma / np.sqrt(n)
    if not np.isfinite(sigma):
        warnings.append("The panel's residual spread is unknown, so no file is screened for disagreement.")
    zcrit = norm.ppf(0.5 + confidence / 2.0)
    part_of_rater = {r.rater: r.part for r in severity_result.raters}
    part = np.full(C, -1, dtype=int)
    part[ci] = np.array([part_of_rater[r] for r in layout.raters])[layout.rater_index]
    finite = np.isfinite(adjusted) & np.isfinite(se)
    case_variance = (float(max(np.var(adjusted[finite], ddof=1) - np.mean(se[finite] ** 2), 0.0))
                     if finite.sum() > 1 else float("nan"))
    if cut_off is not None and np.isfinite(sigma) and np.isfinite(case_variance):
        change = change_probability(adjusted, n, cut_off=float(cut_off), residual_sd=sigma,
                                    mean=float(np.mean(adjusted[finite])), case_variance=case_variance)
    else:
        change = np.full(C, np.nan)
    # every file's flags at once, and the rows from plain lists (a per-file loop over numpy
    # scalars took 0.9 s for the 100,000 files of a linked 2,000-rater panel)
    may_change = change >= change_level
    disagrees = p_dis < disagreement_level
    near = (np.abs(adjusted - cut_off) < zcrit * se) if cut_off is not None else np.zeros(C, dtype=bool)
    reason_words = {(False, False): (), (True, False): ("may_change",),
                    (False, True): ("high_disagreement",), (True, True): ("may_change", "high_disagreement")}
    rows = [FileRow(case=case, n_readers=readers, raw_mean=raw, adjusted=adj, se=s_e, spread_sd=sd,
                    spread_range=width, disagreement_p=p_value, part=piece,
                    needs_another_read=m or d, reasons=reason_words[m, d], change_probability=chance,
                    near_cut_off=close)
            for case, readers, raw, adj, s_e, sd, width, p_value, piece, m, d, chance, close in zip(
                layout.cases, n.astype(int).tolist(), raw_mean.tolist(), adjusted.tolist(), se.tolist(),
                spread_sd.tolist(), (highest - lowest).tolist(), p_dis.tolist(), part.tolist(),
                may_change.tolist(), disagrees.tolist(), change.tolist(), near.tolist())]
    return FileView(
        files=tuple(rows), cut_off=None if cut_off is None else float(cut_off),
        confidence=float(confidence), disagreement_level=float(disagreement_level),
        warnings=tuple(warnings), change_level=float(change_level), case_variance=case_variance,
    )
