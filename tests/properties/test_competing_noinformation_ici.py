"""The no-information ICI of the competing route's .632+ rule (workbench.competing.estimates).

Seeded simulation (invented data): competing outcomes with constant cause-specific hazards
0.5 (cause 1) and 0.3 (cause 2), uniform(0, 3) censoring, and predicted incidences drawn
independently of the outcome. Such predictions carry no information, so the smoothed
calibration curve (workbench.competing.metrics.competing_smoothed_calibration) is flat at
the cohort's incidence and their ICI must come close to the no-information value
mean_j |F_j - F_AJ(t)|. Truth of the incidence in closed form: F_1(t) = 0.5 / 0.8
(1 - exp(-0.8 t)) (constant hazards; Beyersmann, Allignol & Schumacher, Competing Risks and
Multistate Models with R, 2012, ch. 3).
Tolerance 0.02 (common practice: a few times the sampling error of a smoothed curve at
n = 3000). Measured (seed 3): ICI 0.1495 / 0.2454 / 0.3165, no-information value 0.1496 /
0.2455 / 0.3166; a no-information value built on the predictions' own mean instead of the
Aalen-Johansen incidence gives 0.025 / 0.037 / 0.045 and fails.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.competing.estimates import no_information_table
from workbench.competing.metrics import competing_smoothed_calibration
from workbench.competing.outcome import IncidenceCurves, make_competing_outcome
from workbench.validation.estimators_bootstrap import point632plus

H = np.array([0.5, 1.0, 1.5])


def _cohort(n: int, seed: int):
    rng = np.random.default_rng(seed)
    t = rng.exponential(1 / 0.8, n)
    cause = np.where(rng.uniform(size=n) < 0.5 / 0.8, 1, 2)
    c = rng.uniform(0, 3, n)
    y = make_competing_outcome(np.minimum(t, c), np.where(t <= c, cause, 0))
    # predictions unrelated to the outcome, centred well away from the true incidence (0.28 / 0.43 / 0.53)
    base = rng.uniform(0.02, 0.12, n)
    risks = np.column_stack([base, base * 1.5, base * 1.8])
    return y, IncidenceCurves(H, risks, 1)


@pytest.mark.parametrize("seed", [3, 4])
def test_uninformative_predictions_have_the_no_information_ici(seed):
    y, curves = _cohort(3000, seed)
    gamma = no_information_table({("cause", "clinical", "cause_specific"): curves}, {"cause": y}, H)
    g = gamma[("cause", "clinical", "cause_specific")]["ici"]
    ici = np.array([competing_smoothed_calibration(y, curves, t).ici for t in H])
    truth = 0.5 / 0.8 * -np.expm1(-0.8 * H)
    # the value itself: mean |F_j - F(t)| with F(t) close to the closed-form incidence
    assert np.allclose(g, np.mean(np.abs(curves.risks - truth), axis=0), atol=0.02), (g, truth)
    assert np.allclose(ici, g, atol=0.02), (ici, g)
    wrong = np.mean(np.abs(curves.risks - curves.risks.mean(axis=0)), axis=0)
    assert np.all(np.abs(ici - wrong) > 0.05), (ici, wrong)


def test_632plus_ici_lies_between_apparent_and_out_of_bootstrap():
    # a loss: apparent 0.02 < out-of-bootstrap 0.05 < no-information 0.15 (Efron & Tibshirani 1997, eq. 32)
    est = point632plus(0.02, 0.05, 0.15, False)
    assert 0.02 + 0.632 * 0.03 <= est <= 0.05, est
    # out-of-bootstrap at the no-information value: all weight on it
    assert point632plus(0.02, 0.15, 0.15, False) == pytest.approx(0.15)
