"""Input checks of the competing-risks package: each message says what was expected."""

import numpy as np
import pytest

from workbench.competing.cif import aalen_johansen, incidence_at
from workbench.competing.outcome import IncidenceCurves, make_competing_outcome
from workbench.competing.regression import expand_fine_gray, fit_fine_gray
from workbench.errors import MetricError, ModelError
from workbench.stats.coxph import fit_coxph


def test_cause_codes_must_be_whole_non_negative_numbers():
    with pytest.raises(MetricError, match="0 for censored, 1, 2, ... .*found -1"):
        make_competing_outcome([1.0, 2.0], [0, -1])
    with pytest.raises(MetricError, match="one cause code per patient"):
        make_competing_outcome([1.0, 2.0], [0])


def test_unknown_cause_is_named():
    res = aalen_johansen([1.0, 2.0, 3.0], [1, 0, 1])
    with pytest.raises(MetricError, match="cause 2 has no events.*causes seen are 1"):
        incidence_at(res, [1.5], cause=2)


def test_no_events_at_all():
    with pytest.raises(MetricError, match="no events of any cause"):
        aalen_johansen([1.0, 2.0], [0, 0])


def test_entry_must_precede_time():
    with pytest.raises(ModelError, match="entry time is not before the follow-up time in row 3"):
        fit_coxph(np.array([[0.0], [1.0]]), [2.0, 3.0], [1, 1], entry=[0.0, 3.0])


def test_fine_gray_needs_events_of_its_cause():
    y = make_competing_outcome([1.0, 2.0, 3.0], [2, 0, 2])
    with pytest.raises(ModelError, match="no events of cause 1"):
        expand_fine_gray(y, 1)
    with pytest.raises(ModelError, match="no events of cause 1"):
        fit_fine_gray(np.array([[0.0], [1.0], [0.5]]), y, 1)


def test_incidence_curves_shape_and_range():
    with pytest.raises(MetricError, match=r"expected \(n_samples, 2\)"):
        IncidenceCurves([1.0, 2.0], np.zeros((3, 3)))
    with pytest.raises(MetricError, match=r"lie in \[0, 1\]"):
        IncidenceCurves([1.0], [[1.5]])
    with pytest.raises(MetricError, match="before the first time"):
        IncidenceCurves([1.0], [[0.5]]).risk_at(0.5)


def test_expansion_rows_on_a_small_example():
    # Worked by hand: censorings at 2, 4 and 6, cause-1 events at 1 and 5, a competing event
    # at 1.5. Censoring Kaplan-Meier: at 2 four patients are at risk (times 2, 4, 5, 6), so
    # G(2) = 3/4; at 4 three (4, 5, 6), so G(4) = 3/4 * 2/3 = 1/2; G(1.5-) = 1. The competing
    # patient would stay on (1.5, 2], (2, 4], (4, 5] (5 = last cause-1 event) with weights
    # 1, 3/4 and 1/2; only (4, 5] holds a cause-1 event time, so only it is kept.
    y = make_competing_outcome([1.0, 1.5, 2.0, 4.0, 5.0, 6.0], [1, 2, 0, 0, 1, 0])
    rows = expand_fine_gray(y, 1)
    np.testing.assert_array_equal(rows.patient, [0, 1, 2, 3, 4, 5, 1])
    np.testing.assert_allclose(rows.start[6:], [4.0])
    np.testing.assert_allclose(rows.stop, [1.0, 1.5, 2.0, 4.0, 5.0, 6.0, 5.0])
    np.testing.assert_array_equal(rows.event, [True, False, False, False, True, False, False])
    np.testing.assert_allclose(rows.weight, [1, 1, 1, 1, 1, 1, 0.5], rtol=0, atol=1e-15)
