"""Properties of the Aalen-Johansen estimator (workbench.competing.cif)."""

import numpy as np
import pytest
from sksurv.datasets import load_cgvhd, load_gbsg2

from workbench.competing.cif import aalen_johansen
from workbench.stats.km import kaplan_meier


def _random_competing(seed, n=300, ties=True):
    rng = np.random.default_rng(seed)
    t = rng.exponential(1.0, n)
    if ties:
        t = np.round(t, 1)  # many ties between causes and with censorings
    cause = rng.choice([0, 1, 2, 3], size=n, p=[0.3, 0.3, 0.25, 0.15])
    return t, cause


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_incidences_and_survival_sum_to_one(seed):
    t, c = _random_competing(seed)
    res = aalen_johansen(t, c)
    km = kaplan_meier(t, c > 0)
    np.testing.assert_allclose(res.incidence.sum(axis=0) + km.survival, 1.0, rtol=0, atol=1e-12)
    assert np.all(np.diff(res.incidence, axis=1) >= -1e-15)
    assert np.all((res.ci_lower <= res.incidence + 1e-15) & (res.incidence <= res.ci_upper + 1e-15))


def test_sum_to_one_on_cgvhd():
    _, y = load_cgvhd()  # scikit-survival's chronic GVHD data, three causes
    res = aalen_johansen(y["ftime"], y["status"])
    np.testing.assert_allclose(res.incidence.sum(axis=0) + res.survival, 1.0, rtol=0, atol=1e-12)


@pytest.mark.parametrize("seed", [3, 4])
def test_single_cause_is_one_minus_km_with_greenwood_se(seed):
    t, c = _random_competing(seed)
    e = c > 0
    res = aalen_johansen(t, e.astype(int))
    km = kaplan_meier(t, e)
    np.testing.assert_allclose(res.incidence[0], 1 - km.survival, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.std_err[0], km.std_err, rtol=0, atol=1e-12)


def test_single_cause_on_gbsg2():
    _, y = load_gbsg2()  # scikit-survival's GBSG2 trial data: one event type
    t, e = y["time"], y["cens"]
    res = aalen_johansen(t, e.astype(int))
    km = kaplan_meier(t, e)
    np.testing.assert_allclose(res.incidence[0], 1 - km.survival, rtol=0, atol=1e-10)
    np.testing.assert_allclose(res.std_err[0], km.std_err, rtol=0, atol=1e-10)
