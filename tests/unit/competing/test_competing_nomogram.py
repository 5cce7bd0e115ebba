"""The Fine-Gray nomogram reads the model's own cumulative incidence.

Public data: scikit-survival's ``load_cgvhd`` (cause 1 against causes 2 and 3), as a
clinical-only competing study. The nomogram's arithmetic is the Cox nomogram's, applied
to the complement of the cumulative incidence; every reading must equal the fitted
model's predicted incidence (workbench.competing.regression.predict_incidence_fine_gray,
itself checked against an IPCW-weighted lifelines fit in tests/reference).
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.competing.analysis import run_competing
from workbench.competing.nomogram import incidence_nomogram_scales
from workbench.figures.nomogram import plot_nomogram
from workbench.figures.nomogram_points import patient_values, points_for_patient, points_table
from workbench.study import study_from_dict


@pytest.fixture(scope="module")
def cgvhd(cgvhd_study):
    folder, doc, _ = cgvhd_study
    result = run_competing(study_from_dict(doc, base=folder), replicates=0)
    arm = result.arms[("cause", "clinical")]
    sc = incidence_nomogram_scales(arm, result.cohort, result.horizons, cause_label="relapse", time_unit="years",
                                   name="Clinical, Fine-Gray")
    return result, arm, sc


def test_reading_a_patient_gives_the_models_cumulative_incidence(cgvhd):
    result, arm, sc = cgvhd
    cohort = result.cohort
    risk = arm.predict(cohort, result.horizons, "fine_gray").risks
    for i in range(cohort.n):
        pp = points_for_patient(sc, patient_values(cohort, i))
        got = [sc.read_off(pp.survival[h]) for h in result.horizons]
        np.testing.assert_allclose(got, risk[i], rtol=0, atol=1e-10, err_msg=f"patient {i}")
    assert np.ptp(risk[:, 0]) > 0.05  # the patients' risks differ, so the check has something to compare


def test_risk_axes_and_table_are_labelled_and_valued_as_risks(cgvhd):
    result, _, sc = cgvhd
    for s in sc.survival:
        assert s.ticks
        for k in s.ticks:  # a tick's label is the risk, 1 - the survival at its position
            assert float(k.label) == pytest.approx(1.0 - s.survival(k.points), abs=5e-3)
    table = points_table(sc)
    assert [c for c in table.survival.columns if c.startswith("risk_")] == ["risk_0.45", "risk_0.65"]
    tot = table.survival["total_points"].to_numpy()
    np.testing.assert_allclose(table.survival["risk_0.45"], 1.0 - sc.survival_scale(0.45).survival(tot), atol=1e-12)
    fig = plot_nomogram(sc, width="single")
    labels = {t.get_text().replace("\n", " ") for t in fig.axes[0].texts}
    assert "0.45-year risk" in labels and not any("survival" in t.lower() for t in labels)
    assert any("the chance that relapse has occurred by each horizon" in t for t in labels)


def test_a_risk_nomogram_has_no_median_survival_axis(cgvhd):
    from workbench.errors import SpecError
    from workbench.figures.nomogram_points import nomogram_scales

    _, arm, sc = cgvhd
    from workbench.competing.nomogram import _FineGrayView

    view = _FineGrayView(arm.fine_gray.cox, arm.transformer, "x")
    with pytest.raises(SpecError, match="no median-survival axis"):
        nomogram_scales(view, (0.45,), median_axis=True, risk_of="relapse")
