"""The study report: one self-contained HTML file (and a PDF of it), arranged by reporting topics.

The sections follow the topics of the TRIPOD and TRIPOD+AI reporting
guidelines: data and participants, outcome, predictors, sample size, missing
data, the full model, internal validation, performance, calibration, what
imaging adds, decision curves, external validation, figures, limitations,
software. Every number comes from :func:`workbench.report.results.results_dict`;
only the figures are drawn here, from the fitted models, with the plot
functions of :mod:`workbench.figures`. Figures are embedded as SVG data, the
style sheet is inline, and nothing is fetched from anywhere, so the file works
offline and can be archived as it is. Patient identifiers are left out unless
asked for.

References
----------
.. [1] Collins GS, Reitsma JB, Altman DG, Moons KGM. Transparent reporting of a
   multivariable prediction model for individual prognosis or diagnosis
   (TRIPOD): the TRIPOD statement. BMJ 2015;350:g7594.
.. [2] Collins GS, Moons KGM, Dhiman P, et al. TRIPOD+AI statement: updated
   guidance for reporting clinical prediction models that use regression or
   machine learning methods. BMJ 2024;385:e078378.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import jinja2
from markupsafe import Markup

from workbench.cohort.summary import CAUTION, feature_family, followup_text
from workbench.models.labels import EQUAL_NOTE, equal_models, model_labels
from workbench.models.registry import MODEL_LABELS
from workbench.report.appendix import appendix_context
from workbench.report.characteristics import characteristics_table
from workbench.report.checklist import FILLED, reporting_checklist
from workbench.report.formatting import (  # noqa: F401  (re-exported)
    _LABELS,
    _RUN_LABELS,
    _finite,
    _label,
    _metric_order,
    fmt_num,
    fmt_p,
    fmt_sig,
    fmt_time,
    metric_label,
)
from workbench.report.methods import (
    estimate_label,
    limitations,
    methods_paragraph,
    predictor_handling,
    unseen_batch_sentence,
    unseen_batches,
    validation_text,
)
from workbench.report.pdf import print_pdf
from workbench.report.report_figures import FIGURE_SLOTS, _figures  # noqa: F401  (re-exported)
from workbench.report.results import results_dict
from workbench.units import time_phrase

TEMPLATES = Path(__file__).with_name("templates")

SECTIONS = (
    ("methods-summary", "Methods in brief"),
    ("data", "Source of data and participants"),
    ("outcome", "Outcome"),
    ("predictors", "Predictors and their handling"),
    ("sample-size", "Sample size"),
    ("missing", "Missing data"),
    ("model", "Model specification"),
    ("validation-method", "Internal validation"),
    ("performance", "Model performance"),
    ("calibration", "Calibration"),
    ("incremental", "Incremental value of imaging"),
    ("decision", "Decision curves"),
    ("external", "External validation"),
    ("figures", "Figures"),
    ("limitations", "Limitations"),
    ("appendix", "Appendix: baseline survival and the values that reproduce predictions"),
    ("software", "Software and reproducibility"),
    ("checklist", "Reporting checklist"),
)
"""Section ids and headings, in report order (the title block comes first, id ``title``)."""

_GLOBAL = ("harrell_c", "uno_c", "mean_auc", "ibs", "null_ibs", "ipa_integrated")
_CALIBRATION = ("ici", "e50", "e90", "cal_slope", "oe_ratio")
_EXT_CALIBRATION = ("oe_ratio", "cal_slope", "ici")


@dataclass(frozen=True)
class ReportFiles:
    """Paths of a written report (``pdf`` is None when no PDF was asked for)."""

    html: Path
    pdf: Path | None


# ------------------------------------------------------------------ formatting


def _short_paths(text: str, spec) -> str:
    """The study file as run, with data file locations cut to their names (no machine paths in a report)."""
    paths = [spec.data.features, spec.data.clinical]
    if spec.external is not None:
        paths += [spec.external.features, spec.external.clinical]
    for p in (p for p in paths if p):
        text = text.replace(f'"{p}"', f'"{Path(p).name}"')
    return text


# ------------------------------------------------------------------ context


def _perf_rows(estimates: dict, names, unit) -> list[dict]:
    return [{"label": metric_label(n, unit), "cells": [estimates[m].get(n) for m in estimates]} for n in names]


def _group_context(d: dict, horizons) -> dict:
    """Per-centre / per-scanner tables (report/heterogeneity.py); empty when the run has none."""
    from workbench.report.heterogeneity import heterogeneity_context

    lead = [k for k in ("combined", "clinical") if k in d.get("models", {})]
    labels = {k: _label(k) for k in d.get("models", {})}

    def rows(block):
        out = heterogeneity_context(block, horizons, labels)
        return [r for r in out if not lead or r["model"] in {labels[k] for k in lead}]

    ext = (d.get("external") or {}).get("by_group")
    return {"ext_groups": rows(ext), "loco_groups": rows((d.get("validation") or {}).get("by_group"))}


def _conditional_context(d: dict) -> dict | None:
    """Observed conditional survival by risk group of the lead model (combined, else clinical)."""
    lead = next((k for k in ("combined", "clinical") if k in d.get("models", {})), None)
    block = ((d["models"][lead].get("risk_groups") or {}).get("conditional_survival") or {}) if lead else {}
    cohorts = [{"name": n, "rows": rows} for n, rows in block.items() if rows]
    return {"model": _label(lead), "cohorts": cohorts} if cohorts else None


def report_context(result, *, include_ids: bool = False, figures: bool = True) -> dict:
    """Everything the report template shows, as plain data (numbers from ``results_dict``)."""
    d = results_dict(result)
    spec, s = result.spec, d["cohort"]["summary"]
    unit, horizons = s["time_unit"], list(spec.horizons)
    perf = {k: m["performance"] for k, m in d["models"].items()}
    names = _metric_order(next(iter(perf.values())).keys(), horizons)
    cal_rows = [{"model": _label(k), "horizon": f"{h:g}", "cells": [perf[k].get(f"{c}@{h:g}") for c in _CALIBRATION]}
                for k in perf for h in horizons]
    models = []
    for k, m in d["models"].items():
        bs = m.get("baseline_survival")
        xm = bs["x_mean"] if bs else {}
        coefs = [{**r, "x_mean": xm.get(r["design_column"])} for r in m["coefficients"]]
        sig = None
        if "signature" in m:
            freq = m.get("selection_frequency", {}).get("frequency", {})
            sig = {**m["signature"], "rows": [{"feature": f, "family": feature_family(f), "coef": c,
                                               "freq": freq.get(f, 0.0) if freq else None}
                                              for f, c in m["signature"]["coefficients_per_sd"].items()]}
        epp = m["n_events"] / len(m["coefficients"]) if m["coefficients"] and m["kind"] == "cox" else None
        models.append({"name": k, **m, "coefs": coefs, "sig": sig, "epp": epp,
                       "baseline": list(zip(bs["horizons"], bs["survival"], strict=True)) if bs else []})
    comps = []
    for k, c in d["comparison"].items():
        diffs = [{"label": metric_label(n, unit), **c["differences"][n]}
                 for n in _metric_order(c["differences"], horizons) + [f"{x}@{h:g}" for h in horizons for x in ("ici",)]
                 if n in c["differences"]]
        comps.append({**c, "label": _label(k), "base_label": _label(c["baseline"]), "diffs": diffs,
                      "equal": k in equal_models(result.models)})
    vcd = d.get("volume_comparison") or {}

    def volume_comp(block):
        if not block:
            return None
        vm = d["models"].get(block["baseline"]) or {}
        last = (vm.get("coefficients") or [{}])[-1].get("design_column", "")
        return {**block, "label": _label(block["model"]), "base_label": _label(block["baseline"]),
                "volume_feature": vcd.get("volume_feature"),
                "volume_scale": "on the log2 scale, hazard ratio per doubling" if last.startswith("log2(")
                else "untransformed (a training value was not positive)",
                "diffs": [{"label": metric_label(n, unit), **block["differences"][n]}
                          for n in _metric_order(block["differences"], horizons)]}

    ext = None
    if d["external"] is not None:
        e = d["external"]
        eperf = {k: m["external_performance"] for k, m in d["models"].items() if "external_performance" in m}
        seen = set(s["batches"])
        ext = {**e, "perf_rows": _perf_rows(eperf, names, unit), "models": [_label(k) for k in eperf],
               "cal_rows": [{"model": _label(k), "horizon": f"{h:g}",
                             "cells": [eperf[k].get(f"{c}@{h:g}") for c in _EXT_CALIBRATION]}
                            for k in eperf for h in horizons],
               "cal_labels": [_LABELS[c] for c in _EXT_CALIBRATION],
               "unseen": unseen_batches(result),
               "unseen_text": unseen_batch_sentence(result) if unseen_batches(result) else "",
               "batch_rows": [(b, n, b in seen) for b, n in e["batches"].items()],
               "comps": [{**c, "label": _label(k), "diffs": [{"label": metric_label(n, unit), **c["differences"][n]}
                                                             for n in _metric_order(c["differences"], horizons)]}
                         for k, c in e["comparison"].items()],
               "volume_comp": volume_comp(vcd.get("external"))}
    prep = result.prepared
    ids = None
    if include_ids:
        ids = {"incomplete": list(prep.incomplete_ids), "one_table": list(prep.cohort.source.dropped_ids)}
    checklist = reporting_checklist(result)
    return {
        "d": d, "caution": CAUTION, "title": spec.name, "unit": unit, "horizons": horizons,
        "sections": SECTIONS, "summary": s, "spec": spec,
        "followup": followup_text(s["median_followup"], s["median_followup_ci"], unit, s["max_followup"]),
        "methods": methods_paragraph(result, d).split("\n\n"),
        "validation_text": validation_text(result, d),
        "estimate_label": estimate_label(d),
        "handling": predictor_handling(result),
        "families": sorted(s["feature_families"].items()),
        "imaging_missing": [m for m in s["missing"] if m["table"] == "imaging"],
        "model_names": [_label(k) for k in perf], "perf_rows": _perf_rows(perf, names, unit),
        "cal_rows": cal_rows, "cal_labels": [_LABELS[c] for c in _CALIBRATION],
        "models": models, "comps": comps, "ext": ext, "ids": ids, "volume_comp": volume_comp(vcd.get("internal")),
        **_group_context(d, horizons),
        "conditional": _conditional_context(d),
        "equal": {MODEL_LABELS.get(k, k): MODEL_LABELS.get(v, v) for k, v in equal_models(result.models).items()},
        "equal_note": EQUAL_NOTE,
        "apparent_only": d["validation"]["method"] == "none",
        "limitations": limitations(result, d),
        "checklist": checklist, "n_filled": sum(i.status == FILLED for i in checklist),
        "study_text": _short_paths(result.study_text, spec),
        "figures": _figures(result, d) if figures else {k: [] for k in FIGURE_SLOTS},
        "characteristics": characteristics_table(result),
        "appendix": appendix_context(result),
        "version": d["provenance"]["versions"].get("survival-workbench", ""),
        "ph_global": {k: next((r for r in m.get("proportional_hazards", []) if r["design_column"] == "GLOBAL"), None)
                      for k, m in d["models"].items()},
    }


def _css_string(text: str) -> Markup:
    """Text as a quoted CSS string; '<' is escaped so that it cannot close the style element."""
    body = re.sub(r'(["\\])', r"\\\1", str(text)).replace("\n", " ").replace("<", "\\3C ")
    return Markup(f'"{body}"')


def _environment() -> jinja2.Environment:
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(TEMPLATES)),
                             autoescape=jinja2.select_autoescape(["html", "j2"]), undefined=jinja2.StrictUndefined,
                             trim_blocks=True, lstrip_blocks=True)
    # horizons and times as written ("0.5", "1 year"): fixed decimals printed a half-year horizon as "0"
    env.filters.update(num=fmt_num, sig=fmt_sig, p=fmt_p, css_string=_css_string, label=_label, hz=fmt_time,
                       when=time_phrase)
    return env


def render_report(result, *, include_ids: bool = False, figures: bool = True) -> str:
    """The report of a study run as one self-contained HTML document.

    Parameters
    ----------
    result : StudyResult
    include_ids : bool
        List the identifiers of patients set aside (complete-case drops, ids
        found in only one table). Off by default: the report can then leave the
        hospital without identifiers.
    figures : bool
        Draw the figures (turn off for a quick text-only look).
    """
    token = _RUN_LABELS.set(model_labels(result.models))
    try:
        ctx = report_context(result, include_ids=include_ids, figures=figures)
        env = _environment()
        ctx["css"] = Markup(env.get_template("report.css.j2").render(caution=CAUTION, title=ctx["title"]))
        return env.get_template("report.html.j2").render(**ctx)
    finally:
        _RUN_LABELS.reset(token)


def write_report(result, out_dir, *, pdf: bool = True, include_ids: bool = False) -> ReportFiles:
    """Write ``report.html`` (and ``report.pdf``) for a study run into ``out_dir``.

    Parameters
    ----------
    result : StudyResult
        From :func:`workbench.workflow.run_study`.
    out_dir : path
        Folder to write into (created if needed).
    pdf : bool
        Also print the HTML to PDF with headless Chromium (see :mod:`workbench.report.pdf`).
    include_ids : bool
        Print identifiers of patients set aside (off by default).

    Returns
    -------
    ReportFiles

    Raises
    ------
    ReportError
        When a PDF is asked for and no Chromium is installed (pass ``pdf=False``).
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    html = out / "report.html"
    html.write_text(render_report(result, include_ids=include_ids), encoding="utf-8")
    return ReportFiles(html=html, pdf=print_pdf(html, out / "report.pdf") if pdf else None)
