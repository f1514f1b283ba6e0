"""Before and after a training: the comparison of phases (``calibrate compare``)."""

from .phases import COMPARISON_SCHEMA, Change, ComparisonResult, RaterComparison, compare, phase_pairs
from .tests_of_change import (ancova_difference, bootstrap_difference, fisher_z_difference,
                              normal_difference, paired_tests, welch_difference)

__all__ = ["COMPARISON_SCHEMA", "Change", "ComparisonResult", "RaterComparison", "ancova_difference",
           "bootstrap_difference", "compare", "fisher_z_difference", "normal_difference",
           "paired_tests", "phase_pairs", "welch_difference"]
