"""How steadily each rater applies their own policy: test-retest on the hidden repeated
cases, and drift over the reading order."""

from .reading_order import DriftResult, RaterDrift, drift
from .repeats import ConsistencyVerdict, RaterRetest, RetestSet, consistency_verdict, retest

__all__ = [
    "ConsistencyVerdict",
    "DriftResult",
    "RaterDrift",
    "RaterRetest",
    "RetestSet",
    "consistency_verdict",
    "drift",
    "retest",
]
