"""Judgments against the outcome and the rules: the lens model and judgment
bootstrapping, alignment with the rubric, the excluded-attribute check and cut-off rules."""

from .cutoffs import CutoffResult, RaterCutoff, cutoff_check
from .model import EnvironmentModel, LensResult, RaterLens, lens_model
from .rubric import (
    AlignmentResult,
    ExcludedResult,
    RaterAlignment,
    RaterExcluded,
    excluded_check,
    rubric_alignment,
)

__all__ = [
    "AlignmentResult",
    "CutoffResult",
    "EnvironmentModel",
    "ExcludedResult",
    "LensResult",
    "RaterAlignment",
    "RaterCutoff",
    "RaterExcluded",
    "RaterLens",
    "cutoff_check",
    "excluded_check",
    "lens_model",
    "rubric_alignment",
]
