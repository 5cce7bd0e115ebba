"""Result types of the validation engine: per-replicate metrics, estimates, summaries."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

__all__ = [
    "FitSummary",
    "MetricEstimate",
    "ReplicateFailure",
    "ReplicateMetrics",
    "SelectionSummary",
    "ValidationResult",
]


@dataclass(frozen=True)
class ReplicateFailure:
    """A model that could not be fitted or evaluated in one replicate (fold: cv only)."""

    model: str
    replicate: int
    fold: int
    stage: str
    message: str


@dataclass(frozen=True)
class ReplicateMetrics:
    """Every per-replicate value of one model (or one model pair).

    Attributes
    ----------
    names : tuple of str
        Metric names (columns).
    train : ndarray of shape (n_rows, n_metrics) or None
        Bootstrap: performance on the bootstrap sample itself (B); external:
        performance on resampled external rows; else None.
    test : ndarray of shape (n_rows, n_metrics) or None
        Bootstrap: on the original rows (O); cv: on the held-out fold;
        by_centre: on the held-out centre; external: None.
    nb_train, nb_test : ndarray of shape (n_rows, n_horizons, n_thresholds) or None
        Decision-curve net benefit, same arms (models only).
    replicate : ndarray of int
        Bootstrap replicate, cv repeat, or centre number per row.
    fold : ndarray of int or None
        Fold within the repeat (cv only).
    ok : ndarray of bool
        False where the model could not be fitted or evaluated (row all NaN).
    events : ndarray of int
        Events among the evaluation rows of ``test`` (``train`` for external).
    oob, nb_oob : ndarray or None
        Bootstrap only: on the out-of-bootstrap rows (patients not drawn into the
        sample, grouped by patient id); NaN where those rows could not be evaluated.
    """

    names: tuple[str, ...]
    train: np.ndarray | None
    test: np.ndarray | None
    nb_train: np.ndarray | None
    nb_test: np.ndarray | None
    replicate: np.ndarray
    fold: np.ndarray | None
    ok: np.ndarray
    events: np.ndarray
    oob: np.ndarray | None = None
    nb_oob: np.ndarray | None = None

    def column(self, name: str, arm: str = "test") -> np.ndarray:
        """Values of one metric across rows of one arm (``"train"`` or ``"test"``)."""
        return getattr(self, arm)[:, self.names.index(name)]


@dataclass(frozen=True)
class MetricEstimate:
    """One validated metric.

    Attributes
    ----------
    name : str
    apparent : float
        Fit and evaluate on all rows.
    optimism : float
        Bootstrap mean of (B - O); NaN for other methods.
    estimate : float
        Bootstrap: apparent - optimism; cv: mean of repeat means; by_centre:
        event-weighted mean over centres; external: value on the external cohort.
    sd : float
        Bootstrap/external: SD of B; cv: SD of the repeat means; by_centre:
        event-weighted SD across centres.
    ci_lower, ci_upper : float
        Bootstrap: percentile interval of B re-centred on the estimate (NaN where B
        has no spread); external: normal interval over the resamples; cv: corrected resampled t
        interval of the held-out fold values; NaN for by_centre.
    n_used : int
        Replicates (folds, centres) that contributed.
    estimator : str
        Which estimator gave ``estimate``: "optimism", "oob", "632plus" (bootstrap),
        "cv", "by_centre" or "external".
    interval : str
        How the interval was formed: "two-stage" (interval from the same estimator
        over outer bootstrap samples, :func:`~.intervals.two_stage_interval`), "shifted-percentile"
        (the cheap location-shifted interval, optimism only), "corrected-t" (cv: corrected
        resampled t interval of the held-out fold values, :func:`~.intervals.cv_interval`), "normal"
        (external: :func:`~.intervals.resample_interval`), or "" where there is none.
    note : str
        Why an interval is missing, if it is.
    """

    name: str
    apparent: float
    optimism: float
    estimate: float
    sd: float
    ci_lower: float
    ci_upper: float
    n_used: int
    estimator: str = ""
    interval: str = ""
    note: str = ""


UNSTABLE_BELOW = 0.5
"""A final-signature feature kept by fewer than this share of the refits is flagged as unstable."""


@dataclass(frozen=True)
class SelectionSummary:
    """How often each imaging feature was kept by a model's refits.

    Attributes
    ----------
    model : str
    n_fits : int
        Successful replicate fits that reported ``selected_features_``.
    frequency : dict of str to float
        Share of those fits that kept each feature, highest first.
    n_selected : ndarray of int
        Number of features kept in each of those fits.
    apparent : tuple of str
        Features kept by the fit on all rows.
    """

    model: str
    n_fits: int
    frequency: dict
    n_selected: np.ndarray
    apparent: tuple[str, ...] = ()

    @property
    def unstable(self) -> tuple[str, ...]:
        """Features of the fit on all rows that fewer than half of the refits kept (UNSTABLE_BELOW)."""
        if not self.n_fits:
            return ()
        return tuple(f for f in self.apparent if self.frequency.get(f, 0.0) < UNSTABLE_BELOW)

    def to_frame(self) -> pd.DataFrame:
        """One row per feature: share of refits that kept it, and whether the apparent fit did."""
        return pd.DataFrame(
            {
                "feature": list(self.frequency),
                "frequency": list(self.frequency.values()),
                "in_apparent_fit": [f in self.apparent for f in self.frequency],
            }
        )


@dataclass(frozen=True)
class FitSummary:
    """What the engine keeps of an apparent fit (no training data).

    ``loglik`` and ``n_params`` come from the model's ``loglik_`` and
    ``n_params_`` (Cox models), ``terms`` from ``describe()``.
    """

    model: str
    loglik: float | None
    n_params: int | None
    terms: tuple[str, ...] | None
    selected: tuple[str, ...] | None


@dataclass(frozen=True)
class ValidationResult:
    """Everything a validation run measured.

    Attributes
    ----------
    method : {"bootstrap", "cv", "by_centre", "external"}
    models : tuple of str
    horizons : ndarray
    time_unit : str
    n, n_events : int
        Size of the cohort the apparent fits were evaluated on.
    metric_names, pair_metric_names : tuple of str
    apparent : dict of str to ModelPerformance
    apparent_pairs : dict of (model, baseline) to PairPerformance
        For every pair of models, later model in ``models`` against earlier.
    fits : dict of str to FitSummary
    estimates : dict of str to dict of str to MetricEstimate
    pair_estimates : dict of (model, baseline) to dict of str to MetricEstimate
    replicates : dict of str to ReplicateMetrics
    pair_replicates : dict of (model, baseline) to ReplicateMetrics
    n_replicates : dict of str to int
        Replicates (repeats for cv, centres) each model was asked to run.
    failures : dict of str to int
    failure_log : tuple of ReplicateFailure
    dropped_metrics : dict of str to dict of str to int
        Per model, per metric: successful replicates where the metric was
        undefined (e.g. horizon outside the follow-up of a fold).
    selection : dict of str to SelectionSummary
    warning_counts : dict of str to dict of str to int
        Per model, warning categories raised in its replicate fits and evaluations.
    centres : tuple of str
        Held-out centres, in row order of ``replicates`` (by_centre only).
    conf_level : float
    seed_entropy : int
        Entropy of the root SeedSequence; pass it as ``random_state`` to repeat the run.
    settings : dict
        Method settings (replicates, folds, repeats, backend, workers).
    notes : tuple of str
    censoring : CensoringChoice or None
        Censoring model of the IPCW weights and why (external, by_centre).
    groups : dict of str to GroupBlock
        Per-centre / per-scanner performance with random-effects pooling
        (external; by_centre as "centre"); see :mod:`workbench.validation.groups`.
    estimator : dict of str to str
        Bootstrap: the estimator used for each model ("optimism", "oob", "632plus");
        the metric-level label is in each MetricEstimate.
    interval : str
        "two-stage" or "shifted-percentile" (see :mod:`.two_stage`); cross-validation:
        "corrected-t" (:func:`~.intervals.cv_interval`, no outer samples) unless run with
        ``cv_interval="two-stage"``.
    outer_estimates : dict of str to ndarray of shape (n_outer, n_metrics)
        Two-stage intervals: each model's estimate in each outer bootstrap sample
        (NaN where the model failed there); model differences use the same samples.
    outer_net_benefit : dict of str to ndarray of shape (n_outer, n_horizons, n_thresholds)
        Two-stage intervals: each model's validated decision curves in each outer sample
        (the bands of :mod:`.difference_bands`).
    """

    method: str
    models: tuple[str, ...]
    horizons: np.ndarray
    time_unit: str
    n: int
    n_events: int
    metric_names: tuple[str, ...]
    pair_metric_names: tuple[str, ...]
    apparent: dict
    apparent_pairs: dict
    fits: dict
    estimates: dict
    pair_estimates: dict
    replicates: dict
    pair_replicates: dict
    n_replicates: dict
    failures: dict
    failure_log: tuple
    dropped_metrics: dict
    selection: dict
    warning_counts: dict
    centres: tuple[str, ...] = ()
    conf_level: float = 0.95
    seed_entropy: int = 0
    settings: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    censoring: object = None
    groups: dict = field(default_factory=dict)
    estimator: dict = field(default_factory=dict)
    interval: str = ""
    outer_estimates: dict = field(default_factory=dict)
    outer_net_benefit: dict = field(default_factory=dict)

    def summary_frame(self) -> pd.DataFrame:
        """One row per model and metric with apparent, optimism, estimate, SD and interval."""
        rows = [
            {"model": m, **vars(e)} for m in self.models for e in self.estimates[m].values()
        ]
        return pd.DataFrame(rows).rename(columns={"name": "metric"})
