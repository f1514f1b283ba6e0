"""The per-file view: raw mean, severity-adjusted score, spread, and files to read again.

A file's raw mean depends on who happened to read it. Removing each reader's
offset (from :func:`calibrate.agreement.offsets.severity`) gives the adjusted score, which
is the file's estimated value in the additive rater + case model. Two reasons put
a file on the "needs another read" list:

- ``high_disagreement``: its readers disagree more than the panel's residual
  spread explains (a chi-square screen on the severity-adjusted judgments);
- ``near_cut_off``: the cut-off lies inside the file's interval, so with few
  readers its side of the cut-off is not settled.
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


@dataclass(frozen=True)
class FileView(ResultMixin):
    """One row per file, plus the rules that built the list."""

    files: tuple[FileRow, ...]
    cut_off: float | None
    confidence: float
    disagreement_level: float
    warnings: tuple[str, ...] = ()

    def needs_another_read(self) -> tuple[str, ...]:
        return tuple(f.case for f in self.files if f.needs_another_read)

    def to_dict(self) -> dict:
        return jsonable({
            "cut_off": self.cut_off,
            "confidence": self.confidence,
            "disagreement_level": self.disagreement_level,
            "needs_another_read": list(self.needs_another_read()),
            "files": [f.to_dict() for f in self.files],
            "warnings": list(self.warnings),
        })

    def to_frame(self) -> pd.DataFrame:
        return tidy_rows(self.files, join=("reasons",))


def file_view(
    first: pd.DataFrame,
    severity_result: SeverityResult,
    *,
    cut_off: float | None = None,
    confidence: float = 0.95,
    disagreement_level: float = 0.01,
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
    :math:`\\bar z_c \\pm z_{1-\\alpha/2}\\, SE`.
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
    rows = []
    for c in range(C):
        reasons = []
        if p_dis[c] < disagreement_level:
            reasons.append("high_disagreement")
        if cut_off is not None and abs(adjusted[c] - cut_off) < zcrit * se[c]:
            reasons.append("near_cut_off")
        rows.append(FileRow(
            case=layout.cases[c], n_readers=int(n[c]), raw_mean=float(raw_mean[c]),
            adjusted=float(adjusted[c]), se=float(se[c]),
            spread_sd=float(spread_sd[c]), spread_range=float(highest[c] - lowest[c]),
            disagreement_p=float(p_dis[c]), part=int(part[c]),
            needs_another_read=bool(reasons), reasons=tuple(reasons),
        ))
    return FileView(
        files=tuple(rows), cut_off=None if cut_off is None else float(cut_off),
        confidence=float(confidence), disagreement_level=float(disagreement_level),
        warnings=tuple(warnings),
    )
