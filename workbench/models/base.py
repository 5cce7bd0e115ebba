"""The one small protocol every model of the workbench follows.

A model is fitted on a :class:`~workbench.cohort.Cohort` slice (the training
rows of a resample) and then applied, unchanged, to any other cohort with the
same columns: evaluation rows, an external cohort, one new patient.

``fit(cohort)`` returns the model; ``predict_risk(cohort)`` gives
:class:`~workbench.predictions.RiskScores` (higher = worse);
``predict_survival(cohort, times)`` gives
:class:`~workbench.predictions.SurvivalCurves`; ``describe()`` gives a
:class:`ModelDescription` of its terms for tables and reports.

Models follow scikit-learn's rules: ``__init__`` stores its arguments, learned
state ends in ``_``, no reference to the training data is kept, and randomness
comes from ``random_state``. :func:`clone_model` gives an unfitted copy, which is
what the resampling engine fits inside every replicate.
"""

from __future__ import annotations

import inspect
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np

from workbench.cohort.core import Cohort
from workbench.errors import NotFittedError
from workbench.predictions import RiskScores, SurvivalCurves


@dataclass(frozen=True)
class TermRow:
    """One row of a model's coefficient table."""

    term: str
    column: str
    coef: float
    se: float = float("nan")
    hazard_ratio: float = float("nan")
    ci_lower: float = float("nan")
    ci_upper: float = float("nan")
    p_value: float = float("nan")
    note: str = ""


@dataclass(frozen=True)
class ModelDescription:
    """What a fitted model is made of, for tables, reports and the bundle."""

    name: str
    kind: str
    n_train: int
    n_events: int
    terms: tuple[TermRow, ...] = ()
    details: dict = field(default_factory=dict)


@runtime_checkable
class SurvivalModel(Protocol):
    name: str

    def fit(self, cohort: Cohort) -> SurvivalModel: ...

    def predict_risk(self, cohort: Cohort) -> RiskScores: ...

    def predict_survival(self, cohort: Cohort, times) -> SurvivalCurves: ...

    def describe(self) -> ModelDescription: ...


def get_params(model) -> dict:
    """Constructor arguments of a model (scikit-learn style, from its signature)."""
    sig = inspect.signature(type(model).__init__)
    return {p: getattr(model, p) for p in sig.parameters if p != "self"}


def clone_model(model):
    """An unfitted copy with the same constructor arguments."""
    return type(model)(**get_params(model))


def check_fitted(model, attr: str) -> None:
    if not hasattr(model, attr):
        raise NotFittedError(
            f"model {getattr(model, 'name', type(model).__name__)!r} is used before it was fitted; call fit(cohort) first."
        )


def as_times(times) -> np.ndarray:
    """Evaluation times as a sorted array of unique floats."""
    return np.unique(np.atleast_1d(np.asarray(times, dtype=float)))
