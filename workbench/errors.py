"""Exception tree and warning categories.

Every error the workbench raises on purpose derives from :class:`WorkbenchError`.
A message says what is wrong, where (file, column, rows), what was expected and
how to fix it; the command line prints it without a traceback and exits with 2.

Statistical red flags are warnings, each with its own category so that users and
tests can filter or escalate them precisely.
"""

from __future__ import annotations


class WorkbenchError(Exception):
    """Base class of every error the workbench raises deliberately."""


class CohortError(WorkbenchError):
    """The input tables cannot be read, joined or validated."""


class SpecError(WorkbenchError):
    """The study specification is malformed or inconsistent with the data."""


class ModelError(WorkbenchError):
    """A model cannot be fitted or applied (for example an unseen batch)."""


class MetricError(WorkbenchError):
    """A metric cannot be computed for the data given (for example a horizon outside follow-up)."""


class BundleError(WorkbenchError):
    """A saved model bundle is missing, tampered with or from another version."""


class NotFittedError(ModelError):
    """A transformer or model was used before ``fit``."""


# ---------------------------------------------------------------- warnings


class WorkbenchWarning(UserWarning):
    """Base class of the workbench's statistical warnings."""


class LowEventsWarning(WorkbenchWarning):
    """Few events per candidate predictor or per model parameter."""


class ConvergenceWarning(WorkbenchWarning):
    """An iterative fit stopped before converging."""


class SeparationWarning(WorkbenchWarning):
    """Monotone likelihood: coefficients run off towards infinity."""


class ProportionalHazardsWarning(WorkbenchWarning):
    """Scaled Schoenfeld residuals suggest a time-varying effect."""


class PostOutcomeWarning(WorkbenchWarning):
    """A predictor looks like it was measured after the outcome."""


class VolumeDominanceWarning(WorkbenchWarning):
    """The imaging signature is mostly tumour volume in disguise."""


class LevelOrderWarning(WorkbenchWarning):
    """An ordered categorical effect (e.g. stage) is monotone in the clinical model but not after adding imaging."""


class FollowUpWarning(WorkbenchWarning):
    """A horizon or time grid sits near the end of follow-up."""


class DataQualityWarning(WorkbenchWarning):
    """Something in the input tables deserves a look but does not stop the run."""


class InputFormatWarning(DataQualityWarning):
    """A table was read in its one reasonable way (delimiter, decimal comma, sheet, spaces): said, not hidden."""


class UnitWarning(DataQualityWarning):
    """Follow-up times or measured values look as if they were in another unit than declared or trained on."""


class EmptySignatureWarning(WorkbenchWarning):
    """The imaging signature kept no feature: the combined model equals the clinical model."""


class FigureWarning(WorkbenchWarning):
    """A figure could not be drawn from this cohort (the reason is given); the other results stand."""
