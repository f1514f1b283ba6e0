"""Shared plumbing for result objects: JSON-safe conversion and tidy frames.

Result objects are frozen dataclasses of scalars, tuples and small mappings.
``to_dict()`` returns something ``json.dumps`` accepts (NaN and inf become
``None``); ``to_frame()`` returns a tidy pandas DataFrame.
"""

from __future__ import annotations

import contextlib
import dataclasses
import gc
import math
from collections.abc import Iterator, Mapping
from typing import Any

import numpy as np


def jsonable(value: Any) -> Any:
    """Convert numpy scalars/arrays, tuples, dataclasses and NaN into plain JSON values.

    Plain Python scalars are tested first (they are most of a result), and a numeric
    numpy array is converted in bulk (``tolist`` once, non-finite values found with
    one vectorized test), not one call per number. A plain dict or list is walked in one
    loop that keeps its plain scalars without a call each (results.json of 2,000 raters
    holds about 2.5 million values).
    """
    kind = type(value)
    if kind is float:
        return value if math.isfinite(value) else None
    if kind is str or kind is int or kind is bool or value is None:
        return value
    if kind is dict:
        return _dict_jsonable(value)
    if kind is list or kind is tuple:
        return _list_jsonable(value)
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


# The types jsonable returns unchanged (a float only when finite).
_KEPT = frozenset({str, int, bool, type(None)})


def _dict_jsonable(mapping: dict) -> dict:
    """``{str(k): jsonable(v)}`` with plain values kept inline (the same result, fewer calls)."""
    out = {}
    for key, v in mapping.items():
        kind = type(v)
        if kind is float:
            v = v if math.isfinite(v) else None
        elif kind not in _KEPT:
            v = jsonable(v)
        out[key if type(key) is str else str(key)] = v
    return out


def _list_jsonable(items) -> list:
    """``[jsonable(v) for v in items]`` with plain values kept inline."""
    out = []
    for v in items:
        kind = type(v)
        if kind is float:
            v = v if math.isfinite(v) else None
        elif kind not in _KEPT:
            v = jsonable(v)
        out.append(v)
    return out


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


def _field_names(kind: type) -> tuple[str, ...]:
    """The dataclass field names of ``kind``, read once per class (``dataclasses.fields``
    rebuilds its tuple on every call: 0.06 s for the 14,000 per-rater items of 2,000
    raters' entries, against 0.002 s)."""
    names = _FIELD_NAMES.get(kind)
    if names is None:
        names = _FIELD_NAMES[kind] = tuple(f.name for f in dataclasses.fields(kind))
    return names


_FIELD_NAMES: dict[type, tuple[str, ...]] = {}


@contextlib.contextmanager
def collector_paused() -> Iterator[None]:
    """A block in which Python's cycle collector does not run: for building the outputs'
    plain data (results.json's dicts and lists, the table texts), which makes no
    reference cycles. Each collection walks every object alive, the whole audit's results
    included: converting results.json of 2,000 raters took 0.60 s with the collector and
    0.22-0.36 s without (DEVELOPERS.md, "Speed at scale"). The collector runs again after
    the block, as it was."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


class ResultMixin:
    """Gives a frozen dataclass ``to_dict()`` (JSON-safe) and a default ``to_frame()``."""

    def to_dict(self) -> dict:
        return _dict_jsonable({name: getattr(self, name) for name in _field_names(type(self))})

    def to_frame(self):
        import pandas as pd

        flat = {k: v for k, v in self.to_dict().items() if not isinstance(v, (dict, list))}
        return pd.DataFrame([flat])
