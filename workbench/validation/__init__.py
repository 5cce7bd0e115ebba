"""Validation layer: performance on evaluation rows, the resampling engine, model comparison."""

from workbench.validation.compare import ComparisonResult, compare_models
from workbench.validation.evaluate import ModelPerformance, PairPerformance, evaluate_models
from workbench.validation.resample import ValidationResult, cv_splits, validate, validate_external

__all__ = [
    "ComparisonResult",
    "ModelPerformance",
    "PairPerformance",
    "ValidationResult",
    "compare_models",
    "cv_splits",
    "evaluate_models",
    "validate",
    "validate_external",
]
