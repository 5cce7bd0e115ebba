"""The publication plots draw exactly the numbers they are given (checked on the drawn artists).

External references: the 6-MP leukaemia trial (Freireich et al., Blood 1963) as
shipped in lifelines (``load_leukemia``), with the textbook Kaplan-Meier values
and log-rank statistic listed in REFERENCE_VALUES.md; the Rossi data shipped in
lifelines for the Schoenfeld residuals.
"""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib
import numpy as np
import pytest
from matplotlib.figure import Figure

from workbench.cohort.outcome import make_outcome
from workbench.errors import SpecError
from workbench.figures import (
    decision_curves,
    forest_table,
    km_by_group,
    plot_calibration,
    plot_coefficient_path,
    plot_decision_curve,
    plot_forest,
    plot_km_by_group,
    plot_schoenfeld,
    plot_selection_frequency,
    plot_td_auc,
    risk_groups,
    save_figure,
    td_auc_by_model,
)
from workbench.figures.decision import EVERYONE, NO_ONE
from workbench.figures.style import (
    CVD_MATRICES,
    PALETTE,
    model_styles,
    palette_report,
    style_context,
)
from workbench.metrics.calibration import calibration_at
from workbench.prepare import prepare_cohort
from workbench.stats.coxph import fit_coxph
from workbench.stats.km import kaplan_meier, survival_at
from workbench.stats.schoenfeld import proportional_hazards_test


@pytest.fixture(scope="module")
def demo(demo_two_models):
    spec, train, models = demo_two_models
    test = prepare_cohort(spec, external=True).cohort
    return spec, train, test, models


@pytest.fixture(scope="module")
def leukemia():
    from lifelines.datasets import load_leukemia

    df = load_leukemia()
    return make_outcome(df["t"].to_numpy(float), df["status"].to_numpy(bool)), df["Rx"].to_numpy(float)


def _line(ax, label):
    for ln in ax.get_lines():
        if ln.get_label() == label:
            return ln
    raise AssertionError(f"no line labelled {label!r}; have {[ln.get_label() for ln in ax.get_lines()]}")


# ------------------------------------------------------------------ style


def test_palette_is_colour_blind_safe_and_greyscale_distinct():
    rep = palette_report()
    assert rep.min_lightness_gap >= 10.0  # L* units apart: distinct when printed in grey
    for kind in ("protanopia", "deuteranopia", "tritanopia", "normal"):
        assert rep.min_delta_e[kind] >= 20.0, kind  # CIE76 > 20 under each simulated deficiency
    # Machado et al. (2009) matrices keep greys grey: each row sums to one
    for m in CVD_MATRICES.values():
        np.testing.assert_allclose(m.sum(axis=1), 1.0, atol=2e-6)


def test_model_styles_follow_the_name_not_the_order():
    names = ["Clinical Cox", "Clinical + imaging signature", "Random survival forest"]
    a = model_styles(names)
    b = model_styles(sorted(names, reverse=True))  # e.g. a bundle's alphabetical order
    assert a == b
    assert model_styles(["clinical", "combined"]) == {"clinical": a["Clinical Cox"],
                                                      "combined": a["Clinical + imaging signature"]}
    other = model_styles(["zeta", "alpha", "Clinical Cox"])
    assert other == model_styles(["alpha", "Clinical Cox", "zeta"])
    assert len({s.color for s in other.values()}) == 3


def test_style_does_not_touch_global_settings():
    before = dict(matplotlib.rcParams)
    with style_context("double"):
        assert matplotlib.rcParams["font.size"] == 8.0
    assert matplotlib.rcParams["font.size"] == before["font.size"]
    assert matplotlib.rcParams["axes.prop_cycle"] == before["axes.prop_cycle"]


# ------------------------------------------------------------------ risk groups and KM


def test_risk_groups_use_training_cutpoints_only():
    rng = np.random.default_rng(3)
    train, ev = rng.normal(size=300), rng.normal(1.0, 1.0, size=120)
    g = risk_groups(train, ev, "tertiles")
    np.testing.assert_allclose(g.cutpoints, np.quantile(train, [1 / 3, 2 / 3]))
    np.testing.assert_array_equal(g.groups, np.searchsorted(g.cutpoints, ev, side="left"))
    shifted = risk_groups(train, ev + 5.0, "tertiles")
    np.testing.assert_allclose(shifted.cutpoints, g.cutpoints)  # evaluation rows never move the cut-points
    on_cut = risk_groups(train, [g.cutpoints[0]], "tertiles")
    assert on_cut.groups[0] == 0  # one rule everywhere (stats/riskgroups.py): on a boundary -> lower group
    with pytest.raises(SpecError, match="smallest p-value"):
        risk_groups(train, ev, "optimal")


def test_km_by_group_reproduces_the_6mp_textbook_example(leukemia):
    y, rx = leukemia
    g = risk_groups(rx, rx, [0.5])  # Rx = 0 (6-MP) low, 1 (placebo) high
    res = km_by_group(y, g, tick_times=[0, 5, 10, 15, 20, 25, 30, 35])
    # textbook log-rank chi-square 16.79 on 1 df (REFERENCE_VALUES.md)
    assert res.logrank.statistic == pytest.approx(16.79, abs=0.01)
    # textbook 6-MP Kaplan-Meier at weeks 6, 7, 10, 13, 16, 22, 23
    km_6mp = survival_at(res.curves[0], [6, 7, 10, 13, 16, 22, 23])
    np.testing.assert_allclose(km_6mp, [0.8571, 0.8067, 0.7529, 0.6902, 0.6275, 0.5378, 0.4482], atol=5e-5)
    # Efron Cox on treatment alone: HR 4.817 (REFERENCE_VALUES.md, matches lifelines)
    assert res.hazard_ratios[0] == pytest.approx(4.817, abs=0.005)


def test_km_plot_draws_the_estimates_and_true_numbers_at_risk(leukemia):
    y, rx = leukemia
    g = risk_groups(rx, rx, [0.5])
    res = km_by_group(y, g, tick_times=[0, 10, 20, 30])
    fig = plot_km_by_group(res, min_at_risk=0)
    ax_main, ax_tab = fig.axes[:2]
    for k, lab in enumerate(res.labels):
        line = _line(ax_main, lab)
        m = g.groups == k
        km = kaplan_meier(y["time"][m], y["event"][m])
        np.testing.assert_allclose(line.get_xdata(), np.r_[0.0, km.times])
        np.testing.assert_allclose(line.get_ydata(), np.r_[1.0, km.survival])
    # the default cuts each curve after the last time with at least 10 patients at risk
    cut = plot_km_by_group(res)
    for k, lab in enumerate(res.labels):
        m = g.groups == k
        km = kaplan_meier(y["time"][m], y["event"][m])
        keep = km.at_risk >= 10
        line = _line(cut.axes[0], lab)
        np.testing.assert_allclose(line.get_xdata(), np.r_[0.0, km.times[keep]])
        np.testing.assert_allclose(line.get_ydata(), np.r_[1.0, km.survival[keep]])
        assert np.sum(y["time"][m] >= line.get_xdata()[-1]) >= 10
    texts = [(t.get_position(), t.get_text()) for t in ax_tab.texts]
    for k in range(len(res.labels)):
        m = g.groups == k
        row = len(res.labels) - 1 - k
        for t in res.tick_times:
            shown = [s for (x, yy), s in texts if x == t and yy == row]
            assert shown == [str(int(np.sum(y["time"][m] >= t)))]  # direct count still at risk
    # the comparison is a caption under the figure, not text inside the plot area
    assert not ax_main.texts
    caption = fig.get_supxlabel()
    assert f"chi-squared = {res.logrank.statistic:.1f} with 1 degree of freedom" in caption.replace("\n", " ")
    assert "p < 0.001" in caption
    assert "Groups cut at 0.5 on the risk score" in caption.replace("\n", " ")
    dev = plot_km_by_group(res, development=True).get_supxlabel().replace("\n", " ")
    assert "descriptive" in dev and "p =" not in dev and "p <" not in dev and "chi-squared" not in dev


def test_km_ticks_follow_the_study_time_unit():
    from workbench.figures.ticks import time_ticks

    np.testing.assert_array_equal(time_ticks(64.0, "months"), [0, 12, 24, 36, 48, 60])
    np.testing.assert_array_equal(time_ticks(30.0, "months"), [0, 6, 12, 18, 24, 30])
    np.testing.assert_array_equal(time_ticks(1100.0, "days"), [0, 365, 730, 1095])  # whole years
    np.testing.assert_array_equal(time_ticks(490.0, "days"), [0, 90, 180, 270, 360, 450])  # too few years
    np.testing.assert_array_equal(time_ticks(700.0, "days"), [0, 180, 360, 540])
    np.testing.assert_array_equal(time_ticks(2659.0, "days"), [0, 730, 1460, 2190])
    np.testing.assert_array_equal(time_ticks(7.0, "years"), [0, 2, 4, 6])  # at most 7 ticks
    np.testing.assert_array_equal(time_ticks(6.0, "years"), [0, 1, 2, 3, 4, 5, 6])


# ------------------------------------------------------------------ discrimination, calibration, decision


def test_td_auc_lines_equal_the_results(demo):
    spec, train, test, models = demo
    grid = np.arange(6.0, 43.0, 6.0)
    res = td_auc_by_model(train.y, test.y, {k: m.predict_risk(test) for k, m in models.items()}, grid)
    fig = plot_td_auc(res, time_unit="months")
    ax = fig.axes[0]
    for name, r in res.items():
        line = _line(ax, f"{name} ({r.mean_auc:.2f})")
        np.testing.assert_allclose(line.get_xdata(), r.times)
        np.testing.assert_allclose(line.get_ydata(), r.auc)
    np.testing.assert_array_equal(ax.get_xticks(), [0, 12, 24, 36])  # the study's month steps
    # the legend states the window of the mean it shows
    assert fig.legends[0].get_title().get_text() == "Model (mean AUC, 6 to 42 months)"
    # given the study's own means, the legend shows those and their window
    means = {"clinical": 0.7012, "combined": 0.8123}
    fig = plot_td_auc(res, time_unit="months", mean_auc=means, mean_window="at 12, 24, 36 months")
    assert fig.legends[0].get_title().get_text() == "Model (mean AUC, at 12, 24, 36 months)"
    _line(fig.axes[0], "clinical (0.70)")
    _line(fig.axes[0], "combined (0.81)")


def test_calibration_plot_draws_the_result(demo):
    spec, train, test, models = demo
    curves = models["clinical"].predict_survival(test, spec.horizons)
    res = calibration_at(test.y, curves, 24.0)
    fig = plot_calibration(res, predicted=curves, time_unit="months")
    ax = fig.axes[0]
    ideal = _line(ax, "Ideal")
    np.testing.assert_allclose(ideal.get_xdata(), ideal.get_ydata())  # the 45-degree line
    smooth = _line(ax, "Smoothed")
    np.testing.assert_allclose(smooth.get_xdata(), res.smoothed.grid_predicted)
    np.testing.assert_allclose(smooth.get_ydata(), res.smoothed.grid_observed)
    text = " ".join(t.get_text() for t in ax.texts)
    assert f"ICI {res.smoothed.ici:.3f}" in text and f"E90 {res.smoothed.e90:.3f}" in text
    # in a grid of panels the numbers move above the panel, where no point can hide them
    small = plot_calibration(res, predicted=curves, time_unit="months", compact=True, title="24 months")
    head = small.axes[0].get_title(loc="left")
    assert head == f"24 months\nICI {res.smoothed.ici:.3f}\nslope {res.slope.slope:.2f}"
    assert not small.axes[0].texts
    hist = fig.axes[0].child_axes[0]
    assert hist.patches[0].get_data().values.sum() == test.n  # every predicted risk is in the histogram


def test_calibration_panels_label_every_scale_they_use(demo):
    # The panels of a row have one scale per horizon. On the Rossi data (lifelines load_rossi) the
    # 13-week panel ran to 0.3 and the 39-week one to 0.7, but only the first was labelled, so the
    # later panels read as if they ran to 0.3.
    from workbench.figures import plot_calibration_panels

    spec, train, test, models = demo
    horizons = (1.0, 2.0, 24.0)  # early horizons with small risks, as in a short follow-up study
    res = {"clinical": [calibration_at(train.y, models["clinical"].predict_survival(train, horizons), h)
                        for h in horizons]}
    fig = plot_calibration_panels(res, time_unit="months")
    panels = [a for a in fig.axes if a.get_title(loc="left")]
    assert len(panels) == len(horizons)
    first = {}
    for a in panels:
        top = a.get_ylim()[1]
        assert a.get_xlim()[1] == pytest.approx(top)  # square: the dashed line is the identity
        labels = [t.get_text() for t in a.get_yticklabels()]
        row = a.get_figure(root=False)
        if row not in first:
            first[row] = top
            assert labels[-1] == f"{top:g}"
        elif not np.isclose(top, first[row]):
            assert labels and labels[-1] == f"{top:g}", (top, first[row], labels)
        else:
            assert not any(labels)
    assert len({a.get_ylim()[1] for a in panels}) > 1  # this demo's horizons do use more than one scale


def test_decision_curve_reference_strategies(demo):
    spec, train, test, models = demo
    curves = {k: m.predict_survival(test, spec.horizons) for k, m in models.items()}
    res = decision_curves(test.y, curves, 24.0)
    fig = plot_decision_curve(res, time_unit="months")
    ax = fig.axes[0]
    pt = res["clinical"].thresholds
    np.testing.assert_array_equal(_line(ax, NO_ONE).get_ydata(), np.zeros_like(pt))
    # acting on everyone: (1 - S) - S pt / (1 - pt) with S the Kaplan-Meier survival at the horizon
    # (Vickers & Elkin 2006)
    s = float(survival_at(kaplan_meier(test.time, test.event), 24.0))
    np.testing.assert_allclose(_line(ax, EVERYONE).get_ydata(), (1 - s) - s * pt / (1 - pt), atol=1e-12)
    assert ax.get_legend() is None and fig.legends  # the legend sits under the panel, off the curves
    for name, r in res.items():
        np.testing.assert_allclose(_line(ax, name).get_ydata(), r.net_benefit)


# ------------------------------------------------------------------ hazard ratios, signature, PH


def test_forest_markers_sit_at_the_hazard_ratios(demo):
    _, _, _, models = demo
    table = forest_table(models["combined"])
    fig = plot_forest(table)
    ax = fig.axes[0]
    pts = next(ln for ln in ax.get_lines() if ln.get_gid() == "hazard_ratios")
    est = table[~table["is_reference"]]
    np.testing.assert_allclose(pts.get_xdata(), est["hr"].to_numpy())
    refs = next(ln for ln in ax.get_lines() if ln.get_gid() == "reference_levels")
    assert np.all(np.asarray(refs.get_xdata()) == 1.0) and len(refs.get_xdata()) == table["is_reference"].sum()
    cea = table[table["column"] == "cea_ng_ml"]
    assert "per doubling" in set(cea["contrast"])
    assert ax.get_xscale() == "log"
    # per SD of the training scores, the nomogram's unit: exp(b * SD) with limits scaled alike
    _, train, _, _ = demo
    sd = float(np.std(models["combined"].signature_score(train), ddof=1))
    per_sd = forest_table(models["combined"], signature_sd=sd)
    row = per_sd[per_sd["column"] == "imaging_signature"].iloc[0]
    f = models["combined"].fit_
    j = list(f.names).index("imaging_signature")
    assert row["contrast"] == "per SD of training scores"
    assert row["hr"] == pytest.approx(np.exp(f.coef[j] * sd), rel=1e-12)
    assert (row["lower"], row["upper"]) == pytest.approx((np.exp(f.ci_lower[j] * sd), np.exp(f.ci_upper[j] * sd)))
    assert row["p_value"] == pytest.approx(f.p_value[j])  # the test does not depend on the unit


def test_selection_frequency_bars_equal_the_input():
    freq = {"cm_contrast": 0.92, "ih_skewness": 0.40, "morph_volume": 0.75, "szm_glnu": 0.10}
    fig = plot_selection_frequency(freq, n_replicates=200, top=3)
    ax = fig.axes[0]
    bars = [p for p in ax.patches if p.get_gid() == "selection_frequency"]
    widths = {t.get_text(): b.get_width() for t, b in zip(ax.get_yticklabels(), bars, strict=True)}
    assert widths == {"cm_contrast": 0.92, "morph_volume": 0.75, "ih_skewness": 0.40}
    with pytest.raises(SpecError):
        plot_selection_frequency({"a": 3.0})


def test_coefficient_path_marks_the_chosen_penalty(demo):
    _, _, _, models = demo
    path = models["combined"].signature_.path_
    fig = plot_coefficient_path(path)
    ax = fig.axes[0]
    chosen = _line(ax, f"chosen penalty ({path.rule})")
    assert chosen.get_xdata()[0] == pytest.approx(path.alpha)
    dev = fig.axes[1]
    cv = next(ln for ln in dev.get_lines() if ln.get_gid() == "cv_deviance")
    np.testing.assert_allclose(cv.get_ydata(), path.cv_mean)  # a line, not dots with error bars
    marks = [ln for ln in dev.get_lines() if ln.get_gid() == "chosen_penalty"]
    assert len(marks) == 1 and marks[0].get_xdata()[0] == pytest.approx(path.alpha)
    assert marks[0].get_ydata()[0] == pytest.approx(path.cv_mean[path.index])
    assert not [ln for ln in dev.get_lines() if len(ln.get_xdata()) == 2 and ln.get_xdata()[0] == ln.get_xdata()[1]]
    kept = int(np.sum(path.coefs[:, path.index] != 0))
    assert f"{kept} features" in " ".join(t.get_text() for t in dev.texts)
    top = dev.child_axes[0]  # the feature-count axis
    counts = np.sum(path.coefs != 0, axis=0)
    for tick, lab in zip(top.get_xticks(), top.get_xticklabels(), strict=True):
        i = int(np.argmin(np.abs(np.log(path.alphas) - np.log(tick))))
        assert lab.get_text() == str(int(counts[i]))
    drawn = [ln for ln in ax.get_lines() if (ln.get_gid() or "").startswith("path:")]
    assert len(drawn) == int(np.sum(np.any(path.coefs != 0, axis=1)))
    j = path.feature_names.index(drawn[0].get_gid()[5:])
    np.testing.assert_allclose(drawn[0].get_ydata(), path.coefs[j])


def test_schoenfeld_points_equal_the_residuals():
    from lifelines.datasets import load_rossi

    df = load_rossi()
    covs = ["fin", "age", "prio"]
    fit = fit_coxph(df[covs].to_numpy(float), df["week"], df["arrest"], names=covs)
    res = proportional_hazards_test(fit, df[covs].to_numpy(float), df["week"], df["arrest"])
    fig = plot_schoenfeld(res, ncols=3, time_unit="weeks")
    for j, ax in enumerate(fig.axes[:3]):
        pts = next(c for c in ax.collections if c.get_gid() == "scaled_residuals")
        off = pts.get_offsets()
        np.testing.assert_allclose(off[:, 0], res.residuals.event_times)  # real follow-up time
        np.testing.assert_allclose(off[:, 1], res.residuals.scaled[:, j])
        assert ax.get_title(loc="left") == f"{covs[j]}\nconstant-effect test p = {res.p_value[j]:.3f}"
        const = next(ln for ln in ax.get_lines() if ln.get_gid() == "constant_effect")
        assert const.get_ydata()[0] == pytest.approx(np.mean(res.residuals.scaled[:, j]))
        assert "constant effect" in [t.get_text() for t in ax.texts]
        np.testing.assert_array_equal(ax.get_xticks(), [0, 13, 26, 39, 52])  # quarter years of weeks
    assert fig.axes[0].get_xlabel() == "Follow-up (weeks)"


# ------------------------------------------------------------------ export


def test_export_writes_three_formats_at_journal_widths(tmp_path):
    with style_context("single"):
        fig = Figure(figsize=(4, 3), layout="constrained")
        ax = fig.add_subplot()
        ax.plot([0, 1], [0, 1], color=PALETTE[0])
        ax.set_xlabel("Time (months)")
    paths = save_figure(fig, tmp_path / "demo")
    assert sorted(p.name for p in paths) == sorted(
        f"demo_{w}.{f}" for w in ("single", "double") for f in ("png", "svg", "pdf")
    )
    from PIL import Image

    for width_mm in (85.0, 175.0):
        name = "single" if width_mm == 85.0 else "double"
        with Image.open(tmp_path / f"demo_{name}.png") as im:
            w, h = im.size
        # 300 dpi at the column width; the canvas is cut to whole pixels
        assert abs(w - width_mm / 25.4 * 300) < 1.0
        assert abs(h - width_mm / 25.4 * 0.75 * 300) < 1.0
        svg = (tmp_path / f"demo_{name}.svg").read_text()
        assert "<text" in svg and "Time (months)" in svg  # text stays editable text
        assert (tmp_path / f"demo_{name}.pdf").read_bytes()[:5] == b"%PDF-"
    assert tuple(fig.get_size_inches()) == (4.0, 3.0)  # the caller's figure is left as it was


def test_plots_draw_into_a_given_axes(leukemia):
    y, rx = leukemia
    fig = Figure()
    ax = fig.add_subplot()
    out = plot_km_by_group(km_by_group(y, risk_groups(rx, rx, [0.5])), ax=ax)
    assert out is ax and len(fig.axes) == 1


def test_no_pyplot_in_figures_package():
    pkg = Path(__file__).parents[3] / "workbench" / "figures"
    for f in pkg.glob("*.py"):
        src = f.read_text()
        assert not re.search(r"import matplotlib\.pyplot|from matplotlib import pyplot|plt\.", src), f.name
