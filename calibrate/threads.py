"""Run the batched linear algebra on one BLAS thread.

The analyses make many small matrix products and solves, batched over raters and
resamples (an 8 x 8 system, a 500 x 200 by 200 x 66 product). For these, the BLAS
library's own threads cost more in hand-overs than they gain: measured on the 2-core
development machine (shared), a batch of 40 products of 500 x 200 by 200 x 66 took
0.054 s on one thread and 0.14 s on two; 200,000 solves of 8 x 8, 0.34 s either way.
The process stays free to run the rater PDFs in parallel (``--jobs``).
"""

from __future__ import annotations

import contextlib


def one_blas_thread():
    """A context in which numpy's BLAS uses one thread (no-op without threadpoolctl)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # the limit only saves time; the numbers are the same without it
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")
