"""Final-signature features kept by fewer than half of the refits are flagged as unstable."""

import numpy as np

from workbench.validation.results import UNSTABLE_BELOW, SelectionSummary


def test_unstable_features_are_those_of_the_final_signature_below_one_half():
    s = SelectionSummary("combined", 20, {"a": 0.9, "b": 0.45, "c": 0.2, "d": 0.5}, np.full(20, 2), ("a", "b", "d"))
    assert UNSTABLE_BELOW == 0.5
    # c is rare but not in the final signature; d sits exactly at one half and is kept
    assert s.unstable == ("b",)
    frame = s.to_frame()
    assert frame.loc[frame.feature == "b", "in_apparent_fit"].item()


def test_no_refits_flag_nothing():
    assert SelectionSummary("combined", 0, {}, np.array([], dtype=int), ("a",)).unstable == ()
