"""Cohort reading, validation and summary."""
from workbench.cohort.core import TIME_UNITS, Cohort, CohortSource
from workbench.cohort.outcome import OUTCOME_DTYPE, check_outcome, make_outcome, split_outcome

__all__ = ["TIME_UNITS", "Cohort", "CohortSource", "OUTCOME_DTYPE", "check_outcome", "make_outcome", "split_outcome"]
