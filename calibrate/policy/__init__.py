"""Each rater's captured policy: the batched fits, their result objects, the case
bootstrap with BCa intervals, the logistic fit for decisions, relative importance,
fit diagnostics and the batched least-squares solver they all share."""

from .diagnostics import ResetTest, condition_number, reset_test, variance_inflation
from .fit import captured_policies, fit_policies
from .importance import cue_importance, dominance_weights, importance_shares, relative_weights
from .linalg import BatchedOLS, GroupedSSCP, grouped_sscp, ols_from_sscp
from .logistic import BatchedLogistic, fit_logistic
from .resampling import PolicyIntervals, bca_interval, case_bootstrap_intervals
from .results import CaseToReview, LogisticPolicy, PolicySet, RaterPolicy

__all__ = [
    "BatchedLogistic",
    "BatchedOLS",
    "CaseToReview",
    "GroupedSSCP",
    "LogisticPolicy",
    "PolicyIntervals",
    "PolicySet",
    "RaterPolicy",
    "ResetTest",
    "bca_interval",
    "captured_policies",
    "case_bootstrap_intervals",
    "condition_number",
    "cue_importance",
    "dominance_weights",
    "fit_logistic",
    "fit_policies",
    "grouped_sscp",
    "importance_shares",
    "ols_from_sscp",
    "relative_weights",
    "reset_test",
    "variance_inflation",
]
