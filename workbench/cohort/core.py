"""The :class:`Cohort`: one validated, joined table of patients.

A cohort holds, row-aligned by position:

* ``ids`` -- patient identifiers (strings). After bootstrap resampling the same id
  can appear more than once; inner cross-validation groups rows by this id.
* ``y`` -- the outcome as a structured array (see :mod:`workbench.cohort.outcome`).
* ``clinical`` -- the clinical fields as read (raw values such as ``"<0.5"`` kept
  as text; preprocessing turns them into model terms).
* ``features`` -- numeric imaging features (float columns).
* ``centre`` and ``batch`` -- optional grouping labels (hospital, scanner).
* ``cause`` -- optional, for a study with competing events: 0 censored, 1 the cause
  of interest, 2 a competing event. ``y`` then holds the cause of interest with
  competing events censored (the ordinary, cause-specific view).

It never changes after construction; :meth:`take` returns a new cohort.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from workbench.cohort.outcome import check_outcome, make_competing_outcome

TIME_UNITS = {"days": 365.25, "weeks": 365.25 / 7.0, "months": 12.0, "years": 1.0}
"""Time units accepted for follow-up, with the number of units in one year."""


@dataclass(frozen=True)
class CohortSource:
    """Where a cohort came from: files, column mapping and content hashes."""

    feature_file: str = ""
    clinical_file: str = ""
    id_column: str = ""
    time_column: str = ""
    event_column: str = ""
    time_unit: str = "months"
    centre_column: str | None = None
    batch_column: str | None = None
    data_hash: str = ""
    dropped_ids: tuple[str, ...] = ()
    # of dropped_ids: those with a clinical row but no imaging row, and the reverse
    only_in_clinical: tuple[str, ...] = ()
    only_in_features: tuple[str, ...] = ()


@dataclass(frozen=True)
class Cohort:
    ids: np.ndarray
    y: np.ndarray
    clinical: pd.DataFrame
    features: pd.DataFrame
    time_unit: str = "months"
    centre: np.ndarray | None = None
    batch: np.ndarray | None = None
    source: CohortSource = field(default_factory=CohortSource)
    cause: np.ndarray | None = None

    def __post_init__(self):
        check_outcome(self.y, "Cohort.y")
        n = self.y.shape[0]
        ids = np.asarray(self.ids).astype(str)
        object.__setattr__(self, "ids", ids)
        for name, obj in (("ids", ids), ("clinical", self.clinical), ("features", self.features)):
            if len(obj) != n:
                raise ValueError(f"Cohort.{name} has {len(obj)} rows but the outcome has {n}.")
        for name in ("centre", "batch"):
            v = getattr(self, name)
            if v is not None:
                v = np.asarray(v).astype(str)
                if v.shape[0] != n:
                    raise ValueError(f"Cohort.{name} has {v.shape[0]} rows but the outcome has {n}.")
                object.__setattr__(self, name, v)
        if self.cause is not None:
            c = np.asarray(self.cause, dtype=np.int64).ravel()
            if c.shape[0] != n or np.any((c < 0) | (c > 2)):
                raise ValueError(f"Cohort.cause needs {n} codes among 0, 1, 2.")
            if not np.array_equal(c == 1, self.y["event"]):
                raise ValueError("Cohort.y must flag exactly the patients whose cause is 1 (the cause of interest).")
            object.__setattr__(self, "cause", c)
        if self.time_unit not in TIME_UNITS:
            raise ValueError(f"time unit {self.time_unit!r} is not one of {sorted(TIME_UNITS)}.")

    # ------------------------------------------------------------------ basics
    @property
    def n(self) -> int:
        return int(self.y.shape[0])

    @property
    def n_events(self) -> int:
        return int(self.y["event"].sum())

    @property
    def time(self) -> np.ndarray:
        return self.y["time"].astype(float)

    @property
    def event(self) -> np.ndarray:
        return self.y["event"].astype(bool)

    @property
    def competing_outcome(self) -> np.ndarray | None:
        """The competing-risks outcome (fields ``cause``, ``time``), or None without competing events."""
        if self.cause is None:
            return None
        return make_competing_outcome(self.time, self.cause)

    @property
    def feature_names(self) -> list[str]:
        return list(self.features.columns)

    def __len__(self) -> int:
        return self.n

    def take(self, idx) -> Cohort:
        """Rows at the given positions (duplicates allowed, as in a bootstrap sample)."""
        idx = np.asarray(idx, dtype=int)
        return Cohort(
            ids=self.ids[idx],
            y=self.y[idx],
            clinical=self.clinical.iloc[idx].reset_index(drop=True),
            features=self.features.iloc[idx].reset_index(drop=True),
            time_unit=self.time_unit,
            centre=None if self.centre is None else self.centre[idx],
            batch=None if self.batch is None else self.batch[idx],
            source=self.source,
            cause=None if self.cause is None else self.cause[idx],
        )

    def mask(self, keep) -> Cohort:
        """Rows where the boolean mask ``keep`` is true."""
        return self.take(np.flatnonzero(np.asarray(keep, dtype=bool)))
