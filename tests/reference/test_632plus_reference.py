"""The .632+ rule against hand computation from its published formulas.

Source: Efron B, Tibshirani R. Improvements on cross-validation: the .632+ bootstrap
method. J Am Stat Assoc 1997;92:548-60, eqs. 27-32: no-information rate for 0-1 loss
gamma = p1 (1 - q1) + (1 - p1) q1; relative overfitting rate R = (Err1 - err) / (gamma - err);
weight w = .632 / (1 - .368 R); Err.632+ = (1 - w) err + w Err1, equivalently
Err.632 + (Err1' - err) (.368 .632 R') / (1 - .368 R'). The numbers below are worked by hand
from these formulas (arithmetic shown).
"""

from __future__ import annotations

import pytest

from workbench.validation.estimators_bootstrap import point632plus


def test_interpolating_classifier_worked_example():
    # A 1-nearest-neighbour rule has apparent error err = 0. Balanced classes, predictions
    # balanced too: p1 = q1 = 0.5, gamma = 0.5*0.5 + 0.5*0.5 = 0.5. Leave-one-out bootstrap
    # error Err1 = 0.3. R = 0.3 / 0.5 = 0.6; w = 0.632 / (1 - 0.368*0.6) = 0.632 / 0.7792
    # = 0.811088; Err.632+ = 0.811088 * 0.3 = 0.243326.
    gamma = 0.5 * (1 - 0.5) + (1 - 0.5) * 0.5
    assert point632plus(0.0, 0.3, gamma, higher_is_better=False) == pytest.approx(0.243326, abs=1e-6)
    # second published form: Err.632 = .368*0 + .632*.3 = .1896, plus
    # .3 * (.368*.632*.6) / (1 - .368*.6) = .3 * .1395456 / .7792 = .0537265
    assert point632plus(0.0, 0.3, 0.5, False) == pytest.approx(0.1896 + 0.0537265, abs=1e-6)


def test_concordance_is_the_same_rule_on_the_loss_one_minus_c():
    # C = 1 - loss with no-information C = 0.5: apparent C 1.0, out-of-bootstrap C 0.7
    # is the worked example above: 1 - 0.243326.
    assert point632plus(1.0, 0.7, 0.5, higher_is_better=True) == pytest.approx(0.756674, abs=1e-6)


def test_limiting_cases():
    # No overfitting (Err1 <= err): R' = 0, w = .632, the plain .632 rule.
    assert point632plus(0.20, 0.18, 0.5, False) == pytest.approx(0.368 * 0.20 + 0.632 * 0.18, abs=1e-12)
    # Err1 beyond the no-information rate: Err1' = gamma, R' = 1, w = 1: the estimate is gamma.
    assert point632plus(0.10, 0.60, 0.5, False) == pytest.approx(0.5, abs=1e-12)
    # an example with err > 0: err .1, Err1 .3, gamma .5 -> R = .2/.4 = .5,
    # w = .632 / (1 - .184) = .774510, estimate = .225490*.1 + .774510*.3 = .254902
    assert point632plus(0.10, 0.30, 0.5, False) == pytest.approx(0.254902, abs=1e-6)
