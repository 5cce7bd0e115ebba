"""Nomogram arithmetic: axes, points, total points and predicted survival (no plotting).

For a fitted Cox model with terms :math:`f_j` (each the contribution of one
predictor to the uncentred linear predictor, see
:func:`workbench.preprocess.clinical.term_contribution`), every term gets an
axis covering its training range (1st to 99th percentile for continuous terms,
all levels for categorical ones, the 1st-99th percentiles of the training
signature scores for the imaging signature). With :math:`m_j` and
:math:`M_j` the smallest and largest contribution of term j over that range and
:math:`R = \\max_j (M_j - m_j)`,

.. math:: \\mathrm{points}_j(x) = 100\\,(f_j(x) - m_j) / R,

so the term with the widest range spans 0-100 points (Iasonos et al. 2008).
The total :math:`T = \\sum_j \\mathrm{points}_j` maps back to the centred
linear predictor by the affine relation

.. math:: \\mathrm{LP}(T) = T R / 100 + \\sum_j m_j - \\bar x^\\top \\beta,

and to survival at horizon t by :math:`S(t \\mid T) = S_0(t)^{\\exp \\mathrm{LP}(T)}`,
with :math:`S_0` the model's baseline survival for a patient at the training
means, exactly as :meth:`ClinicalCox.predict_survival` computes it.

Values outside an axis still get points from the same formula (below 0 or
above the axis end); the points table covers the whole training range.

References
----------
.. [1] Iasonos A, Schrag D, Raj GV, Panageas KS. How to build and interpret a
   nomogram for cancer prognosis. J Clin Oncol 2008;26:1364-70.
.. [2] Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer, 2015,
   Section 10.10 (nomograms).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import numpy as np
from numpy.typing import ArrayLike

from workbench.errors import ModelError, NotFittedError, SpecError
from workbench.figures.grouping import GROUP_NAMES, risk_cutpoints
from workbench.figures.nomogram_axes import (
    SIGNATURE_TERM,
    SPREAD_PERCENTILES,
    AxisSegment,
    AxisTick,
    MedianScale,
    NomogramScales,
    PatientPoints,
    RiskBand,
    SurvivalScale,
    TermScale,
)
from workbench.figures.ticks import format_number, nice_log_ticks, nice_ticks
from workbench.preprocess.clinical import TermInfo, term_contribution
from workbench.stats.coxph import baseline_survival_at

_GRID = 801
_SURVIVAL_CANDIDATES = (
    # (probability, priority): tenths first, then twentieths, then the tails
    *((p / 10, 0) for p in range(1, 10)),
    *((p / 20, 1) for p in range(1, 20, 2)),
    (0.01, 2), (0.02, 2), (0.98, 2), (0.99, 2),
)



# ------------------------------------------------------------------ helpers




def _check_model(model):
    if not hasattr(model, "fit_") or not hasattr(model, "transformer_"):
        raise NotFittedError(
            f"a nomogram needs a fitted Cox model with clinical terms (ClinicalCox or CombinedCox); "
            f"got {type(model).__name__} without fit_/transformer_. Fit the model on the training cohort first."
        )
    return model.fit_, model.transformer_.terms_


def _continuous_grid(info: TermInfo, lo: float, hi: float, n: int) -> np.ndarray:
    if info.transform is not None:
        return np.geomspace(lo, hi, n)
    return np.linspace(lo, hi, n)


def _monotone_pieces(y: np.ndarray, tol: float) -> list[tuple[int, int]]:
    """Index ranges [i, j] over which y is monotone (turning points belong to both neighbours)."""
    d = np.diff(y)
    sign = np.where(d > tol, 1, np.where(d < -tol, -1, 0))
    pieces, start, current = [], 0, 0
    for i, s in enumerate(sign):
        if s == 0:
            continue
        if current == 0:
            current = s
        elif s != current:
            pieces.append((start, i))
            start, current = i, s
    pieces.append((start, y.size - 1))
    return pieces


def _max_ticks(span_points: float) -> int:
    # roughly one label per 12 points of a 0-100 axis keeps labels apart at column width
    return max(3, int(abs(span_points) // 12) + 1)


def _value_ticks(scale_fn, info_transform, lo, hi, span_points, unit_free=False):
    log = info_transform is not None
    vals = nice_log_ticks(lo, hi, _max_ticks(span_points)) if log else nice_ticks(lo, hi, _max_ticks(span_points))
    return [AxisTick(format_number(v), float(v), float(p)) for v, p in zip(vals, scale_fn(vals), strict=True)]


# ------------------------------------------------------------------ building


def _term_from_info(info: TermInfo, coef: np.ndarray, percentiles) -> dict:
    """Axis pieces of one clinical term before the common points scale is known (in LP units)."""
    b = np.asarray(coef[info.design_slice], dtype=float)
    if info.kind in ("categorical", "ordinal"):
        levels = list(info.levels)
        contrib = term_contribution(info, b, levels)
        return {"kind": info.kind, "levels": levels, "contrib": contrib, "b": b,
                "lo": float(contrib.min()), "hi": float(contrib.max())}
    p_lo, p_hi = (info.percentile(q) for q in percentiles)
    if not p_hi > p_lo:
        p_lo, p_hi = info.train_min, info.train_max
    grid = _continuous_grid(info, p_lo, p_hi, _GRID)
    contrib = term_contribution(info, b, grid)
    bounds = [float(grid[0]), float(grid[-1])]
    if info.kind == "spline":
        span = float(contrib.max() - contrib.min())
        pieces = _monotone_pieces(contrib, tol=1e-9 * max(span, 1e-12))
        turns = [_refine_turn(info, b, grid, j) for _, j in pieces[:-1]]
        bounds = [bounds[0], *turns, bounds[1]]
        if turns:  # extremes of the effect sit at the refined turning points, not on the grid
            contrib = np.r_[contrib, term_contribution(info, b, turns)]
    below = None
    if info.has_limit_indicator:
        below = float(term_contribution(info, b, [f"<{info.detection_limit:.10g}"])[0])
    allc = contrib if below is None else np.r_[contrib, below]
    return {"kind": info.kind, "grid": grid, "bounds": bounds, "below": below, "b": b,
            "lo": float(allc.min()), "hi": float(allc.max())}


def _refine_turn(info: TermInfo, b: np.ndarray, grid: np.ndarray, j: int) -> float:
    """Locate a turning point of a spline term between the grid nodes around it."""
    from scipy.optimize import minimize_scalar

    lo, hi = float(grid[max(j - 1, 0)]), float(grid[min(j + 1, grid.size - 1)])
    f = term_contribution(info, b, [lo, float(grid[j]), hi])
    sign = -1.0 if f[1] >= max(f[0], f[2]) else 1.0  # maximum: minimise -f

    def g(v):
        return sign * float(term_contribution(info, b, [v])[0])

    res = minimize_scalar(g, bounds=(lo, hi), method="bounded", options={"xatol": 1e-12 * max(abs(hi), 1.0)})
    return float(res.x)


def _continuous_segments(info, part, scale_fn, ppl) -> tuple[AxisSegment, ...]:
    bounds = part["bounds"]
    n_pieces = len(bounds) - 1
    segs = []
    for k in range(n_pieces):
        lo, hi = bounds[k], bounds[k + 1]
        p_lo, p_hi = (float(v) for v in scale_fn([lo, hi]))
        ticks = _value_ticks(scale_fn, info.transform, lo, hi, p_hi - p_lo)
        if n_pieces > 1:
            # label where one piece turns into the next, unless a nice tick is already there
            for v, p in ((lo, p_lo), (hi, p_hi)):
                if all(abs(t.points - p) > 4.0 and abs(t.value - v) > 1e-9 for t in ticks):
                    ticks.append(AxisTick(format_number(v, 3), v, p))
            ticks.sort(key=lambda t: t.value)
        segs.append(AxisSegment(tuple(ticks), p_lo, p_hi, (lo, hi)))
    return tuple(segs)


def _survival_ticks(scale: SurvivalScale, axis_max: float, risk: bool = False) -> tuple[AxisTick, ...]:
    """Regular survival ticks: every tenth (0.1 ... 0.9) that falls on the axis, the same step on
    every axis and panel; beyond the last tenth at either end, one tail value (0.95, 0.98, 0.99 or
    0.05, 0.02, 0.01) may close the axis. With ``risk`` the labels give the risk, 1 - survival
    (the same set of values, so the same ticks)."""
    min_gap = 0.07 * axis_max
    kept: list[AxisTick] = []

    def place(prob) -> None:
        t = float(scale.total_points_for(prob))
        if 0.0 <= t <= axis_max and all(abs(t - k.points) >= min_gap for k in kept):
            kept.append(AxisTick(format_number(round(1.0 - prob, 2) if risk else prob, 2), prob, t))

    for p10 in range(1, 10):
        place(p10 / 10)
    if kept:
        hi, lo = max(k.value for k in kept), min(k.value for k in kept)
        for tail in (0.95, 0.98, 0.99):
            if tail > hi and len([k for k in kept if k.value > hi]) == 0:
                place(tail)
        for tail in (0.05, 0.02, 0.01):
            if tail < lo and len([k for k in kept if k.value < lo]) == 0:
                place(tail)
    else:
        for prob, _prio in sorted(_SURVIVAL_CANDIDATES, key=lambda c: c[1]):
            place(prob)
    return tuple(sorted(kept, key=lambda k: k.points))


def nomogram_scales(
    model,
    horizons: Sequence[float],
    *,
    signature_scores: ArrayLike | None = None,
    percentiles: tuple[float, float] = (1.0, 99.0),
    signature_groups: str | Sequence[float] = "tertiles",
    median_axis: bool = False,
    time_unit: str = "",
    name: str | None = None,
    risk_of: str = "",
) -> NomogramScales:
    """Build the axes and point mappings of a fitted Cox model's nomogram.

    Parameters
    ----------
    model : ClinicalCox or CombinedCox
        A fitted model (uses ``transformer_.terms_`` and ``fit_``).
    horizons : sequence of float
        Times (in the cohort's unit) of the survival-probability axes.
    signature_scores : array-like, optional
        Imaging-signature scores of the TRAINING patients; required when the
        model has a signature term (they set its axis range and risk groups).
    percentiles : (float, float)
        Training percentiles bounding continuous axes; stored percentiles only
        (1, 5, 10, 25, 50, 75, 90, 95, 99).
    signature_groups : {"median", "tertiles", "quartiles"} or cut-points
        Risk groups marked on the signature axis, cut on the training scores.
    median_axis : bool
        Add a predicted median survival axis.
    time_unit : str
    name : str, optional
        Model name shown (default ``model.name``).
    risk_of : str, optional
        Read the probability axes as the risk of this event (``1 - S``), for a model
        whose complement of the predicted risk has the Cox form (a Fine-Gray model's
        cumulative incidence); no median axis then.

    Returns
    -------
    NomogramScales
    """
    fit, infos = _check_model(model)
    coef = np.asarray(fit.coef, dtype=float)
    hz = _horizons(horizons)
    parts = [(_term_from_info(info, coef, percentiles), info) for info in infos]
    has_sig = SIGNATURE_TERM in fit.names
    sig = None
    if has_sig:
        if signature_scores is None:
            raise SpecError(
                f"the nomogram of model {getattr(model, 'name', '')!r} has an imaging-signature axis; pass "
                "signature_scores = the training patients' scores (model.signature_score(training_cohort)) "
                "so its range and risk groups come from the training patients."
            )
        s = np.asarray(signature_scores, dtype=float).ravel()
        if s.size < 3 or not np.all(np.isfinite(s)):
            raise SpecError("signature_scores must be the (finite) signature scores of the training patients.")
        b_sig = float(coef[list(fit.names).index(SIGNATURE_TERM)])
        lo, hi = np.percentile(s, percentiles)
        cuts = risk_cutpoints(s, signature_groups)
        sig = {"scores": s, "b": b_sig, "range": (float(lo), float(hi)), "cuts": cuts,
               "lo": min(b_sig * lo, b_sig * hi), "hi": max(b_sig * lo, b_sig * hi)}
    ranges = [p["hi"] - p["lo"] for p, _ in parts] + ([sig["hi"] - sig["lo"]] if sig else [])
    widest = max(ranges)
    if not widest > 0:
        raise ModelError("every coefficient of the model is zero, so a nomogram would have no scale.")
    ppl = 100.0 / widest
    terms = []
    for part, info in parts:
        def scale_fn(v, _info=info, _b=part["b"], _lo=part["lo"]):
            return (term_contribution(_info, _b, list(np.atleast_1d(v))) - _lo) * ppl

        if info.kind in ("categorical", "ordinal"):
            pts = (part["contrib"] - part["lo"]) * ppl
            ticks = tuple(AxisTick(lv, lv, float(p)) for lv, p in zip(part["levels"], pts, strict=True))
            segs = (AxisSegment(ticks, float(pts.min()), float(pts.max())),)
            extra = ()
        else:
            segs = _continuous_segments(info, part, scale_fn, ppl)
            extra = ()
            if part["below"] is not None:
                lim = format_number(info.detection_limit)
                below_pts = float((part["below"] - part["lo"]) * ppl)
                extra = (AxisTick(f"< {lim}", f"<{info.detection_limit:.10g}", below_pts),)
        categorical = info.kind in ("categorical", "ordinal")
        counts = np.asarray(getattr(info, "level_counts", ()) or (), dtype=float)
        shares = (tuple(float(c) for c in counts / counts.sum())
                  if categorical and counts.size == len(part["levels"]) and counts.sum() > 0 else ())
        if shares and tuple(part["levels"]) != tuple(info.levels):
            shares = tuple(shares[list(info.levels).index(lv)] for lv in part["levels"])
        terms.append(TermScale(
            name=info.column, label=info.label, unit=info.unit, kind=info.kind, segments=segs,
            min_contribution=part["lo"], max_contribution=part["hi"], points_per_lp=ppl,
            coef=part["b"], term_info=info, extra_ticks=extra, transform=info.transform,
            spread=() if categorical else tuple((float(q), float(v)) for q, v in info.percentiles),
            level_shares=shares,
        ))
    if sig:
        terms.append(_signature_scale(sig, ppl, signature_groups))
    sum_min = sum(t.min_contribution for t in terms)
    lp_intercept = float(sum_min - fit.x_mean @ coef)
    total_max = float(sum(t.max_points for t in terms))
    tvals = nice_ticks(0.0, total_max, 11, cover=True)
    axis_max = float(tvals[-1])
    total_ticks = tuple(AxisTick(format_number(v), float(v), float(v)) for v in tvals)
    scales = _survival_scales(fit, hz, lp_intercept, ppl, axis_max, bool(risk_of))
    if median_axis and risk_of:
        raise SpecError("a risk nomogram (risk_of) has no median-survival axis; leave median_axis off.")
    median = _median_scale(fit, lp_intercept, ppl, axis_max) if median_axis else None
    return NomogramScales(
        model=name if name is not None else getattr(model, "name", ""),
        terms=tuple(terms), points_per_lp=ppl, lp_intercept=lp_intercept,
        total_ticks=total_ticks, total_axis_max=axis_max, survival=tuple(scales),
        median=median, time_unit=time_unit, risk_of=risk_of,
    )


def with_horizons(scales: NomogramScales, model, horizons: Sequence[float]) -> NomogramScales:
    """``scales`` (from :func:`nomogram_scales` of ``model``) with its survival axes at ``horizons``.

    The predictor axes, the total-points axis and the median axis do not depend on the
    horizons, so only the survival axes are computed: the same scales as
    ``nomogram_scales(model, horizons, ...)`` with the other arguments unchanged.
    """
    fit, _ = _check_model(model)
    return replace(scales, survival=_survival_scales(fit, _horizons(horizons), scales.lp_intercept,
                                                     scales.points_per_lp, scales.total_axis_max,
                                                     bool(scales.risk_of)))


def _horizons(horizons) -> np.ndarray:
    hz = np.atleast_1d(np.asarray(horizons, dtype=float))
    if hz.size == 0 or np.any(~np.isfinite(hz)) or np.any(hz <= 0):
        raise SpecError(f"nomogram horizons must be positive times, for example [12, 24, 36]; got {list(hz)}.")
    return hz


def _survival_scales(fit, hz: np.ndarray, lp_intercept: float, ppl: float, axis_max: float,
                     risk: bool) -> tuple[SurvivalScale, ...]:
    s0 = baseline_survival_at(fit, hz)
    if np.any(s0 >= 1.0):
        bad = hz[s0 >= 1.0]
        raise SpecError(
            f"horizon(s) {list(bad)} come before the first event time {fit.baseline_times[0]:g}, where every "
            "predicted survival is 1; choose later horizons."
        )
    scales = []
    for h, s in zip(hz, s0, strict=True):
        base = SurvivalScale(float(h), float(s), (), lp_intercept, ppl)
        scales.append(SurvivalScale(float(h), float(s), _survival_ticks(base, axis_max, risk), lp_intercept, ppl))
    return tuple(scales)


def _signature_scale(sig: dict, ppl: float, method) -> TermScale:
    b, (lo, hi) = sig["b"], sig["range"]

    def pts(v):
        return (b * np.asarray(v, dtype=float) - sig["lo"]) * ppl

    p_lo, p_hi = (float(v) for v in pts([lo, hi]))
    # labelled in SDs of the training scores, so the axis reads the same whatever the
    # signature's internal scale; values and arithmetic stay in raw scores
    mean, sd = float(np.mean(sig["scores"])), float(np.std(sig["scores"], ddof=1))
    z = nice_ticks((lo - mean) / sd, (hi - mean) / sd, _max_ticks(p_hi - p_lo))
    vals = mean + z * sd
    ticks = tuple(AxisTick(format_number(zz), float(v), float(p))
                  for zz, v, p in zip(z, vals, pts(vals), strict=True))
    edges = np.r_[lo, np.clip(sig["cuts"], lo, hi), hi]
    k = edges.size - 1
    names = GROUP_NAMES.get(k, tuple(f"group {i + 1}" for i in range(k)))
    bands = tuple(
        RiskBand(names[i], float(edges[i]), float(edges[i + 1]), float(pts(edges[i])), float(pts(edges[i + 1])))
        for i in range(k)
    )
    return TermScale(
        name=SIGNATURE_TERM, label="Imaging signature", unit="SD", kind="signature",
        segments=(AxisSegment(ticks, p_lo, p_hi, (lo, hi)),),
        min_contribution=sig["lo"], max_contribution=sig["hi"], points_per_lp=ppl,
        coef=np.array([b]), bands=bands,
        table_range=(float(sig["scores"].min()), float(sig["scores"].max())),
        spread=tuple((float(q), float(np.percentile(sig["scores"], q))) for q in SPREAD_PERCENTILES),
        sd_scale=(mean, sd),
    )


def _median_scale(fit, lp_intercept: float, ppl: float, axis_max: float) -> MedianScale | None:
    t, H = np.asarray(fit.baseline_times, float), np.asarray(fit.baseline_cumhaz, float)
    # The predicted median is at most m exactly when H0(m) exp(LP) >= ln 2.
    def points_at(m):
        Hm = H[np.searchsorted(t, m, side="right") - 1]
        return (np.log(np.log(2.0) / Hm) - lp_intercept) * ppl

    # Ticks over the medians the total-score axis can reach (from the highest score's to the
    # lowest score's, or the last event time when that median is not reached), so a model whose
    # medians span a short stretch of follow-up still gets a readable axis.
    lp = lp_intercept + np.array([axis_max, 0.0]) / ppl
    k = np.searchsorted(H, np.log(2.0) * np.exp(-lp), side="left")
    shortest, longest = (float(t[min(i, t.size - 1)]) for i in k)
    cand = nice_ticks(shortest, longest, 8) if longest > shortest else nice_ticks(t[0], t[-1], 12)
    ticks = []
    for m in cand:
        if m < t[0]:
            continue
        p = float(points_at(m))
        if 0.0 <= p <= axis_max and all(abs(p - k.points) >= 0.07 * axis_max for k in ticks):
            ticks.append(AxisTick(format_number(m), float(m), p))
    if len(ticks) < 2:
        return None
    return MedianScale(tuple(sorted(ticks, key=lambda k: k.points)), t, H)


# reading a patient and the points table live in their own modules; re-exported here for existing imports
from workbench.figures.nomogram_reading import patient_values, points_for_patient  # noqa: E402

# the points table lives in its own module; re-exported here for existing imports
from workbench.figures.nomogram_table import (  # noqa: E402
    PointsTable,
    points_table,
    survival_from_table,
    write_points_table,
)

__all__ = [
    "SIGNATURE_TERM", "AxisSegment", "AxisTick", "MedianScale", "NomogramScales", "PatientPoints", "PointsTable",
    "RiskBand", "SurvivalScale", "TermScale", "nomogram_scales", "patient_values", "points_for_patient",
    "points_table", "survival_from_table", "write_points_table",
]
