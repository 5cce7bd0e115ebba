"""The nomogram shows its limits: training spread, out-of-range flags, SD signature axis, open ends.

Demo cohort (invented data, demo_cohort/) for the two study models. Every check compares the
drawn artists with numbers computed here directly from the training data (numpy percentiles,
level counts), not with the nomogram's own bookkeeping.
"""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle

from workbench.figures.nomogram import plot_nomogram
from workbench.figures.nomogram_points import (
    SIGNATURE_TERM,
    nomogram_scales,
    patient_values,
    points_for_patient,
)


@pytest.fixture(scope="module")
def demo(demo_two_models):
    spec, cohort, models = demo_two_models
    sig = models["combined"].signature_score(cohort)
    sc = nomogram_scales(models["combined"], spec.horizons, signature_scores=sig, time_unit="months",
                         median_axis=True)
    return cohort, sig, sc


def test_signature_axis_is_labelled_in_training_sds(demo):
    cohort, sig, sc = demo
    t = sc.term(SIGNATURE_TERM)
    mean, sd = np.mean(sig), np.std(sig, ddof=1)
    assert t.unit == "SD"
    for k in t.ticks:
        assert float(k.label) == pytest.approx((k.value - mean) / sd, abs=1e-9)  # label = SDs from the mean
        assert k.points == pytest.approx(float(t.points([k.value])[0]))  # position from the raw score
    lo, hi = t.training_range
    assert (lo, hi) == pytest.approx(tuple(np.percentile(sig, [1, 99])))


def test_training_spread_is_drawn_at_the_training_percentiles(demo):
    cohort, sig, sc = demo
    fig = plot_nomogram(sc)
    ax = fig.axes[0]
    age = cohort.clinical["age"].astype(float)
    t = sc.term("age")
    strip = next(ln for ln in ax.get_lines() if ln.get_gid() == "spread:age")
    p5, p95 = np.percentile(age.dropna(), [5, 95])
    np.testing.assert_allclose(sorted(strip.get_xdata()), sorted(t.points([p5, p95])), atol=0.05)
    s_strip = next(ln for ln in ax.get_lines() if ln.get_gid() == f"spread:{SIGNATURE_TERM}")
    np.testing.assert_allclose(sorted(s_strip.get_xdata()),
                               sorted(sc.term(SIGNATURE_TERM).points(np.percentile(sig, [5, 95]))), atol=1e-9)
    # categorical: one bar per level, heights in proportion to the training counts
    stage = cohort.clinical["stage"].astype(str)
    bars = {p.get_gid().split(":")[2]: p.get_height() for p in ax.patches
            if isinstance(p, Rectangle) and (p.get_gid() or "").startswith("share:stage:")}
    counts = stage.value_counts()
    assert set(bars) == set(counts.index)
    ratio = {lv: bars[lv] / counts[lv] for lv in bars}
    assert max(ratio.values()) == pytest.approx(min(ratio.values()), rel=1e-9)


def test_categorical_labels_never_need_leader_lines(demo):
    _, _, sc = demo
    for width in ("single", "double"):
        ax = plot_nomogram(sc, width=width).axes[0]
        texts = [t.get_text() for t in ax.texts]
        # every level is named exactly once, alone or in a group such as "III, I, IV"
        named = [lv for tx in texts for lv in tx.split(", ")]
        for lv in ("I", "II", "III", "IV"):
            assert named.count(lv) >= 1
        # no thin grey vertical leader lines
        leaders = [ln for ln in ax.get_lines() if isinstance(ln, Line2D) and ln.get_linewidth() == 0.4
                   and len(ln.get_xdata()) == 2 and ln.get_xdata()[0] == ln.get_xdata()[1]]
        assert not leaders


def test_patient_outside_the_training_range_is_flagged(demo):
    cohort, sig, sc = demo
    lo = np.percentile(sig, 1)
    values = patient_values(cohort, 0, sig)
    values[SIGNATURE_TERM] = lo - 1.0
    pp = points_for_patient(sc, values)
    assert SIGNATURE_TERM in pp.outside
    inside = patient_values(cohort, 0, sig)
    inside[SIGNATURE_TERM] = float(np.median(sig))
    inside["age"] = float(np.nanmedian(cohort.clinical["age"].astype(float)))
    assert SIGNATURE_TERM not in points_for_patient(sc, inside).outside
    fig = plot_nomogram(sc, patient=values, notes=["scanner_X was not among the training scanners"])
    text = " ".join(t.get_text() for t in fig.axes[0].texts).replace("\n", " ")
    z = (lo - 1.0 - np.mean(sig)) / np.std(sig, ddof=1)
    assert f"Imaging signature {z:.3g}" in text and "outside the training" in text
    assert "! scanner_X was not among the training scanners" in text


def test_median_axis_marks_its_open_end(demo):
    _, _, sc = demo
    ax = plot_nomogram(sc).axes[0]
    longest = max(k.value for k in sc.median.ticks)
    assert any(t.get_text() == f"> {max(sc.median.ticks, key=lambda k: k.value).label}" for t in ax.texts)
    assert [ln for ln in ax.get_lines() if ln.get_gid() == "open_end"]
    assert longest > 0


def test_read_off_interval_is_drawn_where_the_limits_fall(demo):
    cohort, sig, sc = demo
    values = patient_values(cohort, 3, sig)
    pp = points_for_patient(sc, values)
    # limits around the read-off (any pair inside (0, 1) will do for the drawing check)
    iv = {h: (max(0.01, pp.survival[h] - 0.1), min(0.99, pp.survival[h] + 0.08)) for h in sc.horizons}
    fig = plot_nomogram(sc, patient=values, intervals=[iv])
    ax = fig.axes[0]
    for h, (lo, hi) in iv.items():
        bar = next(ln for ln in ax.get_lines() if ln.get_gid() == f"interval:{h:g}")
        x = np.sort(bar.get_xdata())
        expected = np.sort(sc.survival_scale(h).total_points_for([hi, lo]) * 100.0 / sc.total_axis_max)
        np.testing.assert_allclose(x, np.clip(expected, 0, 100), atol=1e-9)
        # the read-off lies inside its interval bar
        x_pt = pp.total * 100.0 / sc.total_axis_max
        assert x[0] - 1e-9 <= x_pt <= x[1] + 1e-9
    text = " ".join(t.get_text() for t in ax.texts).replace("\n", " ")
    assert "95% interval of this patient's predicted survival" in text


def test_survival_ticks_are_regular_tenths(demo):
    _, _, sc = demo
    tails = {0.95, 0.98, 0.99, 0.05, 0.02, 0.01}
    for s in sc.survival:
        vals = [k.value for k in s.ticks]
        inner = [v for v in vals if v not in tails]
        assert inner and all(abs(v * 10 - round(v * 10)) < 1e-12 for v in inner)  # tenths only inside
        # a tail value only closes the axis beyond the last tenth
        for v in vals:
            if v in tails:
                assert v > max(inner) or v < min(inner)
        # every tick sits where the scale gives that survival
        for k in s.ticks:
            assert float(s.survival(k.points)) == pytest.approx(k.value, abs=1e-9)


def test_a_scanner_note_is_printed_under_the_imaging_panel_only(demo, demo_two_models):
    cohort, sig, sc = demo
    spec, _, models = demo_two_models
    clin = nomogram_scales(models["clinical"], spec.horizons, time_unit="months", median_axis=True)
    values = patient_values(cohort, 0, sig)
    note = "scanner_X was not among the training scanners"
    fig = plot_nomogram([clin, sc], patient=[values, values], imaging_notes=[note], notes=["a note for every panel"])
    texts = [" ".join(t.get_text() for t in ax.texts).replace("\n", " ") for ax in fig.axes]
    assert len(texts) == 2
    assert note not in texts[0] and f"! {note}" in texts[1]  # the clinical panel has no imaging axis
    assert all("! a note for every panel" in t for t in texts)


def test_median_axis_ticks_span_the_medians_the_total_scores_reach(demo_two_models):
    # A model whose predicted medians cover a short stretch of follow-up still gets a readable axis:
    # the ticks are chosen over the medians reachable between 0 and the maximum total score. Each tick
    # m sits where H0(m) exp(LP) = ln 2 (predicted survival exactly 0.5 at m, H0 a step function), so
    # the predicted median there is the last event time at or before m.
    spec, cohort, models = demo_two_models
    sc = nomogram_scales(models["clinical"], spec.horizons, time_unit="months", median_axis=True)
    assert sc.median is not None and len(sc.median.ticks) >= 3
    t, H0 = np.asarray(sc.median.event_times), np.asarray(sc.median.baseline_cumhaz)
    for k in sc.median.ticks:
        assert 0.0 <= k.points <= sc.total_axis_max
        at = t <= k.value
        assert H0[at][-1] * np.exp(sc.linear_predictor(k.points)) == pytest.approx(np.log(2.0), rel=1e-9)
        assert sc.median_survival(k.points) == pytest.approx(t[at][-1])


def test_median_axis_on_a_public_cohort_with_short_medians(tmp_path, public_tables):
    # Veterans' Administration lung cancer trial (scikit-survival load_veterans_lung_cancer, split by
    # examples/public_tables.py): follow-up to 999 days, but the clinical model's predicted medians
    # lie between about 40 and 160 days. Ticks every 100 days over the whole follow-up gave one
    # tick in that stretch, and no median axis at all.
    import warnings

    from workbench.models.registry import build_models
    from workbench.prepare import prepare_cohort
    from workbench.study import read_study

    assert public_tables.main(["veterans", "--out", str(tmp_path)]) == 0
    spec = read_study(tmp_path / "study.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cohort = prepare_cohort(spec).cohort
        model = build_models(spec)["clinical"].fit(cohort)
    sc = nomogram_scales(model, spec.horizons, time_unit="days", median_axis=True)
    assert sc.median is not None and len(sc.median.ticks) >= 4
    values = sorted(k.value for k in sc.median.ticks)
    assert values[-1] - values[0] < 500  # the ticks sit in the reachable stretch, not across follow-up


@pytest.mark.parametrize("low_share", [0.5, 0.06, 0.005])
def test_risk_band_labels_stay_inside_their_bands(demo, low_share):
    # On the Rossi data (lifelines load_rossi, a count predictor as the only signature feature) the
    # low band was a sliver: its abbreviated label "low." spilled over the row name "risk group".
    # Here the demo's bands are squeezed to the same shape: each drawn label must lie inside its band.
    from dataclasses import replace

    from matplotlib.text import Text

    _, _, sc = demo
    t = sc.term(SIGNATURE_TERM)
    lo, mid, hi = t.bands
    cut = lo.lo_points + low_share * (hi.hi_points - lo.lo_points)
    bands = (replace(lo, hi_points=cut), replace(mid, lo_points=cut), hi)
    sc2 = replace(sc, terms=tuple(replace(x, bands=bands) if x is t else x for x in sc.terms))
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig = plot_nomogram(sc2)
    renderer = FigureCanvasAgg(fig).get_renderer()
    ax = fig.axes[0]
    rects = [p for p in ax.patches if isinstance(p, Rectangle) and p.get_height() == pytest.approx(0.42)]
    assert len(rects) == 3
    names = {"low", "low.", "l", "intermediate", "int.", "i", "high", "hig.", "h"}
    labels = [x for x in ax.texts if isinstance(x, Text) and x.get_text() in names]
    assert labels, "no band label drawn"
    for x in labels:
        box = x.get_window_extent(renderer)
        home = [r for r in rects if r.get_window_extent(renderer).x0 - 0.5 <= (box.x0 + box.x1) / 2
                <= r.get_window_extent(renderer).x1 + 0.5]
        assert home, x.get_text()
        r = home[0].get_window_extent(renderer)
        assert box.x0 >= r.x0 - 0.5 and box.x1 <= r.x1 + 0.5, (x.get_text(), box, r)
    if low_share == 0.5:  # a wide band keeps its full name
        assert {"low", "high"} <= {x.get_text() for x in labels}
