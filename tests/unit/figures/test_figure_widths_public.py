"""The width test on public data: every standard figure and the patient nomogram stay readable.

The demo (invented data) is one cohort; real tables bring other axis ranges, short axes, medians
beyond the follow-up and curves that fall to zero. Here the Veterans' Administration lung cancer
trial and the German Breast Cancer Study Group 2 data (both shipped with scikit-survival, split into
the two tables by ``examples/public_tables.py``) are run with the smallest settings, and every
figure of ``study_figures`` plus the patient nomogram of a typical patient (the middle linear
predictor) and the two extremes (highest and lowest) is checked at 85 mm and 175 mm with
``legibility_problems``. A user trial on these data found a patient's mark covering the "> 2000"
end note of the median-survival axis (GBSG2), the grey strip's median mark on the short age axis's
lower tick label and the baseline-survival legend on the curves (veterans).
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pytest

from workbench.errors import WorkbenchWarning
from workbench.figures import patient_values, plot_nomogram
from workbench.figures.legibility import legibility_problems
from workbench.figures.nomogram_points import nomogram_scales
from workbench.models.registry import MODEL_LABELS
from workbench.report.figureset import nomogram_figure, study_figures
from workbench.study import read_study
from workbench.workflow import run_study


def _run(public_tables, tmp_path, name):
    feats, clin, settings = public_tables.load_public(name)
    feats.to_csv(tmp_path / "features.csv", index=False)
    clin.to_csv(tmp_path / "clinical.csv", index=False)
    (tmp_path / "study.toml").write_text(public_tables.study_text(name, settings), encoding="utf-8")
    spec = read_study(tmp_path / "study.toml")
    spec = replace(
        spec,
        models=replace(spec.models, forest=replace(spec.models.forest, trees=20)),
        imaging=replace(spec.imaging, penalty=replace(spec.imaging.penalty, n_alphas=30)),
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        return run_study(spec, replicates=2, permutations=0)  # no figure draws the added-value test


@pytest.fixture(scope="module", params=["veterans", "gbsg2"])
def public_result(request, public_tables, tmp_path_factory):
    return _run(public_tables, tmp_path_factory.mktemp(request.param), request.param)


def _patient_figures(result, width) -> dict:
    train = result.cohort
    sig = result.models["combined"].signature_score(train)
    lp = result.models["combined"].predict_risk(train).values
    picks = {"typical": int(np.argsort(lp)[lp.size // 2]), "highest": int(np.argmax(lp)),
             "lowest": int(np.argmin(lp))}
    scales = nomogram_scales(result.models["combined"], tuple(result.spec.horizons), signature_scores=sig,
                             time_unit=train.time_unit, median_axis=True, name=MODEL_LABELS["combined"])
    figs = {}
    for kind, i in picks.items():
        values = patient_values(train, i, sig)
        # as the report and the command line draw it (both models, with the intervals) ...
        figs[f"nomogram_patient_{kind}"] = nomogram_figure(result, patient=values, width=width,
                                                           patient_row=(train, i))
        # ... and as the app's Patient view draws it (one model)
        figs[f"one_model_patient_{kind}"] = plot_nomogram([scales], patient=values,
                                                          titles=[MODEL_LABELS["combined"]], width=width)
    return figs


@pytest.mark.slow
@pytest.mark.parametrize("width", ["single", "double"])
def test_every_figure_is_readable_on_public_data(public_result, width):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        figs = study_figures(public_result, width=width)
        figs.update(_patient_figures(public_result, width))
    assert {"nomogram", "coefficient_path", "baseline_survival", "calibration"} <= set(figs)
    found = {name: legibility_problems(fig) for name, fig in figs.items()}
    bad = {k: v for k, v in found.items() if v}
    assert not bad, f"{public_result.spec.name} at {width} width: {bad}"


@pytest.mark.slow
def test_a_patient_mark_on_the_median_axis_leaves_its_open_end_note_readable(public_result):
    # A patient whose median lies beyond the follow-up is marked on the median row left of the
    # axis, where the "> longest median" note of the open end is: the mark is put right on the
    # note's place (the patient's read-offs stay as computed; only the sum moves), and the note must
    # stay clear of it. GBSG2's median axis has an open end ("> 2000" days).
    from workbench.figures.nomogram_points import points_for_patient

    train = public_result.cohort
    sig = public_result.models["combined"].signature_score(train)
    scales = nomogram_scales(public_result.models["clinical"], tuple(public_result.spec.horizons),
                             time_unit=train.time_unit, median_axis=True, name=MODEL_LABELS["clinical"])
    longest = max(scales.median.ticks, key=lambda k: k.value)
    start = longest.points * 100.0 / scales.total_axis_max  # where the median axis starts, 0-100
    if public_result.spec.name.startswith("gbsg2"):
        assert start > 15  # the open end has room before the row name, so its note is drawn
    elif start <= 15:
        # veterans: the median axis starts at the left edge, so no open-end note is drawn at all
        fig = plot_nomogram([scales], width="single")
        assert not [t for t in fig.axes[0].texts if t.get_text() == f"> {longest.label}"]
        return
    pp = points_for_patient(scales, patient_values(train, 0, sig))
    for shift in (1.5, 3.0, 4.5, 6.0, 8.0):  # the whole width the note took before
        mark = replace(pp, total=(start - shift) * scales.total_axis_max / 100.0)
        for width in ("single", "double"):
            fig = plot_nomogram([scales], patient=[mark], width=width)
            notes = [t for t in fig.axes[0].texts if t.get_text() == f"> {longest.label}"]
            assert len(notes) == 1
            probs = [p for p in legibility_problems(fig) if f"> {longest.label}" in p]
            assert probs == [], (shift, width)


def test_baseline_legend_stays_off_curves_that_fall_to_zero():
    # veterans-like baseline curves: survival near zero from a third of the follow-up on, so the
    # lower left corner that held the legend at double width is full of curve
    from workbench.figures.baseline import plot_baseline_survival

    t = np.linspace(1.0, 1000.0, 300)
    curves = {"Clinical Cox": (t, np.exp(-t / 90.0)), "Clinical + imaging signature": (t, np.exp(-t / 80.0))}
    for width in ("single", "double"):
        fig = plot_baseline_survival(curves, horizons=(90, 180, 365), time_unit="days", width=width)
        assert legibility_problems(fig) == [], width


@pytest.mark.slow
def test_coefficient_path_with_long_radiomic_names_is_readable(public_result):
    # Radiomic feature names run to 40 characters and more (e.g. the image biomarker
    # standardisation initiative's long names); on one line they took the path panel's width at
    # 85 mm and its penalty labels ran together. The path drawn is the study's own; only the
    # names are made long.
    from workbench.figures import plot_coefficient_path

    path = public_result.models["combined"].signature_.path_
    long = tuple(f"wavelet_LLH_glszm_GrayLevelNonUniformityNormalized_{i}" for i in range(len(path.feature_names)))
    for width in ("single", "double"):
        fig = plot_coefficient_path(replace(path, feature_names=long), title="Imaging signature: penalised path",
                                    width=width)
        assert legibility_problems(fig) == [], width
        # the numbers drawn are the path's own: each active feature's line is its coefficient row
        lines = {ln.get_gid(): ln for ln in fig.axes[0].lines if (ln.get_gid() or "").startswith("path:")}
        active = np.flatnonzero(np.any(path.coefs != 0, axis=1))
        assert len(lines) == active.size >= 2
        for j in active:
            np.testing.assert_array_equal(lines[f"path:{long[j]}"].get_ydata(), path.coefs[j])


@pytest.mark.slow
def test_the_reading_line_does_not_strike_through_tick_labels(public_result):
    # The patient's dashed reading line runs down through the sum, survival and median axes; where
    # it crosses a tick label ("0.6") the label must stay whole: no pixel of the line's colour inside
    # the label's box (the patient's marks keep clear of labels, which the width test checks).
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import to_rgb

    from workbench.figures.legibility import drawn_texts
    from workbench.figures.nomogram_painter import PATIENT_COLOUR

    train = public_result.cohort
    lp = public_result.models["clinical"].predict_risk(train).values
    scales = nomogram_scales(public_result.models["clinical"], tuple(public_result.spec.horizons),
                             time_unit=train.time_unit, median_axis=True, name=MODEL_LABELS["clinical"])
    crossed = 0
    for i in (int(np.argsort(lp)[lp.size // 2]), int(np.argsort(lp)[lp.size // 4])):
        fig = plot_nomogram([scales], patient=patient_values(train, i), width="double")
        fig.set_dpi(200)
        canvas = FigureCanvasAgg(fig)
        canvas.draw()
        img = np.asarray(canvas.buffer_rgba())[:, :, :3].astype(float) / 255.0
        line = next(ln for ln in fig.axes[0].lines if ln.get_gid() == "reading_line")
        x_px = line.get_transform().transform([[line.get_xdata()[0], line.get_ydata()[0]]])[0, 0]
        target = np.array(to_rgb(PATIENT_COLOUR))
        h = img.shape[0]
        for t, bb in drawn_texts(fig):
            if not (bb.x0 < x_px < bb.x1) or t.get_color() == PATIENT_COLOUR or t.axes is None:
                continue
            box = img[int(h - bb.y1) + 1:int(h - bb.y0) - 1, int(bb.x0) + 1:int(bb.x1) - 1]
            if box.size == 0:
                continue
            crossed += 1
            near = np.linalg.norm(box - target, axis=2) < 0.25
            assert not near.any(), f"the reading line strikes through {t.get_text()!r}"
    assert crossed >= 1  # the line does cross labels in these patients
