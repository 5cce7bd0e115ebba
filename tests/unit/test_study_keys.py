"""Study-file keys for studies not shaped like the demo, and the helpers behind them.

Data: the German Breast Cancer Study Group 2 tables of tests/conftest.py (scikit-survival).
"""

from __future__ import annotations

import re
import warnings

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest

from workbench.cohort.codes import code_order, code_text
from workbench.errors import EmptySignatureWarning, SpecError
from workbench.figures.signature import plot_selection_frequency
from workbench.models.labels import equal_models, model_labels, warn_empty_signatures
from workbench.report.naming import coefficient_rows, hazard_ratio_frame, ph_frame
from workbench.study import dumps_study, study_from_dict

BASE = {
    "study": {"name": "keys", "horizons": [365, 730]},
    "data": {"features": "f.csv", "clinical": "c.csv", "time": "time_days", "event": "status", "time_unit": "days"},
    "predictor": [{"column": "tgrade", "kind": "categorical"}],
}


def _doc(**sections):
    doc = {k: dict(v) if isinstance(v, dict) else v for k, v in BASE.items()}
    for k, v in sections.items():
        doc[k] = {**doc.get(k, {}), **v}
    return doc


def test_harmonisation_defaults_to_none_without_a_batch_column():
    spec = study_from_dict(_doc())
    assert spec.imaging.harmonise.method == "none"
    with_batch = study_from_dict(_doc(data={"batch": "menostat"}))
    assert with_batch.imaging.harmonise.method == "combat"
    # written explicitly without a batch column it is still refused, with the way out named
    with pytest.raises(SpecError, match="names no batch column"):
        study_from_dict(_doc(imaging={"harmonise": {"method": "combat"}}))


def test_clinical_only_study_reads_writes_and_refuses_imaging_models():
    doc = _doc()
    doc["data"] = {k: v for k, v in doc["data"].items() if k != "features"}
    spec = study_from_dict(doc)
    assert spec.data.features is None and spec.models.fit == ("clinical",)
    assert "\nfeatures =" not in dumps_study(spec)
    assert study_from_dict(__import__("tomllib").loads(dumps_study(spec))) == spec
    with pytest.raises(SpecError, match="no imaging table .* 'combined'"):
        study_from_dict({**doc, "models": {"fit": ["clinical", "combined"]}})
    with pytest.raises(SpecError, match="volume_feature"):
        study_from_dict({**doc, "imaging": {"volume_feature": "tsize"}})


def test_uno_tau_key_is_checked():
    assert study_from_dict(_doc(validation={"uno_tau": 500})).validation.tau == 500.0
    assert study_from_dict(_doc()).validation.tau is None
    for bad in (-1, 0):
        with pytest.raises(SpecError, match="uno_tau must be a positive number"):
            study_from_dict(_doc(validation={"uno_tau": bad}))
    # wrong types are caught by the study-file type check first, naming key, type and value
    for bad, found in (("late", "found 'late' (text)"), (True, "found True (true/false)")):
        with pytest.raises(SpecError, match="uno_tau must be a number.*" + re.escape(found)):
            study_from_dict(_doc(validation={"uno_tau": bad}))


def test_uno_tau_outside_follow_up_stops_the_run(tmp_path, gbsg2_tables):
    from workbench.cohort.io import ColumnMap, read_cohort
    from workbench.workflow import check_uno_tau

    cols = ColumnMap(id="patient_id", time="time_days", event="status", time_unit="days",
                     event_codes=("recurrence",), censor_codes=("censored",))
    cohort = read_cohort(gbsg2_tables.features, gbsg2_tables.clinical, cols)
    check_uno_tau(1000.0, cohort, (365.0, 730.0))  # inside follow-up: no error
    with pytest.raises(SpecError, match=r"uno_tau = 99999 days lies outside the follow-up .* up to 2659 days"):
        check_uno_tau(99999.0, cohort, (365.0, 730.0))


def test_uno_tau_truncates_unos_c(tmp_path):
    """A different tau changes Uno's C as scikit-survival's concordance_index_ipcw does (reference library)."""
    from sksurv.datasets import load_gbsg2
    from sksurv.metrics import concordance_index_ipcw

    from workbench.cohort import make_outcome
    from workbench.metrics.concordance import uno_c
    from workbench.predictions import RiskScores

    X, y = load_gbsg2()
    risk = X["pnodes"].to_numpy(float)
    ours_y = make_outcome(y["time"], y["cens"])
    got = []
    for tau in (730.0, 1500.0):
        ours = uno_c(ours_y, ours_y, RiskScores(risk), tau=tau).c_index
        ref = concordance_index_ipcw(y, y, risk, tau=tau)[0]
        # tied follow-up times: the censoring-weight convention moves C by up to 2e-4 (see
        # tests/reference/test_discrimination_reference.py, which matches to 1e-10 once untied)
        assert ours == pytest.approx(ref, abs=2e-4)
        got.append(ours)
    assert abs(got[0] - got[1]) > 1e-3, "the truncation time must change Uno's C here"


def test_code_text_keeps_codes_as_written_and_orders_numbers_by_value():
    assert list(code_text(pd.Series([1.0, 10.0, 2.0]))) == ["1", "10", "2"]
    assert list(code_text(pd.Series(["1", "10.0", " A "]))) == ["1", "10", "A"]
    assert list(code_text(pd.Series([1.5, 2.0]))) == ["1.5", "2"]
    assert code_order(["10", "2", "1", "2"]) == ["1", "2", "10"]
    assert code_order(["B", "a10", "A"]) == ["A", "B", "a10"]


def test_selection_frequency_with_nothing_selected_draws_a_note():
    for freq in ({}, {"a": 0.0, "b": 0.0}):
        fig = plot_selection_frequency(freq, n_replicates=5, title="empty")
        texts = [t.get_text() for t in fig.axes[0].texts]
        assert texts == ["No imaging feature was kept in any of 5 resamples."]
        plt.close(fig)
    with pytest.raises(SpecError):
        plot_selection_frequency(None)


class _Sig:
    def __init__(self, kept):
        self.selected_features_ = tuple(kept)


class _Combined:
    def __init__(self, kept):
        self.signature_ = _Sig(kept)
        self.selected_features_ = tuple(kept)


def test_empty_signature_labels_and_warning():
    empty = {"clinical": object(), "combined": _Combined(())}
    assert equal_models(empty) == {"combined": "clinical"}
    assert model_labels(empty)["combined"].endswith("(equal to the clinical model)")
    assert equal_models({"clinical": object(), "combined": _Combined(("f1",))}) == {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        warn_empty_signatures(empty)
    assert [w.category for w in caught] == [EmptySignatureWarning]
    assert "equal to the clinical model" in str(caught[0].message)


def test_naming_scheme_translation():
    rows = coefficient_rows([{"term": "stage", "column": "stage=III", "coef": 0.5}])
    assert rows == [{"term": "stage", "design_column": "stage=III", "coef": 0.5}]
    hr = pd.DataFrame({"column": ["age", "stage"], "design_columns": [("age",), ("stage=II", "stage=III")]})
    js = hazard_ratio_frame(hr)
    assert list(js.columns) == ["term", "design_columns"] and js["design_columns"][1] == ["stage=II", "stage=III"]
    csv = hazard_ratio_frame(hr, for_csv=True)
    assert list(csv["design_columns"]) == ["age", "stage=II; stage=III"]
    ph = ph_frame(pd.DataFrame({"term": ["age", "GLOBAL"], "p_value": [0.1, np.nan]}))
    assert list(ph.columns) == ["design_column", "p_value"]


def test_min_at_risk_key_default_round_trip_and_checks():
    spec = study_from_dict(_doc())
    assert spec.figures.min_at_risk == 10  # common practice
    spec = study_from_dict(_doc(figures={"min_at_risk": 20}))
    assert spec.figures.min_at_risk == 20
    assert study_from_dict(__import__("tomllib").loads(dumps_study(spec))) == spec
    with pytest.raises(SpecError, match=r"\[figures\] min_at_risk must be at least 1"):
        study_from_dict(_doc(figures={"min_at_risk": 0}))
    with pytest.raises(SpecError, match="min_at_risk must be a whole number"):
        study_from_dict(_doc(figures={"min_at_risk": "ten"}))
    with pytest.raises(SpecError, match="Did you mean 'min_at_risk'"):
        study_from_dict(_doc(figures={"min_at_risks": 5}))
