"""Every standard figure is readable at a single (85 mm) and a double (175 mm) journal column.

Each figure of ``workbench.report.figureset`` (and the nomogram with a patient overlay) is
drawn at both widths and measured with the Agg renderer at the export resolution
(``legibility_problems``): no two drawn texts overlap, no text reaches outside the figure,
no data panel is squeezed below 12 mm and no legend sits on the data. The demo study
(invented data) is run with two bootstrap replicates and a small forest: enough for every
figure to exist, the numbers themselves do not matter here.

The checker itself is tested on figures built to fail: overlapping labels, a label beyond
the edge, a legend placed on a curve and a panel squeezed to nothing.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure

from workbench.errors import WorkbenchWarning
from workbench.figures import patient_values
from workbench.figures.legibility import legibility_problems
from workbench.report.figureset import (
    nomogram_figure,
    patient_notes,
    showcase_patients,
    study_figures,
)
from workbench.study import read_study
from workbench.workflow import run_study

STUDY = Path(__file__).parents[3] / "demo_cohort" / "study.toml"

EXPECTED = {"nomogram", "km_risk_groups", "td_auc", "calibration", "decision_curve", "hazard_ratios_clinical",
            "hazard_ratios_combined", "selection_frequency", "coefficient_path", "ph_clinical", "ph_combined",
            "difference_curves", "site_calibration", "patient_flow", "baseline_survival", "harmonisation_checks",
            "conditional_survival"}


@pytest.fixture(scope="module")
def demo_result():
    spec = read_study(STUDY)
    spec = replace(
        spec,
        models=replace(spec.models, forest=replace(spec.models.forest, trees=25)),
        imaging=replace(spec.imaging, penalty=replace(spec.imaging.penalty, n_alphas=30)),
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        return run_study(spec, replicates=2, permutations=0)  # no figure draws the added-value test


@pytest.mark.slow
@pytest.mark.parametrize("width", ["single", "double"])
def test_every_standard_figure_is_readable(demo_result, width):
    figs = study_figures(demo_result, width=width)
    assert EXPECTED <= set(figs)
    ext = demo_result.external_prepared.cohort
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        sig = demo_result.models["combined"].signature_score(ext)
    picks = showcase_patients(demo_result, ext, sig)
    for kind, i in picks.items():
        figs[f"nomogram_patient_{kind}"] = nomogram_figure(
            demo_result, patient=patient_values(ext, i, sig), width=width, notes=patient_notes(demo_result, ext, i),
            patient_row=(ext, i))
    assert set(picks) == {"typical", "flagged"}  # the demo's external hospital has the unseen scanner
    found = {name: legibility_problems(fig) for name, fig in figs.items()}
    bad = {k: v for k, v in found.items() if v}
    assert not bad, f"at {width} width: {bad}"
    mm = 85.0 if width == "single" else 175.0
    for name, fig in figs.items():
        assert fig.get_figwidth() * 25.4 == pytest.approx(mm), name  # drawn for the column, not rescaled


def test_showcase_patients_and_their_intervals(demo_result):
    ext = demo_result.external_prepared.cohort
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)
        sig = demo_result.models["combined"].signature_score(ext)
        picks = showcase_patients(demo_result, ext, sig)
        train_batches = set(map(str, demo_result.cohort.batch))
        assert str(ext.batch[picks["typical"]]) in train_batches and not patient_notes(demo_result, ext,
                                                                                        picks["typical"])
        assert str(ext.batch[picks["flagged"]]) not in train_batches
        assert "not among the training scanners" in patient_notes(demo_result, ext, picks["flagged"])[0]
        # the interval drawn is the model's own delta-method interval, and it holds the read-off
        m = demo_result.models["combined"]
        i = picks["flagged"]
        ci = m.predict_survival_with_ci(ext.take([i]), demo_result.spec.horizons)
        point = m.predict_survival(ext.take([i]), demo_result.spec.horizons).probs[0]
    assert np.all(ci.lower[0] <= point + 1e-12) and np.all(point <= ci.upper[0] + 1e-12)
    np.testing.assert_allclose(ci.survival[0], point, atol=1e-10)


# ------------------------------------------------------------------ drawn data of the new figures


def _close(a, b):
    np.testing.assert_allclose(np.asarray(a, float), np.asarray(b, float), rtol=0, atol=1e-12)


@pytest.mark.parametrize("width", ["single", "double"])
def test_site_calibration_draws_the_pooled_numbers_of_results_json(demo_result, width):
    # Reference check: the pooled random-effects O/E, its interval and the prediction interval for a new
    # site drawn are the per-scanner validation numbers written to results.json, and so is every level.
    from workbench.report.external_text import worst_horizon
    from workbench.report.results import results_dict

    d = results_dict(demo_result)
    fig = study_figures(demo_result, width=width)["site_calibration"]
    h = worst_horizon(d, ("clinical", "combined"), 0.0)
    assert h in demo_result.spec.horizons
    key = f"oe_ratio@{h:g}"
    block = d["external"]["by_group"]["scanner"]
    ax = fig.axes[0]
    arts = {a.get_gid(): a for a in [*ax.lines, *ax.patches, *ax.collections] if a.get_gid()}
    n_checked = 0
    for m in ("clinical", "combined"):
        pooled = block["pooled"][m][key]
        dia = arts[f"pooled:scanner:{m}"].get_xy()[:, 0]
        _close(sorted(set(np.round(dia, 14))), sorted({round(pooled["ci_lower"], 14), round(pooled["estimate"], 14),
                                                     round(pooled["ci_upper"], 14)}))
        _close(arts[f"pi:scanner:{m}"].get_xdata(), [pooled["pi_lower"], pooled["pi_upper"]])
        for lev in block["levels"]:
            _close(arts[f"level:scanner:{lev}:{m}"].get_xdata(), [block["estimates"][m][lev][key]["estimate"]])
            n_checked += 1
    assert n_checked == 2 * len(block["levels"]) >= 6
    # the unseen scanner is marked in its row label
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert any("scanner_D" in t and "unseen" in t for t in labels)
    assert not any("scanner_A" in t and "unseen" in t for t in labels)


def test_difference_curves_draw_the_stored_bands(demo_result):
    bands = demo_result.difference_bands["combined"]
    # this fast demo run has too few resamples for an external band (the rule needs 10): give the
    # external net-benefit curve a stored band of known values, which the figure must draw
    ext = bands["net_benefit"]["external"]
    step = np.linspace(0.01, 0.02, ext.estimate.size)
    bands = {**bands, "net_benefit": {**bands["net_benefit"], "external": replace(
        ext, lower=ext.estimate - step, upper=ext.estimate + step, band="normal")}}
    result = replace(demo_result, difference_bands={**demo_result.difference_bands, "combined": bands})
    fig = study_figures(result, width="double")["difference_curves"]
    axes = np.array(fig.axes).reshape(2, 2)
    for i, q in enumerate(("auc", "net_benefit")):
        for k, s in enumerate(("internal", "external")):
            b = bands[q][s]
            line = next(ln for ln in axes[i][k].lines if ln.get_gid() == "difference")
            ok = np.isfinite(b.estimate) if (q, s) == ("auc", "internal") else slice(None)
            _close(line.get_xdata(), b.x[ok])
            np.testing.assert_allclose(line.get_ydata(), b.estimate[ok], atol=1e-12, equal_nan=True)
    ext_nb = bands["net_benefit"]["external"]
    band = next(c for c in axes[1][1].collections if c.get_gid() == "band")
    ys = np.concatenate([p.vertices[:, 1] for p in band.get_paths()])
    finite = np.isfinite(ext_nb.lower)
    assert np.all(np.isin(np.round(ext_nb.lower[finite], 12), np.round(ys, 12)))
    assert np.all(np.isin(np.round(ext_nb.upper[finite], 12), np.round(ys, 12)))


# ------------------------------------------------------------------ the checker finds what it should


def _fig():
    fig = Figure(figsize=(85 / 25.4, 60 / 25.4), layout="constrained")
    return fig, fig.add_subplot()


def test_checker_finds_overlapping_and_clipped_text():
    fig, ax = _fig()
    ax.plot([0, 1], [0, 1])
    ax.text(0.5, 0.5, "first label", transform=ax.transAxes)
    ax.text(0.52, 0.5, "second label", transform=ax.transAxes)
    probs = legibility_problems(fig)
    assert any(p.startswith("overlap") and "first label" in p and "second label" in p for p in probs)
    fig, ax = _fig()
    ax.plot([0, 1], [0, 1])
    ax.set_title("a title far too long to fit a single journal column of eighty-five millimetres", loc="left")
    assert any(p.startswith("clipped") for p in legibility_problems(fig))


def test_checker_finds_tick_labels_running_together():
    fig, ax = _fig()
    ax.plot([0, 1], [0, 1])
    ticks = np.linspace(0, 1, 30)
    ax.set_xticks(ticks, labels=[f"{v:.3f}" for v in ticks])
    assert any(p.startswith("overlap") for p in legibility_problems(fig))


def test_checker_finds_a_legend_on_the_data_and_a_squeezed_panel():
    fig, ax = _fig()
    x = np.linspace(0, 1, 200)
    ax.plot(x, np.full_like(x, 0.9), label="a curve near the top")
    ax.set_ylim(0, 1)
    ax.legend(loc="upper right")
    assert any(p.startswith("legend over data") for p in legibility_problems(fig))
    fig = Figure(figsize=(85 / 25.4, 60 / 25.4))
    gs = fig.add_gridspec(1, 2, width_ratios=(40, 1))
    fig.add_subplot(gs[0]).plot([0, 1], [0, 1])
    fig.add_subplot(gs[1]).plot([0, 1], [0, 1])
    assert any(p.startswith("squeezed panel") for p in legibility_problems(fig))


def test_checker_finds_a_marker_on_a_text_but_not_an_arrow_pointing_at_it():
    fig, ax = _fig()
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.text(0.5, 0.5, "40", ha="center", va="center")
    ax.plot([0.5], [0.5], marker="o", ms=3.6, linestyle="none")
    assert any(p.startswith("marker on text") and "'40'" in p for p in legibility_problems(fig))
    fig, ax = _fig()
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.plot([0.3], [0.5], marker="D", ms=4.5, linestyle="none", label="chosen")
    ax.annotate("chosen here", (0.3, 0.5), xytext=(12, 12), textcoords="offset points",
                arrowprops={"arrowstyle": "-"})
    assert legibility_problems(fig) == []


def test_checker_passes_a_plain_figure():
    fig, ax = _fig()
    ax.plot([0, 1], [0, 1], label="line")
    ax.set_xlabel("Time (months)")
    ax.set_ylabel("Survival")
    ax.legend(loc="upper left")
    assert legibility_problems(fig) == []
