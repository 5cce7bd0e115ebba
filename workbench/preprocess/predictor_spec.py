"""How one clinical column enters a model: :class:`PredictorSpec` and its allowed values.

Kept apart from :mod:`workbench.preprocess.clinical` (which learns and applies the terms)
so that reading a study file needs neither scikit-learn nor scipy.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.errors import SpecError
from workbench.preprocess.splines import MAX_KNOTS, MIN_KNOTS
from workbench.preprocess.values import canonical_level

KINDS = ("linear", "spline", "categorical", "ordinal")
TRANSFORMS = (None, "log", "log2")
MISSING_POLICIES = ("complete_case", "impute")
UNSEEN_POLICIES = ("error", "missing")
DEFAULT_KNOTS = 4  # common practice: a good compromise between flexibility and loss of precision


# ------------------------------------------------------------------ specification


@dataclass(frozen=True)
class PredictorSpec:
    """How one clinical column enters the model.

    Parameters
    ----------
    column : str
        Column name in the clinical table.
    kind : {"linear", "spline", "categorical", "ordinal"}
        ``linear``: one column, the (transformed) value. ``spline``: restricted
        cubic spline with ``knots`` knots (``knots - 1`` columns). ``categorical``:
        one indicator column per level other than the reference. ``ordinal``:
        one column of category scores (0 for the reference, +-1 per step in the
        declared order), i.e. a linear trend across ordered categories.
    transform : {None, "log", "log2"}
        Applied before the linear or spline term (continuous kinds only).
        With ``"log2"`` the hazard ratio of a linear term is per doubling.
    knots : int, optional
        Number of spline knots, 3 to 7; spline only; default 4. Knots sit at
        Harrell's default percentiles of the training values.
    reference : str, optional
        Reference level (categorical / ordinal). Default: the first level in
        the declared order, or else in natural order (numbers, then text).
    levels : tuple of str, optional
        Ordered levels. Required for ``ordinal`` (this is the order of the
        scores); optional for ``categorical``, where it lists the permitted
        levels and their display order. Numbers are compared as text, with
        whole numbers written without decimals (``2`` and ``"2"`` match).
    detection_limit : {None, "auto"} or float
        Continuous kinds only. ``None``: a value such as ``"<0.5"`` is an error.
        ``"auto"``: the limit is read from the ``"<x"`` cells of the training
        rows (the largest, if several). A number: the limit itself. Cells below
        the limit (written ``"<x"``, or a number under the limit) get an
        indicator column and the continuous term evaluated at the limit.
    missing : {"complete_case", "impute"}
        ``complete_case``: rows with this value missing are dropped (the design
        matrix reports which). ``impute``: the training median (continuous) or
        most frequent level (categorical, ordinal) is filled in.
    unseen : {"error", "missing"}
        Categorical / ordinal only: a level not seen among the training rows
        either raises an error naming the column, value and rows, or is treated
        as a missing value (then handled by ``missing``).
    label : str
        Human-readable name for tables and figures; defaults to ``column``.
    unit : str
        Unit of measurement (for example ``"mg/L"``), shown in tables.
    """

    column: str
    kind: str = "linear"
    transform: str | None = None
    knots: int | None = None
    reference: str | None = None
    levels: tuple[str, ...] | None = None
    detection_limit: str | float | None = None
    missing: str = "complete_case"
    unseen: str = "error"
    label: str = ""
    unit: str = ""

    def __post_init__(self):
        col = self.column
        if not isinstance(col, str) or not col.strip():
            raise SpecError(f"a predictor needs a column name (text); got {col!r}.")
        where = f"predictor {col!r}"
        if self.kind not in KINDS:
            raise SpecError(f"{where}: kind {self.kind!r} is not known; choose one of {', '.join(KINDS)}.")
        continuous = self.kind in ("linear", "spline")
        if self.transform not in TRANSFORMS:
            raise SpecError(
                f"{where}: transform {self.transform!r} is not known; choose none, 'log' or 'log2'."
            )
        if self.transform is not None and not continuous:
            raise SpecError(f"{where}: a {self.transform} transform needs a linear or spline term, not {self.kind}.")
        if self.kind == "spline":
            k = DEFAULT_KNOTS if self.knots is None else self.knots
            if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not MIN_KNOTS <= k <= MAX_KNOTS:
                raise SpecError(
                    f"{where}: a spline needs {MIN_KNOTS} to {MAX_KNOTS} knots (whole number); got {k!r}."
                )
            object.__setattr__(self, "knots", int(k))
        elif self.knots is not None:
            raise SpecError(f"{where}: knots apply to spline terms only; remove knots or use kind 'spline'.")
        if self.missing not in MISSING_POLICIES:
            raise SpecError(f"{where}: missing {self.missing!r} is not known; choose 'complete_case' or 'impute'.")
        if self.unseen not in UNSEEN_POLICIES:
            raise SpecError(f"{where}: unseen {self.unseen!r} is not known; choose 'error' or 'missing'.")
        self._check_levels(where, continuous)
        self._check_limit(where, continuous)
        if not isinstance(self.label, str) or not isinstance(self.unit, str):
            raise SpecError(f"{where}: label and unit must be text.")
        if not self.label:
            object.__setattr__(self, "label", col)

    def _check_levels(self, where: str, continuous: bool) -> None:
        if continuous:
            if self.levels is not None or self.reference is not None:
                raise SpecError(f"{where}: levels and reference apply to categorical or ordinal terms only.")
            return
        levels = self.levels
        if levels is not None:
            if isinstance(levels, str) or not hasattr(levels, "__iter__"):
                raise SpecError(f"{where}: levels must be a list of level names, got {levels!r}.")
            levels = tuple(canonical_level(v) for v in levels)
            if len(set(levels)) != len(levels) or len(levels) < 2:
                raise SpecError(f"{where}: levels must be at least two distinct names; got {list(levels)}.")
            object.__setattr__(self, "levels", levels)
        elif self.kind == "ordinal":
            raise SpecError(
                f"{where}: an ordinal term needs its levels in order, for example levels = ['I', 'II', 'III']."
            )
        if self.reference is not None:
            ref = canonical_level(self.reference)
            if levels is not None and ref not in levels:
                raise SpecError(f"{where}: reference {ref!r} is not among the levels {list(levels)}.")
            object.__setattr__(self, "reference", ref)

    def _check_limit(self, where: str, continuous: bool) -> None:
        lim = self.detection_limit
        if lim is None:
            return
        if not continuous:
            raise SpecError(f"{where}: a detection limit applies to linear or spline terms only.")
        if isinstance(lim, str):
            if lim != "auto":
                raise SpecError(f"{where}: detection_limit must be 'auto', a number or absent; got {lim!r}.")
            return
        if isinstance(lim, bool) or not isinstance(lim, (int, float, np.number)) or not np.isfinite(lim):
            raise SpecError(f"{where}: detection_limit must be 'auto', a number or absent; got {lim!r}.")
        if self.transform is not None and lim <= 0:
            raise SpecError(f"{where}: a {self.transform} transform needs a positive detection limit; got {lim}.")
        object.__setattr__(self, "detection_limit", float(lim))
