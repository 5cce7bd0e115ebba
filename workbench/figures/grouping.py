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
from workbench.stats.riskgroups import GROUP_NAMES, assign_groups, group_labels, learn_cutpoints  # noqa: F401 (re-exported)

METHODS = {"median": (0.5,), "tertiles": (1 / 3, 2 / 3), "quartiles": (0.25, 0.5, 0.75)}
"""Named quantile groups (any number of groups: pass an int to :func:`risk_cutpoints`)."""

@dataclass(frozen=True)
class RiskGroups:
    """Evaluation patients sorted into risk groups by training cut-points.

    Attributes
    ----------
    cutpoints : ndarray of shape (k - 1,)
        Risk-score boundaries learned on the training rows; a patient exactly on
        a boundary joins the lower group (:mod:`workbench.stats.riskgroups`, the
        rule the bundle, ``apply`` and the patient estimate use too).
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


def risk_cutpoints(train_risk: ArrayLike, method: str | int | Sequence[float] = "median") -> np.ndarray:
    """Cut-points from the training risk scores: quantiles, k equal groups, or the values given.

    See :func:`workbench.stats.riskgroups.learn_cutpoints` (the one rule).
    """
    _scores(train_risk, "risk_cutpoints")
    return learn_cutpoints(train_risk, method)


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
    method : {"median", "tertiles", "quartiles"}, int or sequence of float
        See :func:`risk_cutpoints`.

    Returns
    -------
    RiskGroups
    """
    cuts = risk_cutpoints(train_risk, method)
    train = _scores(train_risk, "risk_groups")
    ev = _scores(eval_risk, "risk_groups")
    return RiskGroups(
        cutpoints=cuts,
        labels=group_labels(cuts.size + 1),
        groups=assign_groups(ev, cuts),
        train_groups=assign_groups(train, cuts),
        method=method if isinstance(method, str) else (f"{method} groups" if isinstance(method, int) else "given"),
    )
