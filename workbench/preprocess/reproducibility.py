"""Feature reproducibility from repeat measurements: intraclass correlation per feature, and a filter.

A repeat table holds a second measurement (a second segmentation, or a rescan) of
some patients, with the same feature columns as the imaging table. For each
feature, the patients' first and repeat values form an n x k table (targets x
measurements, k = 2 here) from which the intraclass correlation coefficient is
computed in one of three forms (Shrout & Fleiss 1979; McGraw & Wong 1996):

``ICC(1,1)``
    one-way random effects, absolute agreement of single measurements:
    (MSR - MSW) / (MSR + (k - 1) MSW).
``ICC(2,1)``
    two-way random effects, absolute agreement: (MSR - MSE) / (MSR + (k - 1) MSE +
    k (MSC - MSE) / n). A systematic shift between the measurements (a rescan on
    another day, another reader) counts against the feature.
``ICC(3,1)``
    two-way mixed effects, consistency: (MSR - MSE) / (MSR + (k - 1) MSE). A
    systematic shift does not count; use it when the measurements are fixed
    (e.g. the same two segmentation methods for everyone).

MSR, MSC, MSE and MSW are the mean squares for targets (rows), measurements
(columns), residual and within targets of the two-way layout. Confidence
intervals come from the F distribution (exact for ICC(1,1) and ICC(3,1), and
Satterthwaite's approximation for ICC(2,1); McGraw & Wong 1996, table 7).

bench/bench_icc.py (2000 replicates per setting, 20 and 40 patients, k = 2)
measured coverage of the 95% intervals of 0.945-0.955 for ICC(1,1) and
ICC(3,1). The ICC(2,1) interval with only two measurements is not reliable:
0.73-0.95 when the measurement effects are random, 0.96-1.00 when the second
measurement carries a fixed shift (its one degree of freedom for the
measurement variance cannot support it). With k = 2 the ICC(2,1) is therefore
reported without an interval (NaN), and the filter uses point estimates for
every form.

Features whose ICC falls below a threshold are removed before any modelling.
The ICC uses no outcome, so computing it on all patients with a repeat
measurement does not leak the outcome into validation. A threshold of 0.75
("good" reliability) is common practice (Koo & Li, J Chiropr Med 2016).

References
----------
.. [1] Shrout PE, Fleiss JL. Intraclass correlations: uses in assessing rater
       reliability. Psychol Bull 1979;86:420-8.
.. [2] McGraw KO, Wong SP. Forming inferences about some intraclass correlation
       coefficients. Psychol Methods 1996;1:30-46.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import f as f_dist

from workbench.errors import CohortError
from workbench.preprocess.imaging_options import DEFAULT_MIN_ICC, ICC_FORMS  # noqa: F401  (re-exported)

MIN_REPEAT_PATIENTS = 10
"""Fewest patients with a usable repeat measurement for an ICC (its interval is very wide below)."""


@dataclass(frozen=True)
class ICCResult:
    """One intraclass correlation with its confidence interval and F test of ICC = 0."""

    form: str
    value: float
    lower: float
    upper: float
    n: int
    k: int
    f_stat: float
    df1: float
    df2: float
    p_value: float


def _mean_squares(y: np.ndarray) -> dict:
    n, k = y.shape
    grand = y.mean()
    ss_r = k * np.sum((y.mean(axis=1) - grand) ** 2)
    ss_c = n * np.sum((y.mean(axis=0) - grand) ** 2)
    ss_t = np.sum((y - grand) ** 2)
    ss_e = ss_t - ss_r - ss_c
    return {"r": ss_r / (n - 1), "c": ss_c / (k - 1), "e": ss_e / ((n - 1) * (k - 1)),
            "w": (ss_t - ss_r) / (n * (k - 1))}


def icc(y, form: str = "ICC(3,1)", conf_level: float = 0.95, *,
        with_two_measure_interval: bool = False) -> ICCResult:
    """Intraclass correlation of an n x k table (rows: targets, columns: measurements).

    Rows with a missing value are left out. Raises CohortError for an unknown form or
    fewer than 2 complete rows or columns. ``with_two_measure_interval``: give the
    ICC(2,1) interval even with k = 2 (for the benchmark; see the module notes).
    """
    if form not in ICC_FORMS:
        raise CohortError(f"unknown ICC form {form!r}; choose one of {', '.join(ICC_FORMS)}.")
    y = np.asarray(y, dtype=float)
    if y.ndim != 2 or y.shape[1] < 2:
        raise CohortError("an ICC needs a table of targets x at least 2 measurements.")
    y = y[np.all(np.isfinite(y), axis=1)]
    n, k = y.shape
    if n < 2:
        raise CohortError(f"an ICC needs at least 2 targets with every measurement; found {n}.")
    ms = _mean_squares(y)
    q = 1.0 - (1.0 - conf_level) / 2.0
    with np.errstate(divide="ignore", invalid="ignore"):
        if form == "ICC(1,1)":
            value = (ms["r"] - ms["w"]) / (ms["r"] + (k - 1) * ms["w"])
            f0, df1, df2 = ms["r"] / ms["w"], n - 1, n * (k - 1)
            fl, fu = f0 / f_dist.ppf(q, df1, df2), f0 * f_dist.ppf(q, df2, df1)
            lower, upper = (fl - 1) / (fl + k - 1), (fu - 1) / (fu + k - 1)
        elif form == "ICC(3,1)":
            value = (ms["r"] - ms["e"]) / (ms["r"] + (k - 1) * ms["e"])
            f0, df1, df2 = ms["r"] / ms["e"], n - 1, (n - 1) * (k - 1)
            fl, fu = f0 / f_dist.ppf(q, df1, df2), f0 * f_dist.ppf(q, df2, df1)
            lower, upper = (fl - 1) / (fl + k - 1), (fu - 1) / (fu + k - 1)
        else:
            value = (ms["r"] - ms["e"]) / (ms["r"] + (k - 1) * ms["e"] + k * (ms["c"] - ms["e"]) / n)
            f0, df1, df2 = ms["r"] / ms["e"], n - 1, (n - 1) * (k - 1)
            a = k * value / (n * (1 - value))
            b = 1 + k * value * (n - 1) / (n * (1 - value))
            v = (a * ms["c"] + b * ms["e"]) ** 2 / ((a * ms["c"]) ** 2 / (k - 1) + (b * ms["e"]) ** 2 / df2)
            fl, fu = f_dist.ppf(q, n - 1, v), f_dist.ppf(q, v, n - 1)
            lower = n * (ms["r"] - fl * ms["e"]) / (fl * (k * ms["c"] + (k * n - k - n) * ms["e"]) + n * ms["r"])
            upper = n * (fu * ms["r"] - ms["e"]) / (k * ms["c"] + (k * n - k - n) * ms["e"] + n * fu * ms["r"])
            if k == 2 and not with_two_measure_interval:
                lower = upper = np.nan  # measured unreliable with two measurements (module notes)
        p = float(f_dist.sf(f0, df1, df2)) if np.isfinite(f0) else np.nan
    return ICCResult(form, float(value), float(lower), float(upper), int(n), int(k), float(f0), float(df1),
                     float(df2), p)


def feature_icc(first: pd.DataFrame, repeat: pd.DataFrame, form: str = "ICC(3,1)",
                conf_level: float = 0.95) -> pd.DataFrame:
    """ICC of every feature from first and repeat measurements of the same patients.

    ``first`` and ``repeat`` are indexed by patient id with the same feature columns
    (``repeat`` holds only the patients measured twice). One row per feature: icc,
    lower, upper, n (patients with both values), in the order of ``first``'s columns.
    """
    common = first.index.intersection(repeat.index)
    if repeat.index.has_duplicates:
        dup = repeat.index[repeat.index.duplicated()].unique()[:5].tolist()
        raise CohortError(f"the repeat table lists some patients more than once (e.g. {dup}); give one "
                          "repeat measurement per patient.")
    missing = [c for c in first.columns if c not in repeat.columns]
    if missing:
        raise CohortError(f"the repeat table lacks {len(missing)} feature column(s) of the imaging table "
                          f"(e.g. {missing[:5]}); it must hold the same features.")
    if len(common) < MIN_REPEAT_PATIENTS:
        raise CohortError(f"only {len(common)} patient(s) of the repeat table are in the imaging table; an ICC "
                          f"needs at least {MIN_REPEAT_PATIENTS} (check the patient ids).")
    rows = []
    for col in first.columns:
        y = np.column_stack([first.loc[common, col].to_numpy(float), repeat.loc[common, col].to_numpy(float)])
        ok = np.all(np.isfinite(y), axis=1)
        if ok.sum() < MIN_REPEAT_PATIENTS or np.ptp(y[ok]) == 0:
            rows.append({"feature": col, "icc": np.nan, "lower": np.nan, "upper": np.nan, "n": int(ok.sum())})
            continue
        r = icc(y[ok], form, conf_level)
        rows.append({"feature": col, "icc": r.value, "lower": r.lower, "upper": r.upper, "n": r.n})
    return pd.DataFrame(rows).set_index("feature")


def reproducible_features(table: pd.DataFrame, min_icc: float = DEFAULT_MIN_ICC) -> tuple[list[str], list[str]]:
    """(kept, removed) features of a :func:`feature_icc` table; a feature without an ICC is removed."""
    keep = table["icc"].to_numpy(float) >= float(min_icc)
    return table.index[keep].tolist(), table.index[~keep].tolist()


def family_counts(table: pd.DataFrame, min_icc: float = DEFAULT_MIN_ICC) -> pd.DataFrame:
    """Features kept and removed per family (the name up to the first underscore)."""
    fam = pd.Series([str(f).split("_", 1)[0] for f in table.index], index=table.index)
    kept = table["icc"].to_numpy(float) >= float(min_icc)
    out = pd.DataFrame({"family": fam.to_numpy(), "kept": kept})
    g = out.groupby("family", sort=False)["kept"]
    return pd.DataFrame({"features": g.size(), "kept": g.sum().astype(int),
                         "removed": (g.size() - g.sum()).astype(int)})
