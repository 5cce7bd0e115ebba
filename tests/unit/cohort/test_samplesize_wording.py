"""The sample-size criteria are printed in plain words, one row per criterion, with the same numbers."""

from __future__ import annotations

from workbench.cohort.samplesize import criteria_rows, minimum_sample_size


def test_criteria_rows_carry_the_criteria_numbers_in_plain_words():
    ss = minimum_sample_size(n_parameters=10, n=400, n_events=150, person_time=400 * 24.0, r2_cs=0.15,
                             horizon=24.0)
    rows = criteria_rows(ss, "months")
    assert [n for _, n in rows] == [ss.n_shrinkage, ss.n_optimism, ss.n_overall_risk, ss.n_required]
    assert rows[0][0] == "fitted effects need shrinking by at most 10%"
    assert rows[2][0] == "risk at 24 months estimated to within 0.05 either way"
    assert rows[-1][0].startswith("patients needed")
    text = " ".join(w for w, _ in rows)
    assert "(i)" not in text and "Required" not in text
    no_horizon = minimum_sample_size(n_parameters=10, n=400, n_events=150, person_time=9600.0, r2_cs=0.15)
    assert len(criteria_rows(no_horizon)) == 3
