"""Patient flow, characteristics table and the reproduction appendix of the report.

The small simulated study of tests/conftest.py (invented data from the demo generator) and
the GBSG2 tables as shipped with scikit-survival (Schumacher et al. 1994). Numbers are
checked against pandas and lifelines where those can recompute them (named beside each
check); the appendix is checked by recomputing the combined model's predictions by hand
from the values it prints.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.figures.baseline import plot_baseline_survival
from workbench.figures.flow import FlowColumn, FlowExit, FlowStage, plot_patient_flow
from workbench.figures.legibility import legibility_problems
from workbench.report.appendix import appendix_context, baseline_curves
from workbench.report.characteristics import characteristics_table
from workbench.report.flow import flow_column, patient_flow


@pytest.fixture(scope="module")
def result(small_study_result):
    return small_study_result


def _texts(fig) -> list[str]:
    return [t.get_text() for ax in fig.axes for t in ax.texts]


# ------------------------------------------------------------------ patient flow


def test_flow_counts_are_the_run_records(result):
    (dev,) = patient_flow(result)
    assert dev.stages[0].n == result.prepared.n_read and dev.stages[-1].n == result.cohort.n
    assert dev.exits[-1].n == len(result.prepared.incomplete_ids) == dev.stages[0].n - dev.stages[-1].n
    assert f"{result.cohort.n_events} events" in dev.stages[-1].detail[0]
    from workbench.report.results import results_dict

    c = results_dict(result)["cohort"]
    assert c["n_without_imaging_row"] + c["n_without_clinical_row"] == c["n_ids_only_in_one_table"]


def test_flow_names_the_table_a_patient_was_missing_from(gbsg2_tables, gbsg2_columns):
    # GBSG2 (scikit-survival): 686 patients; 5 dropped from the imaging table, 2 from the clinical one
    from workbench.cohort.io import read_cohort
    from workbench.prepare import PreparedCohort

    pair = gbsg2_tables.write(gbsg2_tables.feat_df.iloc[5:], gbsg2_tables.clin_df.iloc[:-2])
    with pytest.warns(Warning, match="do not match"):
        c = read_cohort(pair.features, pair.clinical, gbsg2_columns, on_unmatched="intersect")
    assert len(c.source.only_in_clinical) == 5 and len(c.source.only_in_features) == 2
    prep = PreparedCohort(c, c.n, (), {}, (), ())
    col = flow_column(prep, "GBSG2", {}, "days")
    assert col.stages[0].n == 686 and col.stages[1].n == 679
    assert col.exits[0].reasons == (("no imaging row", 5), ("no clinical row", 2))


def test_flow_figure_draws_every_box_and_fits_both_widths(result):
    cols = patient_flow(result) + [FlowColumn(
        "External cohort", (FlowStage("Patients in either table", 130), FlowStage("Patients in both tables", 121),
                            FlowStage("Analysed", 118, ("80 events, 38 censored",))),
        (FlowExit("Not in both tables", 9, (("no imaging row", 9),)),
         FlowExit("Excluded, a complete-case predictor missing", 3, (("Stage missing", 3),))))]
    for width, mm in (("single", 85.0), ("double", 175.0)):
        fig = plot_patient_flow(cols, width=width)
        assert fig.get_figwidth() * 25.4 == pytest.approx(mm)
        assert legibility_problems(fig) == [], width
        text = " ".join(_texts(fig)).replace("\u00a0", " ")
        for col in cols:
            for s in col.stages:
                assert f"n = {s.n}" in text
        assert "no imaging row: 9" in text and "Stage missing: 3" in text
        boxes = [p for p in fig.axes[0].patches if type(p).__name__ == "FancyBboxPatch"]
        assert len(boxes) == sum(len(c.stages) + sum(e is not None for e in c.exits) for c in cols)


def test_flow_column_refuses_mismatched_exits():
    with pytest.raises(Exception, match="need 1 exits"):
        FlowColumn("x", (FlowStage("a", 2), FlowStage("b", 1)), ())


# ------------------------------------------------------------------ characteristics


def test_characteristics_by_centre(result):
    t = characteristics_table(result)
    c = result.cohort
    centres = sorted(set(map(str, c.centre)))
    assert t["columns"] == [f"Centre {k}" for k in centres] + ["Development, all"]
    assert t["caption"] == "Patient characteristics by centre"
    rows = {r["label"]: r["cells"] for r in t["rows"]}
    # reference: pandas counts per centre
    import pandas as pd

    counts = pd.Series(c.centre).astype(str).value_counts()
    assert rows["Patients"] == [str(counts[k]) for k in centres] + [str(c.n)]
    assert rows["Events (%)"][-1].startswith(f"{c.n_events} (")
    # reference: reverse Kaplan-Meier median follow-up with lifelines (censoring as the event)
    from lifelines import KaplanMeierFitter

    km = KaplanMeierFitter().fit(c.time, ~c.event)
    assert rows["Median follow-up, reverse Kaplan-Meier (months)"][-1] == f"{km.median_survival_time_:.1f}"
    assert rows["age, median (IQR)"][-1].startswith(f"{pd.to_numeric(c.clinical['age']).median():.3g} (")
    stage = pd.Series(c.clinical["stage"]).astype(str)
    i = [r["label"] for r in t["rows"]].index("stage, n (%)")
    level_rows = t["rows"][i + 1:i + 5]
    assert [r["label"] for r in level_rows] == ["I", "II", "III", "IV"]
    assert level_rows[0]["cells"][-1] == f"{(stage == 'I').sum()} ({100 * (stage == 'I').mean():.0f}%)"
    miss = int(c.clinical["ecog"].isna().sum())
    assert rows["ecog: missing, n (%)"][-1] == f"{miss} ({100 * miss / c.n:.0f}%)"


# ------------------------------------------------------------------ appendix


def test_appendix_values_reproduce_the_combined_prediction(result):
    """Recompute S(t | x) of the combined model from the printed values alone."""
    m = result.models["combined"]
    a = appendix_context(result)
    sig = a["signature"]
    cb = sig["combat"]
    cohort = result.cohort.take(list(range(8)))
    X = cohort.features[[r["feature"] for r in sig["rows"]]].to_numpy(float)
    design = m.transformer_.transform(cohort)
    names = list(m.transformer_.columns_)
    C = design.X[:, [names.index(n) for n in cb["covariates"]]]
    batch = np.asarray(cohort.batch).astype(str)
    score = np.zeros(cohort.n)
    for j, (r, cr) in enumerate(zip(sig["rows"], cb["rows"], strict=True)):
        stand = cr["grand_mean"] + C @ np.asarray(cr["covariate_coef"])
        s = cr["pooled_sd"]
        k = [cb["batches"].index(b) for b in batch]
        loc = np.array([cr["per_batch"][i][0] for i in k])
        scale = np.array([cr["per_batch"][i][1] for i in k])
        h = stand + s * ((X[:, j] - stand) / s - loc) / np.sqrt(scale)
        score += r["weight"] * (h - r["mean"]) / r["sd"]
    np.testing.assert_allclose(score, m.signature_score(cohort), atol=1e-10)
    d = result.models["combined"].fit_
    full = np.column_stack([design.X, score])
    lp = (full - np.asarray(d.x_mean)) @ np.asarray(d.coef)
    assert sig["signature_coef"] == pytest.approx(float(d.coef[-1]))
    rows = {r["time"]: r["cells"][1] for r in a["baseline"]["rows"]}
    s0 = np.array([rows[12.0], rows[24.0]])
    by_hand = s0[None, :] ** np.exp(lp)[:, None]
    np.testing.assert_allclose(by_hand, m.predict_survival(cohort, (12.0, 24.0)).probs, atol=1e-10)


def test_baseline_curve_is_the_whole_step_function(result):
    from workbench.report.results import results_dict

    curves = baseline_curves(result)
    # every Cox model of the run, the clinical + volume comparison model included
    assert set(curves) == {k for k, m in result.models.items() if hasattr(m, "fit_")}
    assert {"clinical", "combined"} <= set(curves)
    d = results_dict(result)
    for k, (t, s) in curves.items():
        fit = result.models[k].fit_
        assert t.size == np.unique(result.cohort.time[result.cohort.event]).size
        assert np.all(np.diff(s) <= 0) and s[0] < 1
        assert d["models"][k]["baseline_survival"]["curve"]["times"] == pytest.approx(list(t))
        np.testing.assert_allclose(d["models"][k]["baseline_survival"]["curve"]["survival"], np.exp(-fit.baseline_cumhaz))
    for width in ("single", "double"):
        fig = plot_baseline_survival(curves, horizons=(12, 24), time_unit="months", width=width)
        assert legibility_problems(fig) == [], width
        lines = [ln for ln in fig.axes[0].lines if ln.get_label() in curves]
        assert len(lines) == len(curves)
        x, y = lines[0].get_data()
        assert x[0] == 0 and y[0] == 1.0 and y[-1] == pytest.approx(curves["clinical"][1][-1])
        assert [float(v) for v in fig.axes[0].get_xticks()][:3] == [0.0, 12.0, 24.0]


def test_appendix_names_only_the_whole_pool_models_that_were_fitted(result):
    # A study of the clinical and combined models alone (the Rossi data split by
    # examples/public_tables.py) had read "the penalised model ... and the random survival forest use
    # every feature of the pool; their ComBat parameters ..." with neither fitted nor ComBat used.
    from dataclasses import replace

    from workbench.report.appendix import wide_models_note

    note = wide_models_note(result)
    fitted = [k for k in ("penalised_all", "forest") if k in result.models]
    assert (note is None) == (not fitted)
    two = replace(result, models={k: v for k, v in result.models.items() if k in ("clinical", "combined")})
    assert wide_models_note(two) is None
    forest_only = replace(result, models={"clinical": result.models["clinical"], "forest": object()})
    text = wide_models_note(forest_only)
    assert text.startswith("The random survival forest uses every feature of the pool; its ")
    assert "fitted trees" in text and "coefficients" not in text
    assert ("ComBat" in text) == (result.spec.imaging.harmonise.method != "none")


def test_results_json_keeps_the_reason_of_every_failed_replicate(result):
    # The validation note points to the reasons; results.json once kept only the counts.
    import json
    from dataclasses import replace

    from workbench.report.results import results_dict
    from workbench.validation.results import ReplicateFailure

    fail = ReplicateFailure("combined", 7, None, "fit", "the penalised path did not converge")
    v = replace(result.validation, failure_log=(fail,), failures={**result.validation.failures, "combined": 1})
    d = json.loads(json.dumps(results_dict(replace(result, validation=v))))
    assert d["validation"]["failure_log"] == [{"model": "combined", "replicate": 7, "fold": None, "stage": "fit",
                                               "message": "the penalised path did not converge"}]
    assert d["validation"]["failures"]["combined"] == 1
