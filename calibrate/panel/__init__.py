"""The panel's policies side by side: where two readers part ways (the interpersonal lens
model on shared cases), whether policies are alike (homogeneity), and groups of
raters who weigh cues alike (merge engine and stability)."""

from .grouping import GroupingResult, GroupPolicy, MergeStep, adjusted_rand_index, group_raters
from .pairs import ConflictResult, HomogeneityResult, PairConflict, pairwise_conflict, policy_homogeneity

__all__ = [
    "ConflictResult",
    "GroupPolicy",
    "GroupingResult",
    "HomogeneityResult",
    "MergeStep",
    "PairConflict",
    "adjusted_rand_index",
    "group_raters",
    "pairwise_conflict",
    "policy_homogeneity",
]
