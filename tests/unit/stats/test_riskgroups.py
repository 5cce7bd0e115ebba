"""The one risk-group rule: cut-points from training rows, a score on a cut-point joins the lower group.

Reference: numpy.quantile (linear interpolation) for the cut-points; the
assignment is checked by hand on scores placed exactly on the cut-points, and the
same patient is put in the same group by the figure helper, the bundle's
external table (``workbench.external._risk_group``) and the patient estimate rule.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.errors import SpecError
from workbench.external import _risk_group
from workbench.figures.grouping import risk_groups
from workbench.stats.riskgroups import assign_groups, group_labels, learn_cutpoints


def test_cutpoints_are_training_quantiles_for_any_number_of_groups():
    train = np.random.default_rng(0).normal(size=301)
    for k in (2, 3, 4, 5, 7):
        cuts = learn_cutpoints(train, k)
        np.testing.assert_allclose(cuts, np.quantile(train, np.arange(1, k) / k), rtol=0, atol=0)
        assert len(group_labels(k)) == k
    np.testing.assert_allclose(learn_cutpoints(train, "tertiles"), learn_cutpoints(train, 3))
    with pytest.raises(SpecError, match="at least 2 groups"):
        learn_cutpoints(train, 1)
    with pytest.raises(SpecError, match="too many ties"):
        learn_cutpoints(np.r_[np.zeros(50), 1.0], 4)


def test_a_score_on_a_cut_point_gets_the_same_lower_group_on_every_route():
    train = np.arange(1.0, 10.0)  # tertile cut-points 11/3 and 19/3
    cuts = learn_cutpoints(train, 3)
    on = np.array([cuts[0], cuts[1], cuts[0] - 1e-9, cuts[1] + 1e-9, 0.0, 100.0])
    expected = np.array([0, 1, 0, 2, 0, 2])
    np.testing.assert_array_equal(assign_groups(on, cuts), expected)
    # figures
    np.testing.assert_array_equal(risk_groups(train, on, "tertiles").groups, expected)
    # apply's predictions table (bundle cut-points)
    names = np.asarray(group_labels(3), dtype=object)
    np.testing.assert_array_equal(_risk_group(on, tuple(cuts)), names[expected])
    # five groups too
    cuts5 = learn_cutpoints(train, 5)
    assert list(_risk_group(cuts5, tuple(cuts5))) == list(group_labels(5)[:4])
