"""Aalen-Johansen cumulative incidence against general-purpose libraries.

Sources: scikit-survival 0.28 ``cumulative_incidence_competing_risks`` (point estimates,
and the log-log interval with ``var_type="Dinse_Approx"``, the delta-method variance of
Dinse & Larson 1986 eq. 6 that we use), and lifelines 0.30 ``AalenJohansenFitter``
(point estimates and its log(-log F) interval from the same variance). Data: the
bone-marrow-transplant (35 patients, 2 causes) and chronic GVHD (100 patients, 3 causes)
sets shipped with scikit-survival (``sksurv.datasets.load_bmt`` / ``load_cgvhd``).
"""

import warnings

import numpy as np
import pytest
from lifelines import AalenJohansenFitter
from sksurv.datasets import load_bmt, load_cgvhd
from sksurv.nonparametric import cumulative_incidence_competing_risks

from workbench.competing.cif import aalen_johansen, incidence_at

TOL = 1e-10


def _data(loader):
    _, y = loader()
    return y["ftime"].astype(float), y["status"].astype(int)


@pytest.mark.parametrize("loader", [load_bmt, load_cgvhd])
def test_matches_sksurv_points_and_interval(loader):
    t, c = _data(loader)
    res = aalen_johansen(t, c)
    times, cif, ci = cumulative_incidence_competing_risks(c, t, conf_type="log-log", var_type="Dinse_Approx")
    np.testing.assert_allclose(res.times, times, rtol=0, atol=0)
    np.testing.assert_allclose(res.incidence, cif[1:], rtol=0, atol=TOL)
    np.testing.assert_allclose(res.ci_lower, ci[1:, 0], rtol=0, atol=TOL)
    np.testing.assert_allclose(res.ci_upper, ci[1:, 1], rtol=0, atol=TOL)
    # The library's first row is the all-cause incidence 1 - KM.
    np.testing.assert_allclose(1 - res.survival, cif[0], rtol=0, atol=TOL)


def test_matches_lifelines_on_tie_free_times():
    # lifelines jitters tied event times at random; ties are broken here first, in a
    # way that keeps the usual order (events before censorings at a shared time), and
    # both estimators get the same tie-free times. (On bmt lifelines also sets the
    # incidence at a time-0 event to zero, so only cgvhd is used.)
    t, c = _data(load_cgvhd)
    te = t.copy()
    seen: dict[float, int] = {}
    for i in range(t.size):
        if c[i] > 0:
            k = seen.get(t[i], 0)
            seen[t[i]] = k + 1
            te[i] = t[i] + 1e-6 * k
        else:
            te[i] = t[i] + 1e-4  # smallest gap between distinct times is 0.002
    res = aalen_johansen(te, c)
    for k in res.causes:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # no jittering may happen
            aj = AalenJohansenFitter().fit(te, c, event_of_interest=k)
        ll = aj.cumulative_density_.iloc[:, 0]
        idx = np.searchsorted(ll.index.values, res.times, side="right") - 1
        np.testing.assert_allclose(ll.values[idx], res.incidence[res.row(k)], rtol=0, atol=TOL)
        lims = aj.confidence_interval_.values[idx]
        defined = np.isfinite(lims).all(axis=1)  # lifelines gives NaN where F = 0
        assert defined.sum() > 0
        np.testing.assert_allclose(lims.min(axis=1)[defined], res.ci_lower[res.row(k)][defined], rtol=0, atol=TOL)
        np.testing.assert_allclose(lims.max(axis=1)[defined], res.ci_upper[res.row(k)][defined], rtol=0, atol=TOL)
        assert np.all(res.incidence[res.row(k)][~defined] == 0)


def test_horizons_read_the_step_curve():
    t, c = _data(load_bmt)
    res = aalen_johansen(t, c)
    times, cif, ci = cumulative_incidence_competing_risks(c, t, conf_type="log-log", var_type="Dinse_Approx")
    h = np.array([5.0, 12.5, 30.0, 60.0])  # between and on observed times
    est, lo, hi = incidence_at(res, h, cause=1)
    j = np.searchsorted(times, h, side="right") - 1
    np.testing.assert_allclose(est, cif[1, j], rtol=0, atol=TOL)
    np.testing.assert_allclose(lo, ci[1, 0, j], rtol=0, atol=TOL)
    np.testing.assert_allclose(hi, ci[1, 1, j], rtol=0, atol=TOL)
