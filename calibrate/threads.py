"""Threads and cores: the batched linear algebra on one BLAS thread, and the cores the
process may use for its worker processes (``--jobs``).

The analyses make many small matrix products and solves, batched over raters and
resamples (an 8 x 8 system, a 500 x 200 by 200 x 66 product). For these, the BLAS
library's own threads cost more in hand-overs than they gain: measured on the 2-core
development machine (shared), a batch of 40 products of 500 x 200 by 200 x 66 took
0.054 s on one thread and 0.14 s on two; 200,000 solves of 8 x 8, 0.34 s either way.
The process stays free to run the rater PDFs in parallel (``--jobs``).
"""

from __future__ import annotations

import contextlib
import os


def one_blas_thread():
    """A context in which numpy's BLAS uses one thread (no-op without threadpoolctl)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # the limit only saves time; the numbers are the same without it
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def available_cores() -> int:
    """The cores this process may run on (its CPU affinity, not the machine's count)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - platforms without affinity masks
        return max(1, os.cpu_count() or 1)
