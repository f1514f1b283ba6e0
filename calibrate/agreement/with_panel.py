"""Each rater's agreement with the rest of the panel on the cases they shared.

For every first judgment of rater *r* on case *i* read by at least one other rater, the
*others' mean* is the mean of the other readers' judgments of that case. A rater's
agreement with the panel is Pearson's r between their judgments and the others' means
(a rater-total correlation with the rater left out of the total, so a rater never agrees
with themselves), with a Fisher-z interval, and the mean signed gap (their judgment
minus the others' mean). Computed for all raters at once from grouped sums.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ..data.rows import RaterLookup
from ..policy.linalg import grouped_sscp
from ..result_base import ResultMixin, jsonable


@dataclass(frozen=True)
class RaterPeerAgreement(ResultMixin):
    rater: str
    n: int              # cases shared with at least one other reader
    r: float            # correlation with the others' mean
    ci_low: float
    ci_high: float
    mean_gap: float     # mean of (own judgment - others' mean); positive = more lenient

    def to_dict(self) -> dict:
        return jsonable({"n": self.n, "r": self.r, "ci_low": self.ci_low, "ci_high": self.ci_high,
                         "mean_gap": self.mean_gap})


@dataclass(frozen=True)
class PeerAgreementSet(RaterLookup, ResultMixin):
    raters: tuple[RaterPeerAgreement, ...]
    confidence: float

    def to_dict(self) -> dict:
        return {"confidence": self.confidence, "raters": {r.rater: r.to_dict() for r in self.raters}}

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"rater": r.rater, **r.to_dict()} for r in self.raters])


def agreement_with_panel(first: pd.DataFrame, *, confidence: float = 0.95) -> PeerAgreementSet:
    """Per rater: r between their judgments and the mean of the other readers of each case.

    Parameters
    ----------
    first : one row per (rater, case) with columns rater, case, judgment.
    confidence : level of the Fisher-z interval (Fisher 1921; common practice).
    """
    data = first.dropna(subset=["judgment"])
    # codes in sorted id order (as np.unique of the ids as text gives), without sorting the text
    r_idx, raters = pd.factorize(data["rater"].astype(str), sort=True)
    c_idx, _ = pd.factorize(data["case"].astype(str), sort=True)
    raters = np.asarray(raters, dtype=str)
    y = data["judgment"].to_numpy(dtype=float)
    case_sum = np.bincount(c_idx, weights=y)
    case_n = np.bincount(c_idx)
    shared = case_n[c_idx] >= 2
    with np.errstate(invalid="ignore", divide="ignore"):
        others = (case_sum[c_idx] - y) / (case_n[c_idx] - 1)
    keep = shared
    stats_ = grouped_sscp(np.column_stack([y[keep], others[keep]]), r_idx[keep], len(raters))
    n = stats_.n
    with np.errstate(invalid="ignore", divide="ignore"):
        r = stats_.sscp[:, 0, 1] / np.sqrt(stats_.sscp[:, 0, 0] * stats_.sscp[:, 1, 1])
        gap = stats_.mean[:, 0] - stats_.mean[:, 1]
        z = np.arctanh(np.clip(r, -1 + 1e-15, 1 - 1e-15))
        half = stats.norm.ppf(0.5 + confidence / 2) / np.sqrt(n - 3)
    ok = n > 3
    lo = np.where(ok, np.tanh(z - half), np.nan)
    hi = np.where(ok, np.tanh(z + half), np.nan)
    items = tuple(
        RaterPeerAgreement(rater=str(raters[g]), n=int(n[g]), r=float(r[g]), ci_low=float(lo[g]),
                           ci_high=float(hi[g]), mean_gap=float(gap[g]))
        for g in range(len(raters))
    )
    return PeerAgreementSet(raters=items, confidence=confidence)
