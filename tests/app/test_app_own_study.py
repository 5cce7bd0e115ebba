"""A new user's own study under AppTest: clean state after the demo, suggested roles, replaced uploads,
an external cohort added and removed, proposed horizons, messages for people.

The tables are split from GBSG2 as shipped with scikit-survival (see public_data.py).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from apphelpers import assert_clean
from public_data import gbsg2_frames

from workbench.app import messages, roles, state


def _csv(df: pd.DataFrame) -> bytes:
    return df.to_csv(index=False).encode()


@pytest.fixture(scope="module")
def frames():
    return gbsg2_frames()


def _own(new_app, features: pd.DataFrame, clinical: pd.DataFrame, confirm: bool = True):
    at = new_app().run()
    assert state.DEMO_NOTE == at.session_state[state.K_STUDY_NOTE]  # the demo comes first
    at.radio(key="data_source").set_value("upload").run()
    at.file_uploader(key="upload_features").set_value(("gbsg2_features.csv", _csv(features), "text/csv"))
    at.file_uploader(key="upload_clinical").set_value(("gbsg2_clinical.csv", _csv(clinical), "text/csv"))
    at = at.run()
    if confirm:
        at = at.button(key="map_confirm").click().run()
    return at


def _metric(at, label: str) -> str:
    return next(str(m.value) for m in at.metric if m.label == label)


def test_roles_guessed_from_names_and_types(frames):
    features, clinical = frames
    g = roles.guess_roles(clinical, features)
    assert (g.id, g.time, g.event, g.time_unit) == ("pid", "rfs_days", "status", "days")
    assert g.event_codes == ("recurred",) and g.censor_codes == ("event-free",)
    assert g.centre is None and g.batch is None
    assert roles.outcome_name(g.event, g.event_codes) == "recurrence"


def test_guesses_on_other_names():
    clin = pd.DataFrame({"Patient ID": ["a", "b", "c", "d", "e", "f"], "OS_months": [1, 5, 7, 9, 12, 30.0],
                         "vital_status": ["Dead", "Alive", "Dead", "Alive", "Alive", "Dead"],
                         "Hospital": list("xxyyzz"), "scanner_model": list("ppqqpq")})
    feats = pd.DataFrame({"Patient ID": list("abcdef"), "f1": np.arange(6.0)})
    g = roles.guess_roles(clin, feats)
    assert (g.id, g.time, g.event, g.time_unit) == ("Patient ID", "OS_months", "vital_status", "months")
    assert g.event_codes == ("Dead",) and g.censor_codes == ("Alive",)
    assert (g.centre, g.batch) == ("Hospital", "scanner_model")
    assert roles.outcome_name(g.event, g.event_codes) == "death"


def test_horizons_proposed_inside_follow_up(frames):
    _, clinical = frames
    t = clinical["rfs_days"].to_numpy()
    # Reference: the quartiles of GBSG2's recurrence-free times (numpy percentiles), 568 to 1685 days.
    hz = roles.propose_horizons(t, None, "days")
    assert hz == (730.0, 1095.0, 1460.0)
    assert all(np.percentile(t, 25) <= h <= np.percentile(t, 90) for h in hz)
    assert roles.propose_horizons(t / 365.25, None, "years") == (2.0, 3.0, 4.0)


def test_own_tables_start_a_clean_study(new_app, frames):
    at = _own(new_app, *frames)
    assert_clean(at)
    assert not at.error
    ss = at.session_state
    assert ss[state.K_STUDY] is None and not ss[state.K_STUDY_NOTE]
    data = ss[state.K_DATA]
    assert (data.id, data.time, data.event, data.time_unit) == ("pid", "rfs_days", "status", "days")
    assert data.event_codes == ("recurred",)
    # Reference: counts on the raw GBSG2 arrays of scikit-survival (686 patients, 299 recurrences).
    assert _metric(at, "Patients") == "686" and _metric(at, "Events") == "299"
    assert ss[state.K_HORIZONS] == (730.0, 1095.0, 1460.0)
    texts = " ".join(str(c.value) for c in at.caption)
    assert "demo" not in texts.lower()
    # Design: a new study, nothing of the demo in it
    at.switch_page("views/design.py").run()
    assert_clean(at)
    assert not at.error
    spec = at.session_state[state.K_STUDY]
    assert spec.name == "My study" and spec.external is None
    assert spec.horizons == (730.0, 1095.0, 1460.0)
    assert spec.imaging.include == ("*",) and spec.imaging.harmonise.protect == ()
    assert {p.column for p in spec.predictors} == {"age", "tsize", "pnodes"}
    assert any("Ready to run" in s.value for s in at.success)


def test_no_error_before_roles_are_confirmed(new_app, frames):
    at = _own(new_app, *frames, confirm=False)
    assert_clean(at)
    assert not at.error
    assert any("suggestions" in i.value for i in at.info)
    assert not at.metric


def test_replacing_an_upload_replaces_the_table(new_app, frames):
    features, clinical = frames
    at = _own(new_app, features, clinical)
    assert _metric(at, "Patients") == "686"
    first = at.session_state[state.K_DATA].clinical
    # the same file name, fewer patients: the new content must be analysed
    fewer = clinical.iloc[:400]
    at.file_uploader(key="upload_clinical").set_value(("gbsg2_clinical.csv", _csv(fewer), "text/csv"))
    at = at.run()
    at.checkbox(key="map_keep").check().run()
    if any(getattr(b, "key", None) == "map_confirm" for b in at.button):
        at = at.button(key="map_confirm").click().run()
    assert_clean(at)
    assert at.session_state[state.K_DATA].clinical != first
    assert _metric(at, "Patients") == "400"
    # Reference: recurrences among the first 400 rows of the raw table (pandas count).
    assert _metric(at, "Events") == str(int((fewer["status"] == "recurred").sum()))


def test_external_cohort_added_and_removed(new_app, frames):
    features, clinical = frames
    at = _own(new_app, features.iloc[:500], clinical.iloc[:500])
    at.switch_page("views/design.py").run()
    gen = at.session_state[state.K_DESIGN_GEN]
    at.file_uploader(key=f"design_ext_f{gen}").set_value(("ext_features.csv", _csv(features.iloc[500:]), "text/csv"))
    at.file_uploader(key=f"design_ext_c{gen}").set_value(("ext_clinical.csv", _csv(clinical.iloc[500:]), "text/csv"))
    at = at.run()
    at = at.button(key=f"design_external_add{gen}").click().run()
    assert_clean(at)
    spec = at.session_state[state.K_STUDY]
    assert spec.external is not None and spec.external.clinical.endswith("ext_clinical.csv")
    shown = state_text(at)
    assert 'clinical = "ext_clinical.csv"' in shown  # the study file names the file, not the private folder
    assert "workbench-upload" not in shown
    at = at.button(key=f"design_external_remove{gen}").click().run()
    assert_clean(at)
    assert at.session_state[state.K_STUDY].external is None


def state_text(at) -> str:
    return " ".join(str(c.value) for c in at.code)


def test_parser_internals_rewritten():
    m = messages.for_people("t.csv: could not be read (Error tokenizing data. C error: EOF inside string starting "
                            "at row 9)")
    assert "C error" not in m and "quotation mark" in m
    m = messages.for_people("t.csv ('utf-8' codec can't decode byte 0x89 in position 0: invalid start byte)")
    assert "codec" not in m and "UTF-8" in m
    assert "--event-codes" not in messages.for_people("give --event-codes dead")
    # markdown is shown as typed: '*' of a pattern and '__' of a name are escaped
    assert messages.plain("cm_* and __id__") == "cm\\_\\* and \\_\\_id\\_\\_"
    assert messages.plain("demo_cohort/clinical.csv") == "demo_cohort/clinical.csv"


@pytest.mark.slow
def test_patient_with_typed_signature_score(new_app, frames):
    """A new patient starts empty; with the signature score typed in, the estimate is the Cox formula.

    Reference: S(t | x) = S0(t) ** exp((x - x_mean) @ coef), evaluated here with numpy from the fitted
    model's coefficients and baseline (the form results.json documents), not through the estimate layer.
    """
    from dataclasses import replace

    from workbench.stats.coxph import baseline_survival_at

    at = _own(new_app, *frames)
    at.switch_page("views/design.py").run()
    spec = at.session_state[state.K_STUDY]
    penalty = replace(spec.imaging.penalty, rule="min")  # keep the receptors in the signature
    at.session_state[state.K_STUDY] = replace(spec, imaging=replace(spec.imaging, penalty=penalty))
    at.switch_page("views/results.py").run()
    at.number_input(key="results_replicates").set_value(2)
    at.number_input(key="results_workers").set_value(1)
    at = at.button(key="results_run").click().run()
    assert_clean(at)
    result = at.session_state[state.K_JOB].result
    model = result.models["combined"]
    at.switch_page("views/patient.py").run()
    assert_clean(at)
    tag = "combined_typed"
    boxes = {t.key: t for t in at.text_input}
    assert all(boxes[f"pt_{tag}_{c}"].value == "" for c in ("age", "tsize", "pnodes"))  # nobody's values
    score = 0.8
    for col, v in (("age", "45"), ("tsize", "40"), ("pnodes", "9")):
        boxes[f"pt_{tag}_{col}"].set_value(v)
    boxes[f"pt_{tag}_score"].set_value(str(score))
    at = next(b for b in at.button if b.label == "Estimate").click().run()
    assert_clean(at)
    assert not at.error, [e.value for e in at.error]
    fit = model.fit_
    x = np.array([45.0, 40.0, 9.0, score][: len(fit.names)])
    assert len(fit.names) == 4, fit.names  # three clinical terms and the signature score
    lp = float((x - np.asarray(fit.x_mean)) @ fit.coef)
    s = float(baseline_survival_at(fit, [730.0])[0]) ** np.exp(lp)
    shown = _metric(at, "Survival at 730 days")
    assert shown == f"{100 * s:.1f}%", (shown, s, fit.names)


def test_clinical_only_study_from_an_upload(new_app, frames):
    # Only the clinical table of GBSG2 (scikit-survival): no features upload, a clinical-only study.
    _, clinical = frames
    at = new_app().run()
    at.radio(key="data_source").set_value("upload").run()
    at.file_uploader(key="upload_clinical").set_value(("gbsg2_clinical.csv", _csv(clinical), "text/csv"))
    at = at.run()
    assert any("clinical-only" in str(c.value) for c in at.caption)
    at = at.button(key="map_confirm").click().run()
    assert_clean(at)
    assert not at.error
    data = at.session_state[state.K_DATA]
    assert data.features is None
    assert (data.id, data.time, data.event, data.time_unit) == ("pid", "rfs_days", "status", "days")
    # Reference: counts on the raw GBSG2 arrays of scikit-survival (686 patients, 299 recurrences).
    assert _metric(at, "Patients") == "686" and _metric(at, "Events") == "299"
    assert any("0 imaging features" in s.value for s in at.success)
    assert not any(getattr(c, "key", None) in ("map_keep", "map_drop") for c in at.checkbox)
    # Design: the clinical model is the only one offered, and the study is ready to run
    at.switch_page("views/design.py").run()
    assert_clean(at)
    assert not at.error
    spec = at.session_state[state.K_STUDY]
    assert spec.data.features is None and spec.models.fit == ("clinical",)
    assert any("Ready to run" in s.value for s in at.success)


def test_repeat_table_upload_reaches_the_study_and_its_filter(new_app, frames):
    from workbench.prepare import prepare_cohort

    features, clinical = frames
    # a second measurement of 30 patients (invented from GBSG2's own values): progesterone receptor
    # measured again almost exactly, oestrogen receptor with noise larger than its spread
    rng = np.random.default_rng(5)
    rep = features.iloc[:30].copy()
    rep["progrec"] = rep["progrec"] * (1 + rng.normal(0, 0.02, 30))
    rep["estrec"] = rng.permutation(rep["estrec"].to_numpy()) + rng.normal(0, 50, 30)
    at = new_app().run()
    at.radio(key="data_source").set_value("upload").run()
    at.file_uploader(key="upload_features").set_value(("gbsg2_features.csv", _csv(features), "text/csv"))
    at.file_uploader(key="upload_clinical").set_value(("gbsg2_clinical.csv", _csv(clinical), "text/csv"))
    at = at.run()
    at.file_uploader(key="upload_repeats").set_value(("gbsg2_repeats.csv", _csv(rep), "text/csv"))
    at = at.run().button(key="map_confirm").click().run()
    assert_clean(at)
    data = at.session_state[state.K_DATA]
    assert data.repeats and data.repeats.endswith("gbsg2_repeats.csv")
    at.switch_page("views/design.py").run()
    assert_clean(at)
    gen = at.session_state[state.K_DESIGN_GEN]
    assert at.number_input(key=f"design{gen}_minicc").value == 0.75
    spec = at.session_state[state.K_STUDY]
    prepared = prepare_cohort(spec)
    assert prepared.unreproducible == ("estrec",)
    assert list(prepared.cohort.features.columns) == ["progrec"]
