"""The panel's policies side by side: where two readers part ways (the interpersonal lens
model on shared cases), whether policies are alike (homogeneity), and groups of
raters who weigh cues alike (merge engine and stability)."""

from .grouping import GroupingResult, GroupPolicy, MergeStep, adjusted_rand_index, group_raters
from .pairs import RaterPairsResult, HomogeneityResult, RaterPair, compare_rater_pairs, policy_homogeneity

__all__ = [
    "RaterPairsResult",
    "GroupPolicy",
    "GroupingResult",
    "HomogeneityResult",
    "MergeStep",
    "RaterPair",
    "adjusted_rand_index",
    "group_raters",
    "compare_rater_pairs",
    "policy_homogeneity",
]
