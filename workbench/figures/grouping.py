"""Risk groups from cut-points fixed on training rows (pure arithmetic, no plotting).

Cut-points are always learned from the training patients' risk scores and then
applied unchanged to the evaluation patients. There is deliberately no
"optimal" cut-point search: choosing the cut-point with the smallest log-rank
p-value inflates the apparent separation and its type I error (Altman et al.
1994), so only pre-specified quantiles or user-given values are offered.

References
----------
.. [1] Altman DG, Lausen B, Sauerbrei W, Schumacher M. Dangers of using
   "optimal" cutpoints in the evaluation of prognostic factors. J Natl Cancer
   Inst 1994;86:829-35.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from workbench.errors import SpecError

METHODS = {
    "median": (0.5,),
    "tertiles": (1 / 3, 2 / 3),
    "quartiles": (0.25, 0.5, 0.75),
}
GROUP_NAMES = {
    2: ("low", "high"),
    3: ("low", "intermediate", "high"),
    4: ("low", "low-intermediate", "high-intermediate", "high"),
}


@dataclass(frozen=True)
class RiskGroups:
    """Evaluation patients sorted into risk groups by training cut-points.

    Attributes
    ----------
    cutpoints : ndarray of shape (k - 1,)
        Risk-score boundaries learned on the training rows; a patient exactly on
        a boundary joins the higher group.
    labels : tuple of str
        Group names, lowest risk first.
    groups : ndarray of int, shape (n_eval,)
        Group index (0 = lowest risk) of each evaluation patient.
    train_groups : ndarray of int, shape (n_train,)
        The same for the training patients.
    method : str
        ``"median"``, ``"tertiles"``, ``"quartiles"`` or ``"given"``.
    """

    cutpoints: np.ndarray
    labels: tuple[str, ...]
    groups: np.ndarray
    train_groups: np.ndarray
    method: str

    @property
    def n_groups(self) -> int:
        return len(self.labels)


def _scores(x: ArrayLike, what: str) -> np.ndarray:
    a = np.asarray(getattr(x, "values", x), dtype=float).ravel()
    if a.size == 0 or not np.all(np.isfinite(a)):
        raise SpecError(f"{what}: risk scores must be a non-empty list of finite numbers.")
    return a


def risk_cutpoints(train_risk: ArrayLike, method: str | Sequence[float] = "median") -> np.ndarray:
    """Cut-points from the training risk scores: quantiles, or the values given.

    Parameters
    ----------
    train_risk : array-like or RiskScores
        Risk scores of the training patients (higher = worse).
    method : {"median", "tertiles", "quartiles"} or sequence of float
        Training quantiles to cut at, or increasing cut-points on the risk-score scale.
    """
    train = _scores(train_risk, "risk_cutpoints")
    if isinstance(method, str):
        if method not in METHODS:
            raise SpecError(
                f"risk groups: method {method!r} is not known; choose 'median', 'tertiles', 'quartiles' "
                "or give the cut-points as a list of risk-score values. (A search for the cut-point with "
                "the smallest p-value is not offered: it exaggerates the separation.)"
            )
        cuts = np.quantile(train, METHODS[method])
        if np.any(np.diff(cuts) <= 0):
            raise SpecError(
                f"risk groups: the training risk scores have too many ties for {method} "
                f"(cut-points {np.round(cuts, 4).tolist()}); use fewer groups or give cut-points."
            )
        return cuts
    cuts = np.asarray(method, dtype=float).ravel()
    if cuts.size == 0 or not np.all(np.isfinite(cuts)) or np.any(np.diff(cuts) <= 0):
        raise SpecError(
            f"risk groups: given cut-points must be increasing finite numbers, for example [-0.5, 0.5]; got {list(cuts)}."
        )
    return cuts


def risk_groups(
    train_risk: ArrayLike, eval_risk: ArrayLike, method: str | Sequence[float] = "median"
) -> RiskGroups:
    """Cut the evaluation patients into risk groups at cut-points fixed on the training patients.

    Parameters
    ----------
    train_risk : array-like or RiskScores
        Training patients' risk scores; only these set the cut-points.
    eval_risk : array-like or RiskScores
        Evaluation patients' risk scores (may be the same patients for an
        apparent analysis).
    method : {"median", "tertiles", "quartiles"} or sequence of float
        See :func:`risk_cutpoints`.

    Returns
    -------
    RiskGroups
    """
    cuts = risk_cutpoints(train_risk, method)
    train = _scores(train_risk, "risk_groups")
    ev = _scores(eval_risk, "risk_groups")
    k = cuts.size + 1
    labels = GROUP_NAMES.get(k, tuple(f"group {i + 1}" for i in range(k)))
    return RiskGroups(
        cutpoints=cuts,
        labels=labels,
        groups=np.searchsorted(cuts, ev, side="right"),
        train_groups=np.searchsorted(cuts, train, side="right"),
        method=method if isinstance(method, str) else "given",
    )
