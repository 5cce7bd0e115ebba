"""The study report on a small simulated study (invented data from the demo generator).

Numbers in the report are checked against ``results_dict`` (what the run measured) and,
where a general-purpose library can recompute them, against that library (named beside
each check).
"""

from __future__ import annotations

import math
import re
from html import unescape

import pytest

from workbench.errors import WorkbenchError
from workbench.report.checklist import AUTHORS, FILLED, reporting_checklist
from workbench.report.html import SECTIONS, _css_string, fmt_num, render_report, write_report
from workbench.report.pdf import ReportError, find_chromium
from workbench.report.results import results_dict


@pytest.fixture(scope="module")
def result(small_study_result):
    return small_study_result


@pytest.fixture(scope="module")
def files(result, tmp_path_factory):
    return write_report(result, tmp_path_factory.mktemp("report"), pdf=False)


@pytest.fixture(scope="module")
def html(files):
    return files.html.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def data(result):
    return results_dict(result)


def section(html: str, sid: str) -> str:
    start = html.index(f'<section id="{sid}"')
    end = html.find("<section id=", start + 10)
    return html[start:] if end < 0 else html[start:end]


def text_of(fragment: str) -> str:
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", fragment))


def test_every_section_is_there_with_its_heading(html):
    assert '<section id="title">' in html
    for sid, heading in SECTIONS:
        part = section(html, sid)
        assert f"<h2>{heading}</h2>" in part, sid


def test_caution_at_the_top_and_on_every_printed_page(html, data):
    body = html[html.index("<body>"):]
    assert body.index(data["caution"]) < body.index('<section id="methods-summary"')
    # the print style sheet carries it in the page margin, so Chromium prints it on every page
    css = html[html.index("<style>"):html.index("</style>")]
    assert "@bottom-left" in css and data["caution"] in css


def test_corrected_harrell_c_and_key_numbers_equal_the_results(html, data):
    perf = text_of(section(html, "performance"))
    for name in ("clinical", "combined"):
        c = data["models"][name]["performance"]["harrell_c"]
        assert f"{c['estimate']:.3f}" in perf
        assert f"{c['ci_lower']:.3f} to {c['ci_upper']:.3f}" in perf
        assert f"apparent {c['apparent']:.3f}" in perf
    cal = text_of(section(html, "calibration"))
    ici = data["models"]["combined"]["performance"]["ici@24"]["estimate"]
    assert fmt_num(ici) in cal
    inc = text_of(section(html, "incremental"))
    lr = data["comparison"]["combined"]["likelihood_ratio_test"]
    deg = "degree" if lr["df"] == 1 else "degrees"
    assert f"chi-squared = {lr['statistic']:.1f} with {lr['df']} {deg} of freedom" in inc
    diff = data["comparison"]["combined"]["differences"]["harrell_c"]["estimate"]
    assert fmt_num(diff) in inc
    ss = text_of(section(html, "sample-size"))
    assert str(data["cohort"]["summary"]["sample_size"]["n_required"]) in ss


def test_full_model_with_baseline_survival_and_centring(html, data):
    model = text_of(section(html, "model"))
    block = data["models"]["combined"]
    for row in block["coefficients"]:
        assert fmt_num(row["coef"], 4) in model, row["design_column"]
    for s0 in block["baseline_survival"]["survival"]:
        assert f"{s0:.4f}" in model
    for name, xm in block["baseline_survival"]["x_mean"].items():
        assert fmt_num(xm, 4) in model, name
    for feat in block["signature"]["selected"]:
        assert feat in model


def test_printed_survival_matches_lifelines(html, result):
    # reference: lifelines' Kaplan-Meier estimator on the same times and events
    from lifelines import KaplanMeierFitter

    km = KaplanMeierFitter().fit(result.cohort.time, result.cohort.event)
    outcome = text_of(section(html, "outcome"))
    for h in result.spec.horizons:
        s = float(km.survival_function_at_times(h).iloc[0])
        assert f"{100 * s:.1f}%" in outcome, h


def test_riley_criterion_one_printed_as_the_formula_gives(html, data):
    # reference: Riley et al., Stat Med 2019;38:1276-96, criterion (i) n = p / ((S - 1) ln(1 - R2cs / S))
    ss = data["cohort"]["summary"]["sample_size"]
    n = math.ceil(ss["n_parameters"] / ((0.9 - 1) * math.log(1 - ss["r2_cs"] / 0.9)))
    row = re.search(r"Fitted effects need shrinking by at most 10%</td><td class=\"n\">(\d+)<", section(html, "sample-size"))
    assert row is not None and int(row.group(1)) == n


def test_self_contained_no_external_urls(html):
    refs = re.findall(r"""(?:src|href)\s*=\s*["']([^"']*)["']""", html)
    assert refs, "the report should embed figures and link its sections"
    for r in refs:
        assert r.startswith("#") or r.startswith("data:"), r[:80]
    assert "@import" not in html and "url(" not in html
    assert "<script" not in html.lower()
    n_figures = len(re.findall(r'<img src="data:image/svg\+xml;base64,', html))
    assert n_figures >= 8


def test_no_patient_identifier_in_the_report(html, result):
    ids = [str(i) for i in result.cohort.ids]
    assert ids and ids[0] in result.cohort.ids
    # whole tokens only, in one pass over the text (base64 figure data cannot hold '-')
    tokens = set(re.findall(r"[\w-]+", html))
    assert sorted(set(ids) & tokens) == []


def test_no_machine_paths_in_the_study_file_text(html, result):
    text = unescape(section(html, "software"))
    assert result.spec.data.features not in text
    assert '"imaging.csv"' in text


def test_identifiers_only_when_asked(result):
    with_ids = render_report(result, include_ids=True, figures=False)
    assert 'id="ids"' in with_ids
    assert 'id="ids"' not in render_report(result, figures=False)


def test_checklist_items_point_at_real_sections(result, html):
    items = reporting_checklist(result)
    ids = {sid for sid, _ in SECTIONS} | {"title"}
    assert {i.status for i in items} == {FILLED, AUTHORS}
    for i in items:
        assert i.section is None or i.section in ids, i
    must = {i.topic for i in items if i.status == AUTHORS}
    assert {"Funding", "Ethics", "Patient and public involvement", "Source of data"} <= must
    assert "External validation" in must  # no external cohort in this run
    chars = next(i for i in items if i.item.startswith("Characteristics of the participants"))
    assert chars.status == FILLED and chars.section == "data" and "external" not in chars.note
    assert "This run has no external cohort" in text_of(section(html, "external"))


def test_limitations_follow_the_run(html, result):
    lim = text_of(section(html, "limitations"))
    assert "Only 3 bootstrap replicates" in lim
    if any(c == "VolumeDominanceWarning" for c, _ in result.warnings):
        assert "Volume dominance" in lim


def test_css_strings_cannot_break_out():
    s = str(_css_string('a "quoted" </style> name'))
    assert s.startswith('"') and s.endswith('"')
    assert "</style>" not in s and '\\"quoted\\"' in s


def test_missing_browser_is_a_clear_error():
    with pytest.raises(ReportError, match="apt-get install chromium") as err:
        find_chromium("no-such-browser-here")
    assert isinstance(err.value, WorkbenchError)
    assert "pdf=False" in str(err.value)



def test_new_site_sample_size_table_equals_the_results(html, data):
    ns = data["new_site_sample_size"]
    assert set(ns) == {"clinical", "combined"}
    assert "Patients needed to validate the model at a new site" in html
    for rows in ns.values():
        for r in rows:
            assert f"<b>{r['n_required']}</b>" in html


def test_flow_characteristics_and_appendix_are_placed(html):
    # drawn in the data section and the appendix; their numbers are tested in test_report_additions.py
    assert 'id="fig-flow"' in section(html, "data") and "Patient characteristics by centre" in section(html, "data")
    app = section(html, "appendix")
    assert 'id="fig-baseline"' in app and "Scaling and weights of the kept features" in app
    assert "ComBat location / scale of each training scanner" in app


def test_validation_words_follow_the_estimator_used(html, data):
    from workbench.report.methods import estimate_label

    label = estimate_label(data)
    assert set(data["validation"]["estimator"].values()) == {"optimism"}
    assert label.startswith("Optimism-corrected estimate")
    assert f"<tr><th>Method</th><td>{label.replace(chr(39), '&#39;')}</td></tr>" in section(html, "validation-method")
    assert "Decision curves at 12 months (optimism-corrected estimate)" in section(html, "decision")
    # the reference strategies in the project's own words
    assert "treat-all" not in section(html, "decision") and "everyone acted on" in section(html, "decision")


def test_collinearity_table_equals_least_squares_and_is_printed(html, data, result):
    # reference: the closed form 1 / (1 - R^2) with R^2 from scikit-learn's LinearRegression
    import numpy as np
    from sklearn.linear_model import LinearRegression

    m = result.models["combined"]
    X = m.transformer_.transform(result.cohort).X
    s = m.signature_score(result.cohort)
    A = np.column_stack([X, s])
    vif = []
    for j in range(A.shape[1]):
        o = np.delete(A, j, axis=1)
        vif.append(1.0 / (1.0 - LinearRegression().fit(o, A[:, j]).score(o, A[:, j])))
    block = data["models"]["combined"]["collinearity"]
    assert [r["design_column"] for r in block["rows"]] == list(m.transformer_.columns_)
    np.testing.assert_allclose([r["vif_with_signature"] for r in block["rows"]], vif[:-1], rtol=1e-8)
    assert block["score_vif"] == pytest.approx(vif[-1], rel=1e-8)
    np.testing.assert_allclose([r["correlation"] for r in block["rows"]],
                               [np.corrcoef(X[:, j], s)[0, 1] for j in range(X.shape[1])], atol=1e-12)
    model = text_of(section(html, "model"))
    assert "Signature and clinical terms on the development cohort (260 patients)" in model
    for r in block["rows"]:
        assert f"{r['design_column']} {fmt_num(r['correlation'], 2)} {fmt_num(r['vif_without_signature'], 2)} " \
               f"{fmt_num(r['vif_with_signature'], 2)}" in model
    assert [t["term"] for t in block["terms"]] == ["age", "stage", "ecog"]
    st = [j for j, c in enumerate(m.transformer_.columns_) if c.startswith("stage=")]
    r2 = LinearRegression().fit(X[:, st], s).score(X[:, st], s)
    assert block["terms"][1]["r2_of_signature"] == pytest.approx(r2, abs=1e-10)
    for t in block["terms"]:
        assert f"{t['term']} {fmt_num(t['r2_of_signature'], 2)}" in model


def test_clinical_volume_model_validated_compared_and_reported(html, data, result):
    # the study names [imaging] volume_feature: the clinical + volume model runs with the others
    assert list(result.models) == ["clinical", "combined", "clinical_volume"]
    assert result.validation.n_replicates["clinical_volume"] == result.validation.n_replicates["combined"]
    vm = data["models"]["clinical_volume"]
    assert vm["label"] == "Clinical + tumour volume"
    assert vm["coefficients"][-1]["design_column"] == "log2(morph_volume_cc)"
    vc = data["volume_comparison"]
    assert vc["volume_feature"] == "morph_volume_cc" and "external" not in vc
    d = vc["internal"]["differences"]["harrell_c"]
    perf = data["models"]
    assert (d["model"] if "model" in d else vc["internal"]["model"]) == "combined"
    assert d["apparent"] == pytest.approx(perf["combined"]["performance"]["harrell_c"]["apparent"]
                                          - perf["clinical_volume"]["performance"]["harrell_c"]["apparent"], abs=1e-12)
    inc = text_of(section(html, "incremental"))
    assert "Clinical + imaging signature against Clinical + tumour volume" in inc
    assert "Clinical + tumour volume against Clinical Cox" in inc
    assert fmt_num(d["estimate"], 3) in inc
    assert "To ask whether imaging adds more than tumour volume" in text_of(section(html, "methods-summary"))
    # a comparison model: a hazard-ratio figure, no nomogram, not in the bundle
    assert 'id="fig-forest-clinical_volume"' in html


def test_risk_group_curves_stop_at_the_study_minimum_at_risk(result):
    import numpy as np

    from workbench.report.report_figures import _km_fig
    from workbench.stats.km import kaplan_meier
    from workbench.stats.riskgroups import learn_cutpoints

    m, c = result.models["combined"], result.cohort
    fig = _km_fig(m, c, c, "months", "t", 3, min_at_risk=40)
    risk = m.predict_risk(c).values
    groups = np.searchsorted(learn_cutpoints(risk, 3), risk, side="left")
    ends = sorted(float(ln.get_xdata()[-1]) for ln in fig.axes[0].get_lines()
                  if not ln.get_label().startswith("_"))  # the three group curves (markers are unlabelled)
    want = []
    for k in range(3):
        km = kaplan_meier(c.time[groups == k], c.event[groups == k])
        want.append(float(km.times[km.at_risk >= 40][-1]))
    np.testing.assert_allclose(ends, sorted(want))
    assert any("fewer than 40 patients remain at risk" in " ".join(t.get_text().split()) for t in fig.texts)


def test_level_order_warning_reaches_the_limitations(result, data):
    import copy

    from workbench.report.methods import limitations

    d = copy.deepcopy(data)
    msg = "Stage: the hazard ratios follow the declared level order in the Clinical Cox model (I 1.00, II 1.2)"
    assert not any("Order of a categorical effect" in x for x in limitations(result, d))
    d["warnings"].append({"category": "LevelOrderWarning", "message": msg})
    assert "Order of a categorical effect: " + msg in limitations(result, d)
def test_difference_figure_sits_with_the_comparison(html, data):
    inc = section(html, "incremental")
    assert 'id="fig-difference-combined"' in inc
    # the numbers it draws are in results.json beside the comparison they belong to
    curves = data["comparison"]["combined"]["difference_curves"]
    assert set(curves) == {"auc", "net_benefit"}
    assert curves["net_benefit"]["band"] == "two-stage" and curves["net_benefit"]["setting"] == "internal"
    assert curves["auc"]["x"] == [float(h) for h in data["study"]["horizons"]]
    assert "This run has no external cohort" in text_of(section(html, "external"))
    assert "fig-decision-external" not in section(html, "decision")


def test_penalisation_limitation_follows_the_events_per_feature(result, data):
    # With 10 or more events per imaging feature (common practice) penalisation is not forced: the
    # Rossi data (lifelines load_rossi, 57 events per feature) had read "the signature had to be
    # selected by penalisation".
    import copy

    from workbench.report.methods import limitations

    d = copy.deepcopy(data)
    d["cohort"]["summary"]["events_per_feature"] = 0.5
    assert any("had to be selected by penalisation" in x for x in limitations(result, d))
    d["cohort"]["summary"]["events_per_feature"] = 57.0
    assert not any("penalisation" in x for x in limitations(result, d))
