"""Risk groups: the one rule for learning cut-points and assigning patients.

Used by the Kaplan-Meier figure, the report, the bundle (and so ``apply``'s
external table) and the individual-patient estimate, so that a patient gets the
same group everywhere.

* Cut-points are learned on the TRAINING patients' risk scores only: the
  quantiles i/k (i = 1..k-1) for k groups (``np.quantile``, linear
  interpolation), or values given by the user.
* A patient exactly on a cut-point joins the LOWER group: group j holds the
  scores in (c_{j-1}, c_j] (``np.searchsorted(cuts, r, side="left")``).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from workbench.errors import SpecError

__all__ = ["GROUP_NAMES", "METHODS", "assign_groups", "group_labels", "learn_cutpoints"]

METHODS = {"median": 2, "tertiles": 3, "quartiles": 4}
GROUP_NAMES = {
    2: ("low", "high"),
    3: ("low", "intermediate", "high"),
    4: ("low", "low-intermediate", "high-intermediate", "high"),
}


def group_labels(k: int) -> tuple[str, ...]:
    """Names of k groups, lowest risk first."""
    return GROUP_NAMES.get(int(k), tuple(f"group {i + 1}" for i in range(int(k))))


def learn_cutpoints(train_risk, method: str | int | Sequence[float] = "tertiles") -> np.ndarray:
    """Cut-points from training risk scores.

    Parameters
    ----------
    train_risk : array-like or RiskScores
        Training patients' scores (higher = worse).
    method : {"median", "tertiles", "quartiles"}, int >= 2, or increasing sequence of float
        Named quantile groups, a number of equal-sized groups, or the cut-points themselves.
    """
    train = np.asarray(getattr(train_risk, "values", train_risk), dtype=float).ravel()
    if train.size == 0 or not np.all(np.isfinite(train)):
        raise SpecError("risk groups: training risk scores must be a non-empty list of finite numbers.")
    if isinstance(method, str):
        if method not in METHODS:
            raise SpecError(
                f"risk groups: method {method!r} is not known; choose 'median', 'tertiles', 'quartiles', a "
                "number of groups, or give the cut-points as a list of risk-score values. (A search for the "
                "cut-point with the smallest p-value is not offered: it exaggerates the separation.)"
            )
        method = METHODS[method]
    if isinstance(method, (int, np.integer)) and not isinstance(method, bool):
        k = int(method)
        if k < 2:
            raise SpecError(f"risk groups: at least 2 groups are needed; got {k}.")
        cuts = np.quantile(train, np.arange(1, k) / k)
        if np.any(np.diff(cuts) <= 0):
            raise SpecError(
                f"risk groups: the training risk scores have too many ties for {k} groups "
                f"(cut-points {np.round(cuts, 4).tolist()}); use fewer groups or give cut-points."
            )
        return cuts
    cuts = np.asarray(method, dtype=float).ravel()
    if cuts.size == 0 or not np.all(np.isfinite(cuts)) or np.any(np.diff(cuts) <= 0):
        raise SpecError(
            f"risk groups: given cut-points must be increasing finite numbers, for example [-0.5, 0.5]; got {list(cuts)}."
        )
    return cuts


def assign_groups(risk, cutpoints) -> np.ndarray:
    """Group index (0 = lowest risk) of each score; a score exactly on a cut-point joins the lower group."""
    r = np.asarray(getattr(risk, "values", risk), dtype=float)
    return np.searchsorted(np.asarray(cutpoints, dtype=float), r, side="left")
