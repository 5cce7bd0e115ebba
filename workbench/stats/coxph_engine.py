"""Input checks and the time-sorted risk-set engine behind :mod:`workbench.stats.coxph`.

Arrays in, checked arrays out (:func:`_prepare`, with plain-language errors that
name spreadsheet rows), and :class:`_RiskSets`, which evaluates the partial
likelihood, score and information with one sort and reverse cumulative sums
(Efron or Breslow ties, frequency or sampling weights, delayed entry). Used by
the Cox fitter and by the Schoenfeld residuals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import linalg

from workbench.errors import ModelError


def _frozen(a, dtype=float) -> np.ndarray:
    a = np.array(a, dtype=dtype, copy=True)
    a.setflags(write=False)
    return a


def _join(names) -> str:
    names = [f"'{n}'" for n in names]
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _rows(mask: np.ndarray) -> str:
    # Spreadsheet numbering (header = row 1), the project's convention for messages.
    idx = np.flatnonzero(mask) + 2
    shown = ", ".join(str(i) for i in idx[:5])
    more = f" and {idx.size - 5} more" if idx.size > 5 else ""
    return f"row{'s' if idx.size > 1 else ''} {shown}{more} (spreadsheet numbering, header = row 1)"


# ------------------------------------------------------------ input checks


@dataclass(frozen=True)
class _Data:
    X: np.ndarray
    time: np.ndarray
    event: np.ndarray
    weights: np.ndarray
    offset: np.ndarray
    names: tuple[str, ...]
    integer_weights: bool
    rows: np.ndarray
    entry: np.ndarray | None = None


def _as_design(X, names) -> tuple[np.ndarray, tuple[str, ...]]:
    if isinstance(X, pd.DataFrame):
        cols = tuple(str(c) for c in X.columns)
        bad = [c for c, dt in zip(cols, X.dtypes, strict=True) if not (pd.api.types.is_numeric_dtype(dt) or pd.api.types.is_bool_dtype(dt))]
        if bad:
            raise ModelError(
                f"Predictor column(s) {_join(bad)} are not numeric. The Cox engine needs numbers: "
                "encode categories as 0/1 indicator columns first."
            )
        arr = X.to_numpy(dtype=float)
    else:
        arr = np.asarray(X, dtype=float)
        cols = None
        if arr.ndim == 1:
            arr = arr[:, None]
    if arr.ndim != 2:
        raise ModelError(f"The predictors must form a table (patients x predictors); got shape {arr.shape}.")
    if names is not None:
        names = tuple(str(n) for n in names)
        if len(names) != arr.shape[1]:
            raise ModelError(f"{len(names)} names were given for {arr.shape[1]} predictor columns; they must match.")
    else:
        names = cols if cols is not None else tuple(f"x{j + 1}" for j in range(arr.shape[1]))
    return arr, names


def _vector(v, n: int, what: str, default: float) -> np.ndarray:
    if v is None:
        return np.full(n, default)
    v = np.asarray(v, dtype=float).ravel()
    if v.size != n:
        raise ModelError(f"{what} has {v.size} values but there are {n} patients; they must match.")
    if not np.all(np.isfinite(v)):
        raise ModelError(f"{what} contains missing or infinite values in {_rows(~np.isfinite(v))}.")
    return v


def _prepare(X, time, event, weights=None, offset=None, names=None, entry=None) -> _Data:
    X, names = _as_design(X, names)
    n = X.shape[0]
    t = _vector(time, n, "The follow-up time", 0.0)
    if np.any(t < 0):
        raise ModelError(f"The follow-up time is negative in {_rows(t < 0)}; times must be zero or positive.")
    e = np.asarray(event).ravel()
    if e.size != n:
        raise ModelError(f"The event indicator has {e.size} values but there are {n} patients; they must match.")
    if e.dtype != bool:
        ef = np.asarray(e, dtype=float)
        if np.any(~np.isfinite(ef)) or np.any((ef != 0) & (ef != 1)):
            raise ModelError(
                f"The event indicator must be 1 (event) or 0 (censored); other values found in {_rows(~np.isin(ef, (0, 1)))}."
            )
        e = ef == 1
    nan = ~np.isfinite(X)
    if nan.any():
        j = int(np.flatnonzero(nan.any(axis=0))[0])
        cols = [names[k] for k in np.flatnonzero(nan.any(axis=0))]
        raise ModelError(
            f"Predictor {_join(cols)} has missing or infinite values (column '{names[j]}': {_rows(nan[:, j])}). "
            "The Cox model needs a value for every patient: impute or remove these rows before fitting."
        )
    w = _vector(weights, n, "The case weights", 1.0)
    if np.any(w < 0):
        raise ModelError(f"Case weights must not be negative; negative in {_rows(w < 0)}.")
    off = _vector(offset, n, "The offset", 0.0)
    ent = None
    if entry is not None:
        ent = _vector(entry, n, "The entry time", 0.0)
        late = (ent > t) | (e & (ent >= t))
        if late.any():
            raise ModelError(
                f"The entry time is not before the follow-up time in {_rows(late)}; a row is at risk "
                "on (entry, time], so entry must be earlier than time (and strictly earlier for an event)."
            )
    keep = w > 0
    if not keep.all():
        X, t, e, w, off = X[keep], t[keep], e[keep], w[keep], off[keep]
        ent = None if ent is None else ent[keep]
    if not np.any(e):
        raise ModelError(
            f"No events are recorded among the {int(keep.sum())} patients, so no hazard ratio can be estimated. "
            "Check the coding of the event column (1 = event such as death or relapse, 0 = censored)."
        )
    integer = bool(np.all(np.abs(w - np.rint(w)) < 1e-8))
    return _Data(X, t, e, w, off, names, integer, np.flatnonzero(keep), ent)


# --------------------------------------------------------- risk-set engine


@dataclass(frozen=True)
class _Terms:
    """Efron/Breslow correction terms: one row per (event time, tie index)."""

    group: np.ndarray
    frac: np.ndarray
    mult: np.ndarray


class _RiskSets:
    """Time-sorted layout of one data set; evaluates the partial likelihood."""

    def __init__(self, time, event, weights, integer_weights: bool, entry=None):
        order = np.argsort(time, kind="stable")
        self.order = order
        self.t, self.d, self.w = time[order], event[order], weights[order]
        self.ev_pos = np.flatnonzero(self.d)
        self.times, self.ev_starts, self.m = np.unique(
            self.t[self.ev_pos], return_index=True, return_counts=True
        )
        self.n_groups = self.times.size
        self.first = np.searchsorted(self.t, self.times, side="left")
        self.ev_group = np.repeat(np.arange(self.n_groups), self.m)
        self.wd = np.add.reduceat(self.w[self.ev_pos], self.ev_starts)
        self.n_groups_le = np.searchsorted(self.times, self.t, side="right")
        self.integer_weights = integer_weights
        # Delayed entry (counting-process rows): row i is at risk at event time s when
        # entry_i < s <= t_i, so the rows that entered at or after s are subtracted.
        self.late = None
        if entry is not None and np.any(entry[order] > 0):
            self.entry = entry[order]
            self.entry_order = np.argsort(self.entry, kind="stable")
            self.late = np.searchsorted(self.entry[self.entry_order], self.times, side="left")
            self.n_groups_le_entry = np.searchsorted(self.times, self.entry, side="right")

    def terms(self, ties: str) -> _Terms:
        G = self.n_groups
        if ties == "breslow":
            return _Terms(np.arange(G), np.zeros(G), self.wd.copy())
        # Frequency weights count as tied rows; otherwise rows carry their mean weight.
        size = np.rint(self.wd).astype(int) if self.integer_weights else self.m
        group = np.repeat(np.arange(G), size)
        tie_index = np.arange(group.size) - np.repeat(np.cumsum(size) - size, size)
        frac = tie_index / size[group]
        mult = np.ones(group.size) if self.integer_weights else (self.wd / self.m)[group]
        return _Terms(group, frac, mult)

    def evaluate(self, Xs, off, beta, terms: _Terms, hessian: bool = True):
        """Log partial likelihood, score and information at ``beta``.

        ``Xs`` and ``off`` are in sorted order. Returns (loglik, score, info,
        parts) where parts holds per-term risk sums for the baseline hazard.
        """
        eta = Xs @ beta + off
        shift = float(eta.max())
        r = self.w * np.exp(eta - shift)
        rX = r[:, None] * Xs
        S0 = np.cumsum(r[::-1])[::-1][self.first]
        S1 = np.cumsum(rX[::-1], axis=0)[::-1][self.first]
        if self.late is not None:
            eo = self.entry_order
            S0 = S0 - np.r_[np.cumsum(r[eo][::-1])[::-1], 0.0][self.late]
            S1 = S1 - np.vstack([np.cumsum(rX[eo][::-1], axis=0)[::-1], np.zeros((1, Xs.shape[1]))])[self.late]
        E0 = np.add.reduceat(r[self.ev_pos], self.ev_starts)
        E1 = np.add.reduceat(rX[self.ev_pos], self.ev_starts, axis=0)
        g, f, c = terms.group, terms.frac, terms.mult
        s0 = S0[g] - f * E0[g]
        a = (S1[g] - f[:, None] * E1[g]) / s0[:, None]
        wev = self.w[self.ev_pos]
        if not s0.min() > 1e-200:
            # Linear predictors spanning hundreds of log units (runaway coefficients)
            # underflow a risk set; report the point as unusable so the step is halved.
            return np.nan, None, None, (s0, a, shift)
        loglik = float(wev @ eta[self.ev_pos] - c @ (np.log(s0) + shift))
        score = wev @ Xs[self.ev_pos] - c @ a
        info = None
        if hessian:
            alpha = np.bincount(g, weights=c / s0, minlength=self.n_groups)
            gamma = np.bincount(g, weights=c * f / s0, minlength=self.n_groups)
            cum_alpha = np.concatenate([[0.0], np.cumsum(alpha)])
            diag = r * cum_alpha[self.n_groups_le]
            if self.late is not None:
                diag -= r * cum_alpha[self.n_groups_le_entry]
            diag[self.ev_pos] -= r[self.ev_pos] * gamma[self.ev_group]
            info = (Xs * diag[:, None]).T @ Xs - (a * c[:, None]).T @ a
        return loglik, score, info, (s0, a, shift)


def _solve(info, rhs):
    try:
        return linalg.cho_solve(linalg.cho_factor(info, check_finite=False), rhs, check_finite=False)
    except (linalg.LinAlgError, ValueError):
        return None


def _check_design(Xs, w, names):
    """Raise a plain-language error for constant or collinear predictor columns."""
    p = Xs.shape[1]
    if p == 0:
        return
    # Eigen-decomposition of the weighted correlation matrix: p x p, cheap for any n.
    gram = (Xs * (w / w.sum())[:, None]).T @ Xs
    evals, evecs = np.linalg.eigh(gram)
    small = evals < 1e-10 * max(evals[-1], 1.0)
    if small.any():
        involved = np.flatnonzero(np.any(np.abs(evecs[:, small]) > 1e-4, axis=1))
        raise ModelError(
            f"Predictors {_join([names[j] for j in involved])} are collinear: one of them is an exact "
            "combination of the others (for example indicator columns for every category of a variable, "
            "or the same measurement in two units), so their separate hazard ratios cannot be estimated. "
            "Remove one of them, or leave one category out as the reference."
        )


def _perfect_order(Xs, rs: _RiskSets) -> np.ndarray:
    """Columns whose value at every event is the extreme of its risk set."""
    rev_max = np.maximum.accumulate(Xs[::-1], axis=0)[::-1][rs.first]
    rev_min = np.minimum.accumulate(Xs[::-1], axis=0)[::-1][rs.first]
    xe = Xs[rs.ev_pos]
    tol = 1e-12
    spread = np.any(rev_max - rev_min > tol, axis=0)
    at_max = np.all(xe >= rev_max[rs.ev_group] - tol, axis=0)
    at_min = np.all(xe <= rev_min[rs.ev_group] + tol, axis=0)
    return spread & (at_max | at_min)
