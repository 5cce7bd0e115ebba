"""Studies not shaped like the demo, through the app under AppTest.

Public datasets split into a features and a clinical table by examples/public_tables.py
(Rossi recidivism data from lifelines; German Breast Cancer Study Group 2 and the
Veterans' Administration lung cancer trial from scikit-survival): a clinical-only study, a
study whose signature keeps no feature with method "none", a study without volume feature,
batch or centre, and cross-validation on a small cohort. Each is run on the
Results page and every later view is opened; none may show an exception or a traceback.
"""

from __future__ import annotations

import importlib.util

import pytest
from apphelpers import APP_MAIN, REPO, assert_clean, page_texts, static_tables

from workbench.app import state
from workbench.study import study_from_dict

pytestmark = pytest.mark.slow  # four small study runs in the app: about a minute


def _tables(name: str, tmp_path, n: int = 200):
    spec = importlib.util.spec_from_file_location("public_tables", REPO / "examples" / "public_tables.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    feats, clin, settings = mod.load_public(name)
    feats.iloc[:n].to_csv(tmp_path / "features.csv", index=False)
    clin.iloc[:n].to_csv(tmp_path / "clinical.csv", index=False)
    return settings


def _spec(tmp_path, name, *, features=True, **sections):
    s = _tables(name, tmp_path)
    data = {"clinical": str(tmp_path / "clinical.csv"), "time": s.get("time", "time"),
            "event": s.get("event", "event"), "time_unit": s["time_unit"]}
    if features:
        data["features"] = str(tmp_path / "features.csv")
    doc = {"study": {"name": f"{name} in the app", "horizons": s["horizons"], "seed": 3}, "data": data,
           "predictor": s["predictors"],
           # the smallest settings that run every step (study defaults: a 100 x 10 two-stage
           # interval and 199 permutations of the signature in 5 folds)
           "validation": {"replicates": 2, "backend": "serial", "outer_replicates": 10, "inner_replicates": 1},
           "added_value": {"permutations": 9, "folds": 3}, **sections}
    return study_from_dict(doc)


CASES = {
    "clinical_only": lambda p: _spec(p, "rossi", features=False),
    "empty_signature_apparent_only": lambda p: _spec(
        p, "rossi", imaging={"reduce": {"screen": True, "screen_fdr": 1e-9}},
        validation={"method": "none", "backend": "serial"}),  # replaces the whole [validation]
    "no_volume_batch_centre": lambda p: _spec(p, "gbsg2"),
    "cross_validation_small_cohort": lambda p: _spec(
        p, "veterans", validation={"method": "cv", "folds": 3, "repeats": 1, "backend": "serial",
                                   "outer_replicates": 10, "inner_replicates": 1}),
}


@pytest.mark.parametrize("case", list(CASES))
def test_study_runs_and_every_view_opens(case, tmp_path):
    from streamlit.testing.v1 import AppTest

    spec = CASES[case](tmp_path)
    at = AppTest.from_file(str(APP_MAIN), default_timeout=600).run()
    at.session_state[state.K_STUDY] = spec
    at.switch_page("views/results.py").run()
    at.number_input(key="results_workers").set_value(1)
    at.button(key="results_run").click().run()
    assert_clean(at)
    assert any("Finished in" in s.value for s in at.success), page_texts(at)[:20]
    if case == "empty_signature_apparent_only":
        done = next(s.value for s in at.success if "Finished in" in s.value)
        assert "apparent performance only" in done and "0 replicates" not in done
        # the Results tables name the combined model as the clinical one too (it was only said elsewhere)
        heads = [c for t in static_tables(at) for c in t.columns]
        assert any("equal to the clinical model" in c for c in heads), heads
    for view in ("signature", "nomogram", "patient", "export"):
        at.switch_page(f"views/{view}.py").run()
        assert_clean(at)
    if case == "empty_signature_apparent_only":
        at.switch_page("views/signature.py").run()
        assert any("equal to the clinical model" in t for t in page_texts(at))
