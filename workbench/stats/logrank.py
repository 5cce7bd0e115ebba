"""Log-rank test and its weighted variants for k groups.

Vectorised over the unique event times: the numbers at risk and events of every
group at every time form an (n_times, k) table built with one sort.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import chi2

from workbench.errors import MetricError

__all__ = ["LogRankResult", "logrank_test"]

_WEIGHTINGS = (None, "wilcoxon", "tarone-ware", "peto")


@dataclass(frozen=True)
class LogRankResult:
    """Result of a (weighted) log-rank test.

    Attributes
    ----------
    statistic : float
        Chi-square statistic.
    df : int
        Degrees of freedom (number of groups - 1).
    p_value : float
    groups : ndarray of shape (k,)
        Group labels, sorted.
    observed : ndarray of shape (k,)
        Observed number of events per group.
    expected : ndarray of shape (k,)
        Expected number of events per group under equal hazards (unweighted,
        whatever the weighting, as conventionally reported).
    weighting : str or None
    """

    statistic: float
    df: int
    p_value: float
    groups: np.ndarray
    observed: np.ndarray
    expected: np.ndarray
    weighting: str | None = None


def logrank_test(time, event, group, *, weighting: str | None = None) -> LogRankResult:
    """Compare survival between k groups with the (weighted) log-rank test.

    Parameters
    ----------
    time : array-like of shape (n_samples,)
    event : array-like of shape (n_samples,)
        True (1) for an observed event.
    group : array-like of shape (n_samples,)
        Group label of each patient (any sortable labels; at least two groups).
    weighting : {None, 'wilcoxon', 'tarone-ware', 'peto'}
        Weight w(t) given to the observed-minus-expected difference at each
        event time: None gives 1 (log-rank); 'wilcoxon' the total number at
        risk n(t) (Gehan-Breslow generalised Wilcoxon); 'tarone-ware' sqrt(n(t));
        'peto' the pooled survival estimate prod_{s <= t} (1 - d(s) / (n(s) + 1))
        (Peto-Peto).

    Returns
    -------
    LogRankResult

    Notes
    -----
    With U_g = sum_t w(t) (d_g(t) - n_g(t) d(t) / n(t)) and the hypergeometric
    covariance V_gh = sum_t w(t)^2 d(t) (n(t) - d(t)) / (n(t) - 1)
    (n_g(t)/n(t)) (1[g = h] - n_h(t)/n(t)), the statistic is U' V^- U over the
    first k - 1 groups, chi-square on k - 1 degrees of freedom under the null.

    References
    ----------
    .. [1] Mantel N. Evaluation of survival data and two new rank order
       statistics arising in its consideration. Cancer Chemother Rep
       1966;50:163-170.
    .. [2] Gehan EA. A generalized Wilcoxon test for comparing arbitrarily
       singly-censored samples. Biometrika 1965;52:203-223; Breslow N.
       Biometrika 1970;57:579-594.
    .. [3] Tarone RE, Ware J. On distribution-free tests for equality of
       survival distributions. Biometrika 1977;64:156-160.
    .. [4] Peto R, Peto J. Asymptotically efficient rank invariant test
       procedures. J R Stat Soc A 1972;135:185-207.
    """
    if weighting not in _WEIGHTINGS:
        raise MetricError(
            f"unknown log-rank weighting {weighting!r}; choose one of "
            "None (log-rank), 'wilcoxon', 'tarone-ware' or 'peto'."
        )
    t = np.asarray(time, dtype=float).ravel()
    e = np.asarray(event).ravel()
    g = np.asarray(group).ravel()
    if not (t.size == e.size == g.size):
        raise MetricError(
            f"log-rank test got {t.size} times, {e.size} event flags and {g.size} group labels; "
            "give one of each per patient."
        )
    if not np.all(np.isfinite(t)) or np.any(t < 0):
        raise MetricError("log-rank follow-up times must be finite and non-negative.")
    if e.dtype != bool:
        if not np.all(np.isin(e, (0, 1))):
            raise MetricError("log-rank event flags must be 0/1 or True/False.")
        e = e.astype(bool)
    if g.dtype.kind == "f" and np.any(np.isnan(g)):
        raise MetricError("log-rank group labels contain missing values; drop or label those patients.")
    labels, gi = np.unique(g, return_inverse=True)
    k = labels.size
    if k < 2:
        raise MetricError(
            f"the log-rank test compares groups but only one group ({labels[0]!r}) was found."
        )

    times, ti = np.unique(t, return_inverse=True)
    m = times.size
    # (time, group) tables of events and of patients leaving, then at-risk by reverse cumsum.
    d_tab = np.zeros((m, k))
    n_tab = np.zeros((m, k))
    np.add.at(d_tab, (ti, gi), e.astype(float))
    np.add.at(n_tab, (ti, gi), 1.0)
    risk = np.cumsum(n_tab[::-1], axis=0)[::-1]
    keep = d_tab.sum(axis=1) > 0
    d_tab, risk = d_tab[keep], risk[keep]
    if d_tab.shape[0] == 0:
        raise MetricError("the log-rank test needs at least one event; all patients are censored.")
    d = d_tab.sum(axis=1)
    n = risk.sum(axis=1)

    if weighting is None:
        w = np.ones_like(n)
    elif weighting == "wilcoxon":
        w = n
    elif weighting == "tarone-ware":
        w = np.sqrt(n)
    else:
        w = np.cumprod(1.0 - d / (n + 1.0))

    frac = risk / n[:, None]
    exp_tab = frac * d[:, None]
    observed = d_tab.sum(axis=0)
    expected = exp_tab.sum(axis=0)
    u = (w[:, None] * (d_tab - exp_tab)).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(n > 1, w**2 * d * (n - d) / (n - 1.0), 0.0)
    # V = sum_t scale_t (diag(frac_t) - frac_t frac_t'), vectorised over t.
    v = np.diag((scale[:, None] * frac).sum(axis=0)) - np.einsum("t,tg,th->gh", scale, frac, frac)
    u1, v1 = u[:-1], v[:-1, :-1]
    stat = float(u1 @ np.linalg.pinv(v1) @ u1)
    df = k - 1
    return LogRankResult(
        statistic=stat,
        df=df,
        p_value=float(chi2.sf(stat, df)),
        groups=labels,
        observed=observed,
        expected=expected,
        weighting=weighting,
    )
