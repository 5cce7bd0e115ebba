"""Sample size needed to validate a fitted model at a new site.

Following Riley et al. (Stat Med 2022;41:1280-95; BMJ 2024;384:e074821), the
validation cohort must be large enough to estimate, precisely, the
observed/expected ratio at the horizon (calibration-in-the-large), the
calibration slope and the C-index. Closed forms do not exist for the slope and
C of a time-to-event model, so, as the paper proposes, a very large validation
cohort (``n_sim`` patients) is simulated from the model's OWN linear-predictor
distribution (resampling the development patients' predictions) under the
assumption that the model is well calibrated at the new site, with censoring
drawn from the development cohort's censoring distribution (reverse
Kaplan-Meier) unless another follow-up is given. Each criterion's standard
error in that cohort, SE_N, gives the required size
n = N (SE_N / SE_target)^2, because standard errors shrink as 1/sqrt(n).

Targets are 95% confidence-interval widths (defaults as suggested in the
papers, recalled from memory): 0.2 for O/E (on the ratio scale, around 1),
0.2 for the calibration slope and 0.1 for the C-index.

* O/E: SE of ln(O/E) = Greenwood SE of the Kaplan-Meier risk / observed risk
  (the expected risk is fixed by the model);
* slope: SE of the coefficient of a Cox model of the outcome on the linear
  predictor (the calibration slope over the whole follow-up). The paper targets
  the slope at the horizon on the log cumulative hazard scale, estimated from
  pseudo-observations; that estimator is not implemented here, so this
  criterion is a simplification of the paper's, not a reproduction of it, and
  the paper's worked example (a model for recurrent venous thromboembolism) is
  not reproduced;
* C: the asymptotic SE of Harrell's C.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workbench.cohort import make_outcome
from workbench.errors import MetricError
from workbench.metrics._ipcw import fit_censoring
from workbench.metrics.concordance import harrell_c
from workbench.predictions import RiskScores, SurvivalCurves
from workbench.stats.coxph import fit_coxph
from workbench.stats.km import kaplan_meier

__all__ = ["NewSiteSampleSize", "new_site_sample_size"]

Z = 1.959963984540054


@dataclass(frozen=True)
class NewSiteSampleSize:
    """Patients needed at a new site for each precision criterion, and overall.

    Attributes
    ----------
    horizon : float
    n_oe, n_slope, n_c, n_required : int
    events_expected : float
        Expected events by the horizon among ``n_required`` patients.
    se_targets : dict
        Target standard errors (ln O/E, slope, C).
    widths : dict
        Target 95% CI widths.
    n_simulated : int
    risk_at_horizon : float
        Mean predicted risk at the horizon in the simulated cohort.
    censored_before_horizon : float
        Share of simulated patients censored before the horizon.
    assumptions : str
    """

    horizon: float
    n_oe: int
    n_slope: int
    n_c: int
    n_required: int
    events_expected: float
    se_targets: dict
    widths: dict
    n_simulated: int
    risk_at_horizon: float
    censored_before_horizon: float
    assumptions: str


def _draw_times(surv: np.ndarray, grid: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Inverse transform on step curves: first grid time where S(t) <= u; inf if never."""
    below = surv <= u[:, None]
    hit = below.any(axis=1)
    first = np.argmax(below, axis=1)
    return np.where(hit, grid[first], np.inf)


def _oe_se_target(width: float) -> float:
    # CI exp(ln(O/E) +- z SE) around O/E = 1 has width 2 sinh(z SE)
    return float(np.arcsinh(width / 2.0) / Z)


def new_site_sample_size(curves: SurvivalCurves, lp, y_dev, horizon: float, *, widths=None, n_sim: int = 20000,
                         follow_up: float | None = None, random_state=None) -> NewSiteSampleSize:
    """Sample size to validate a model at a new site (precision of O/E, calibration slope and C).

    Parameters
    ----------
    curves : SurvivalCurves
        The model's predicted survival for the development patients on a fine
        time grid reaching at least the horizon.
    lp : array-like of shape (n_dev,)
        Their linear predictors (Cox-type models).
    y_dev : structured ndarray
        Development outcome: the censoring distribution of the simulated site
        (reverse Kaplan-Meier), unless ``follow_up`` is given.
    horizon : float
    widths : dict, optional
        95% CI widths: keys ``"oe"`` (default 0.2), ``"slope"`` (0.2), ``"c"`` (0.1).
    n_sim : int
        Size of the simulated validation cohort.
    follow_up : float, optional
        Instead of the development censoring: uniform censoring on (0, follow_up).
    random_state : int or Generator

    References
    ----------
    .. [1] Riley RD, Collins GS, Ensor J, et al. Minimum sample size
           calculations for external validation of a clinical prediction model
           with a time-to-event outcome. Stat Med 2022;41:1280-95.
    .. [2] Riley RD, Snell KIE, Archer L, et al. Evaluation of clinical
           prediction models (part 3): calculating the sample size required for
           an external validation study. BMJ 2024;384:e074821.
    """
    w = {"oe": 0.2, "slope": 0.2, "c": 0.1, **(widths or {})}
    rng = np.random.default_rng(random_state)
    lp = np.asarray(lp, dtype=float)
    grid = np.asarray(curves.times, dtype=float)
    if grid[-1] < horizon:
        raise MetricError(f"the survival curves end at {grid[-1]:g}, before the horizon {horizon:g}; "
                          "predict on a grid that reaches the horizon.")
    pick = rng.integers(0, lp.size, n_sim)
    surv = curves.probs[pick]
    t_event = _draw_times(surv, grid, rng.random(n_sim))
    if follow_up is not None:
        c = rng.uniform(0.0, float(follow_up), n_sim)
    else:
        g = fit_censoring(y_dev)
        u = rng.random(n_sim)
        below = g.survival[None, :] <= u[:, None]
        c = np.where(below.any(axis=1), g.times[np.argmax(below, axis=1)], np.inf)
    end = float(grid[-1])
    c = np.minimum(c, end)
    time = np.minimum(t_event, c)
    event = t_event <= c
    y = make_outcome(time, event)

    j = int(np.searchsorted(grid, horizon, side="right") - 1)
    expected = float(np.mean(1.0 - surv[:, j]))
    km = kaplan_meier(time, event)
    k = int(np.searchsorted(km.times, horizon, side="right") - 1)
    s_obs = float(km.survival[k]) if k >= 0 else 1.0
    se_s = float(km.std_err[k]) if k >= 0 else 0.0
    se_ln_oe = se_s / (1.0 - s_obs)
    lp_sim = lp[pick]
    fit = fit_coxph(lp_sim[:, None], time, event, ties="breslow", min_events_per_parameter=0.0)
    se_slope = float(fit.se[0])
    se_c = float(harrell_c(y, RiskScores(lp_sim)).std_err)
    tgt = {"ln_oe": _oe_se_target(w["oe"]), "slope": w["slope"] / (2 * Z), "c": w["c"] / (2 * Z)}
    n_oe = int(np.ceil(n_sim * (se_ln_oe / tgt["ln_oe"]) ** 2))
    n_slope = int(np.ceil(n_sim * (se_slope / tgt["slope"]) ** 2))
    n_c = int(np.ceil(n_sim * (se_c / tgt["c"]) ** 2))
    n_req = max(n_oe, n_slope, n_c)
    return NewSiteSampleSize(
        horizon=float(horizon), n_oe=n_oe, n_slope=n_slope, n_c=n_c, n_required=n_req,
        events_expected=float(n_req * (1.0 - s_obs)), se_targets=tgt, widths=w, n_simulated=int(n_sim),
        risk_at_horizon=expected, censored_before_horizon=float(np.mean(~event & (time < horizon))),
        assumptions=("model well calibrated at the new site; case mix as in the development cohort "
                     "(its linear predictors resampled); censoring "
                     + ("uniform up to the given follow-up" if follow_up is not None
                        else "as in the development cohort (reverse Kaplan-Meier)")),
    )
