"""Concordance indices: Harrell's C and Uno's IPCW-weighted C.

Pair counts are obtained in O(n log n) vectorised numpy, never by looping
over patient pairs: comparable pairs are "dominance" pairs in (time, score)
and are counted bit by bit of the score rank (a vectorised form of a binary
indexed tree), so 50,000 patients take a fraction of a second.

Comparable pairs follow the usual convention (and scikit-survival's): patient i
with an event and patient j with a longer time, or j censored at the same time
as i's event (the censored patient is known to have outlived i). Two events at
the same time are not comparable. Scores tied within ``tied_tol`` count 1/2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from workbench.cohort.outcome import split_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import fit_censoring
from workbench.predictions import RiskScores

__all__ = ["ConcordanceResult", "harrell_c", "uno_c"]


@dataclass(frozen=True)
class ConcordanceResult:
    """A concordance index with its pair counts.

    Attributes
    ----------
    c_index : float
    std_err : float
        Asymptotic standard error (Harrell's C); NaN where none is computed
        (Uno's C: use resampling).
    ci_lower, ci_upper : float
        Wald interval c_index +- z std_err, clipped to [0, 1]; NaN without SE.
    concordant, discordant, tied_risk : int
        Numbers of comparable pairs in which the patient with the event had the
        higher, the lower, or a tied risk score.
    tied_time : int
        Comparable pairs formed by an event and a censoring at the same time.
    comparable : int
        Number of comparable pairs (concordant + discordant + tied_risk).
    method : str
        ``"harrell"`` or ``"uno"``.
    tau : float or None
        Truncation time (Uno): only events before tau form pairs.
    conf_level : float
    """

    c_index: float
    std_err: float
    ci_lower: float
    ci_upper: float
    concordant: int
    discordant: int
    tied_risk: int
    tied_time: int
    comparable: int
    method: str
    tau: float | None = None
    conf_level: float = 0.95


# ------------------------------------------------------------ pair counting


def _check_risk(risk, n: int, where: str) -> np.ndarray:
    if not isinstance(risk, RiskScores):
        kind = type(risk).__name__
        hint = (
            " Survival probabilities run the opposite way (higher = better); convert them, "
            "e.g. RiskScores(1 - curves.at(t)), or pass the model's risk score."
            if kind == "SurvivalCurves"
            else ""
        )
        raise MetricError(
            f"{where} needs the prediction as RiskScores (higher = worse prognosis), got {kind}. "
            f"Wrap a risk score as workbench.predictions.RiskScores(values).{hint}"
        )
    if len(risk) != n:
        raise MetricError(
            f"{where}: {len(risk)} risk scores for {n} patients in the outcome; "
            "they must be the same patients in the same order."
        )
    return risk.values


def _risk_ranks(values: np.ndarray, tied_tol: float) -> np.ndarray:
    """Dense integer ranks; consecutive sorted scores within tied_tol share a rank."""
    order = np.argsort(values, kind="stable")
    sv = values[order]
    step = np.r_[0, (np.diff(sv) > tied_tol).astype(np.int64)]
    ranks = np.empty(values.size, dtype=np.int64)
    ranks[order] = np.cumsum(step)
    return ranks


def _time_keys(time: np.ndarray, event: np.ndarray) -> np.ndarray:
    """Integer keys such that (event i, j) is comparable iff key[j] > key[i]."""
    _, tr = np.unique(time, return_inverse=True)
    return 2 * tr.astype(np.int64) + (~event).astype(np.int64)


def _sum_greater_key(key: np.ndarray, w: np.ndarray) -> np.ndarray:
    """For each p: sum of w[q] over q with key[q] > key[p]."""
    o = np.argsort(key, kind="stable")
    ks = key[o]
    cw = np.r_[0.0, np.cumsum(w[o])]
    return cw[-1] - cw[np.searchsorted(ks, key, side="right")]


def _sum_greater_key_equal_rank(key: np.ndarray, rank: np.ndarray, w: np.ndarray) -> np.ndarray:
    """For each p: sum of w[q] over q with key[q] > key[p] and rank[q] == rank[p]."""
    m = int(key.max()) + 1
    comb = rank * m + key
    o = np.argsort(comb, kind="stable")
    cs = comb[o]
    cw = np.r_[0.0, np.cumsum(w[o])]
    hi = np.searchsorted(cs, rank * m + (m - 1), side="right")
    lo = np.searchsorted(cs, comb, side="right")
    return cw[hi] - cw[lo]


def _dominance_sums(
    key: np.ndarray, rank: np.ndarray, w_after: np.ndarray, w_before: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Weighted dominance counts in (key, rank), both directions in one pass.

    Returns ``(a, b)`` with, for each p,
    a[p] = sum of w_after[q] over q with key[q] > key[p] and rank[q] < rank[p],
    b[p] = sum of w_before[q] over q with key[q] < key[p] and rank[q] > rank[p].

    Patients are laid out by (key, rank); then "later in the layout with a
    smaller rank" is exactly the first condition and "earlier with a larger
    rank" the second. A pair with different ranks is counted once, at the
    highest bit where the ranks differ: there both share the higher bits (same
    group) and one has a 0, the other a 1. Groups are refined from the top bit
    down by a stable partition, O(n) per bit, so the count is O(n log n) after
    the initial sort (a vectorised form of a binary indexed tree).
    """
    order = np.lexsort((rank, key))
    n = rank.size
    # Arrays kept in the current group layout (grouped by rank prefix, layout
    # position ascending within a group) and permuted together.
    bo = rank[order].astype(np.int64)
    wa = w_after[order].astype(float)
    wb = w_before[order].astype(float)
    po = np.arange(n)
    acc_a = np.zeros(n)
    acc_b = np.zeros(n)
    top = int(bo.max()) if n else 0
    idx = np.arange(n)
    for level in reversed(range(max(1, top.bit_length()))):
        pf = bo >> (level + 1)
        is_one = ((bo >> level) & 1).astype(bool)
        sizes = np.bincount(pf)
        ends = np.cumsum(sizes)
        gs = (ends - sizes)[pf]
        ge = ends[pf] - 1
        cz = np.cumsum(np.where(is_one, 0.0, wa))
        co = np.cumsum(np.where(is_one, wb, 0.0))
        acc_a += np.where(is_one, cz[ge] - cz, 0.0)
        # ones strictly before p within its group
        co_before_group = co[gs] - np.where(is_one[gs], wb[gs], 0.0)
        acc_b += np.where(is_one, 0.0, co - co_before_group)
        # Stable partition of each group: zeros first, then ones.
        zero_cnt = np.cumsum(~is_one)
        z_before_group = zero_cnt[gs] - ~is_one[gs]
        zeros_in_group = zero_cnt[ge] - z_before_group
        zeros_before = zero_cnt - ~is_one - z_before_group
        newpos = gs + np.where(is_one, zeros_in_group + (idx - gs) - zeros_before, zeros_before)
        for arr in (bo, wa, wb, po, acc_a, acc_b):
            arr[newpos] = arr.copy()
    res_a = np.empty(n)
    res_b = np.empty(n)
    res_a[order[po]] = acc_a
    res_b[order[po]] = acc_b
    return res_a, res_b


def _sum_greater_key_smaller_rank(key: np.ndarray, rank: np.ndarray, w: np.ndarray) -> np.ndarray:
    """For each p: sum of w[q] over q with key[q] > key[p] and rank[q] < rank[p]."""
    return _dominance_sums(key, rank, w, np.zeros(rank.size))[0]


@dataclass(frozen=True)
class _PairCounts:
    conc: np.ndarray  # per patient as the earlier event (row role)
    tied: np.ndarray
    comp: np.ndarray
    tied_time: np.ndarray
    col_conc: np.ndarray | None = None  # per patient as the later member
    col_tied: np.ndarray | None = None
    col_comp: np.ndarray | None = None


def _pair_counts(time, event, ranks, *, both_roles: bool) -> _PairCounts:
    """Per-patient pair counts; column-role counts only when ``both_roles``."""
    key = _time_keys(time, event)
    ones = np.ones(time.size)
    ev = event.astype(float)
    if both_roles:
        conc, col_conc = _dominance_sums(key, ranks, ones, ev)
    else:
        conc, col_conc = _sum_greater_key_smaller_rank(key, ranks, ones), None
    conc = conc * ev
    tied = _sum_greater_key_equal_rank(key, ranks, ones) * ev
    comp = _sum_greater_key(key, ones) * ev
    _, tr = np.unique(time, return_inverse=True)
    cens_at = np.bincount(tr, weights=(~event).astype(float))
    counts = _PairCounts(conc, tied, comp, cens_at[tr] * ev)
    if both_roles:
        # As the later member j: events i with key_i < key_j (mirror image).
        neg_key = key.max() - key
        neg_rank = ranks.max() - ranks
        col_tied = _sum_greater_key_equal_rank(neg_key, neg_rank, ev)
        col_comp = _sum_greater_key(neg_key, ev)
        counts = _PairCounts(conc, tied, comp, counts.tied_time, col_conc, col_tied, col_comp)
    return counts


def _wald(c: float, se: float, conf_level: float) -> tuple[float, float]:
    if not np.isfinite(se):
        return float("nan"), float("nan")
    z = norm.ppf(0.5 + conf_level / 2.0)
    return float(max(0.0, c - z * se)), float(min(1.0, c + z * se))


# ------------------------------------------------------------ public metrics


def harrell_c(
    y, risk: RiskScores, *, tied_tol: float = 1e-8, conf_level: float = 0.95
) -> ConcordanceResult:
    """Harrell's concordance index with an asymptotic standard error.

    Parameters
    ----------
    y : structured ndarray
        Outcome of the evaluation rows (``workbench.cohort.make_outcome``).
    risk : RiskScores
        Higher = worse prognosis.
    tied_tol : float, default 1e-8
        Scores closer than this (after sorting, chained) count as tied.
    conf_level : float, default 0.95

    Returns
    -------
    ConcordanceResult

    Notes
    -----
    C = sum_{comparable (i, j)} [1(r_i > r_j) + 1/2 1(r_i = r_j)] / #comparable.

    The standard error treats C as a ratio of two U-statistics (concordance and
    comparability kernels, each symmetrised over the pair) and applies the delta
    method to their Hoeffding projections, the approach of Noether (1967) as
    used for C by Pencina & D'Agostino (2004):
    with H_k the (half-credit) concordant pairs and P_k the comparable pairs
    that involve patient k in either role, and D the number of comparable pairs,
    Var(C) ~= sum_k (H_k - C P_k)^2 / D^2. No resampling is involved.

    References
    ----------
    .. [1] Harrell FE, Califf RM, Pryor DB, Lee KL, Rosati RA. Evaluating the
       yield of medical tests. JAMA 1982;247:2543-2546.
    .. [2] Noether GE. Elements of Nonparametric Statistics. Wiley, 1967.
    .. [3] Pencina MJ, D'Agostino RB. Overall C as a measure of discrimination
       in survival analysis: model specific population value and confidence
       interval estimation. Stat Med 2004;23:2109-2123.
    """
    time, event = split_outcome(y)
    values = _check_risk(risk, time.size, "Harrell's C")
    ranks = _risk_ranks(values, tied_tol)
    row = _pair_counts(time, event, ranks, both_roles=True)
    comparable = row.comp.sum()
    if comparable == 0:
        raise MetricError(
            "Harrell's C has no comparable patient pairs: it needs at least one event "
            "followed by a patient with longer follow-up."
        )
    conc, tied = row.conc.sum(), row.tied.sum()
    c = float((conc + 0.5 * tied) / comparable)

    h = row.conc + 0.5 * row.tied + row.col_conc + 0.5 * row.col_tied
    p = row.comp + row.col_comp
    se = float(np.sqrt(np.sum((h - c * p) ** 2)) / comparable)
    lo, hi = _wald(c, se, conf_level)
    return ConcordanceResult(
        c_index=c,
        std_err=se,
        ci_lower=lo,
        ci_upper=hi,
        concordant=int(round(conc)),
        discordant=int(round(comparable - conc - tied)),
        tied_risk=int(round(tied)),
        tied_time=int(round(row.tied_time.sum())),
        comparable=int(round(comparable)),
        method="harrell",
        conf_level=conf_level,
    )


def uno_c(
    y_train, y_test, risk: RiskScores, *, tau: float | None = None, tied_tol: float = 1e-8,
    censoring=None,
) -> ConcordanceResult:
    """Uno's inverse-probability-of-censoring weighted concordance index.

    Parameters
    ----------
    y_train : structured ndarray
        Outcome of the training rows; the censoring distribution G is
        estimated from them only.
    y_test : structured ndarray
        Outcome of the evaluation rows.
    risk : RiskScores
        Scores of the evaluation rows; higher = worse.
    tau : float, optional
        Truncation time: only events before tau form pairs. Defaults to no
        truncation; a tau where few patients remain in follow-up gives very
        large weights, so choose one with G(tau) well above 0.
    tied_tol : float, default 1e-8
    censoring : RowCensoring, optional
        Per-row censoring weights of the evaluation rows
        (:func:`workbench.metrics.censoring.row_censoring`) instead of the
        Kaplan-Meier curve of ``y_train``.

    Returns
    -------
    ConcordanceResult
        ``std_err`` is NaN; confidence intervals come from resampling.

    Notes
    -----
    C_tau = sum_{i,j} d_i G(T_i-)^-2 1(T_i < T_j, T_i < tau) K_ij /
    sum_{i,j} d_i G(T_i-)^-2 1(T_i < T_j, T_i < tau), with K_ij = 1 for a
    concordant pair and 1/2 for tied scores; censored patients tied at T_i
    count as later. G(T_i-) is the left limit; scikit-survival evaluates the
    right-continuous G(T_i), which differs only when a training censoring
    coincides with a test event time.

    References
    ----------
    .. [1] Uno H, Cai T, Pencina MJ, D'Agostino RB, Wei LJ. On the C-statistics
       for evaluating overall adequacy of risk prediction procedures with
       censored survival data. Stat Med 2011;30:1105-1117.
    """
    time, event = split_outcome(y_test)
    values = _check_risk(risk, time.size, "Uno's C")
    if tau is not None and not (np.isfinite(tau) and tau > 0):
        raise MetricError(f"tau must be a positive follow-up time, got {tau!r}.")
    use = event & (time < tau) if tau is not None else event.copy()
    w = np.zeros(time.size)
    if censoring is None:
        w[use] = fit_censoring(y_train).inverse_at(time[use], left_limit=True) ** 2
    else:
        w[use] = 1.0 / censoring.own(use)[use] ** 2
    ranks = _risk_ranks(values, tied_tol)
    row = _pair_counts(time, event, ranks, both_roles=False)
    uf = use.astype(float)
    comparable = float(np.sum(row.comp * uf))
    if comparable == 0:
        raise MetricError(
            "Uno's C has no comparable patient pairs"
            + (f" with an event before tau = {tau:g}" if tau is not None else "")
            + ": it needs at least one event followed by a patient with longer follow-up."
        )
    num = np.sum(w * (row.conc + 0.5 * row.tied))
    den = np.sum(w * row.comp)
    conc, tied = float(np.sum(row.conc * uf)), float(np.sum(row.tied * uf))
    return ConcordanceResult(
        c_index=float(num / den),
        std_err=float("nan"),
        ci_lower=float("nan"),
        ci_upper=float("nan"),
        concordant=int(round(conc)),
        discordant=int(round(comparable - conc - tied)),
        tied_risk=int(round(tied)),
        tied_time=int(round(float(np.sum(row.tied_time * uf)))),
        comparable=int(round(comparable)),
        method="uno",
        tau=None if tau is None else float(tau),
    )
