"""Adjusting p-values for testing many raters at once (shared by every per-rater test)."""

from __future__ import annotations

import numpy as np


def holm_adjust(p_values: np.ndarray) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values; NaN entries stay NaN and do not count.

    The adjusted value of the i-th smallest of m p-values is
    ``max_{j<=i} min(1, (m - j + 1) p_(j))`` (Holm 1979, Scand. J. Statist. 6:65-70).
    """
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    finite = np.isfinite(p)
    m = int(finite.sum())
    if m == 0:
        return out
    flat = p[finite]
    order = np.argsort(flat, kind="stable")
    stepped = (m - np.arange(m)) * flat[order]
    adjusted = np.minimum(np.maximum.accumulate(stepped), 1.0)
    result = np.empty(m)
    result[order] = adjusted
    out[finite] = result
    return out
