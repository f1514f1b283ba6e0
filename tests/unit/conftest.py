"""Fixtures shared by the unit tests."""

import pytest

from calibrate.panel import merges


@pytest.fixture(params=["numpy", "compiled"])
def merge_engine(request, monkeypatch):
    """Run a test against both merge engines of the grouping, whatever the panel's size
    (the switch is the module constants :func:`merges.agglomerate` reads)."""
    if request.param == "compiled":
        pytest.importorskip("numba")
        monkeypatch.setattr(merges, "_SMALL_PANEL", 0)
        monkeypatch.setattr(merges, "_COMPILED_PANEL", 0)
    else:
        monkeypatch.setattr(merges, "_COMPILED_PANEL", 10**9)
    return request.param
