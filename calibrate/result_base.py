"""Shared plumbing for result objects: JSON-safe conversion and tidy frames.

Result objects are frozen dataclasses of scalars, tuples and small mappings.
``to_dict()`` returns something ``json.dumps`` accepts (NaN and inf become
``None``); ``to_frame()`` returns a tidy pandas DataFrame.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any

import numpy as np


def jsonable(value: Any) -> Any:
    """Convert numpy scalars/arrays, tuples, dataclasses and NaN into plain JSON values.

    Plain Python scalars are tested first (they are most of a result), and a numeric
    numpy array is converted in bulk (``tolist`` once, non-finite values found with
    one vectorized test), not one call per number.
    """
    kind = type(value)
    if kind is float:
        return value if math.isfinite(value) else None
    if kind is str or kind is int or kind is bool or value is None:
        return value
    if kind is list or kind is tuple:
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _array_jsonable(value)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        if hasattr(value, "to_dict"):
            return value.to_dict()
        return {f.name: jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return None if not math.isfinite(f) else f
    return value


def _array_jsonable(array: np.ndarray) -> Any:
    """A numpy array as nested lists of JSON values, in bulk where the dtype allows."""
    if array.dtype.kind in "biu":
        return array.tolist()
    if array.dtype.kind == "f":
        finite = np.isfinite(array)
        if finite.all():
            return array.astype(float).tolist()
        return np.where(finite, array.astype(float), None).tolist()
    return [jsonable(v) for v in array.tolist()]


class ResultMixin:
    """Gives a frozen dataclass ``to_dict()`` (JSON-safe) and a default ``to_frame()``."""

    def to_dict(self) -> dict:
        return {f.name: jsonable(getattr(self, f.name)) for f in dataclasses.fields(self)}

    def to_frame(self):
        import pandas as pd

        flat = {k: v for k, v in self.to_dict().items() if not isinstance(v, (dict, list))}
        return pd.DataFrame([flat])
