"""Render every figure of the demo study into docs/figures/ (PNG, 300 dpi).

Run from the repository root:

    .venv/bin/python docs/render_demo_figures.py [--out docs/figures] [--replicates 20]

Models are fitted on the demo training cohort; curves, discrimination,
calibration and decision curves are shown on the demo's external cohort, with
risk-group cut-points fixed on the training patients. The data are invented
(see demo_cohort/README.md).
"""

from __future__ import annotations

import argparse
import time
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
from sklearn.base import clone

from workbench.errors import WorkbenchWarning
from workbench.figures import (
    decision_curves,
    forest_table,
    km_by_group,
    nomogram_scales,
    patient_values,
    plot_calibration_panels,
    plot_coefficient_path,
    plot_decision_curve,
    plot_forest,
    plot_km_by_group,
    plot_nomogram,
    plot_schoenfeld,
    plot_selection_frequency,
    plot_td_auc,
    risk_groups,
    save_figure,
    td_auc_by_model,
)
from workbench.metrics.calibration import calibration_at
from workbench.models.registry import MODEL_LABELS, build_models
from workbench.prepare import prepare_cohort
from workbench.study import read_study

ROOT = Path(__file__).resolve().parents[1]


def selection_frequencies(model, cohort, n_replicates: int, seed: int) -> dict:
    """Share of bootstrap refits of the signature that keep each feature (demo only;
    the validation engine reports these for a real study)."""
    rng = np.random.default_rng(seed)
    counts: dict[str, int] = {}
    for _ in range(n_replicates):
        idx = rng.integers(0, cohort.n, cohort.n)
        boot = cohort.take(idx)
        sig = clone(model.signature).fit(boot.features, boot.y, groups=boot.ids, batch=boot.batch,
                                         covariates=model._protected(boot))
        for f in sig.selected_features_:
            counts[f] = counts.get(f, 0) + 1
    return {f: c / n_replicates for f, c in counts.items()}


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(ROOT / "docs" / "figures"))
    ap.add_argument("--replicates", type=int, default=20, help="bootstrap refits for selection frequencies")
    args = ap.parse_args(argv)
    out = Path(args.out)
    warnings.simplefilter("ignore", WorkbenchWarning)
    t0 = time.perf_counter()

    spec = read_study(ROOT / "demo_cohort" / "study.toml")
    train = prepare_cohort(spec).cohort
    test = prepare_cohort(spec, external=True).cohort
    spec = replace(spec, models=replace(spec.models, fit=("clinical", "combined")))
    models = build_models(spec)
    for m in models.values():
        m.fit(train)
    clinical, combined = models["clinical"], models["combined"]
    unit = train.time_unit
    horizons = tuple(spec.horizons)
    labels = {k: MODEL_LABELS[k] for k in models}
    sig_train = combined.signature_score(train)
    written = []

    def save(fig, name, widths=("double",)):
        paths = save_figure(fig, out / name, widths=widths, formats=("png",))
        for p in paths:
            final = p.with_name(f"{name}.png")
            p.replace(final)
            written.append(final)

    # nomograms: side by side with one patient, and stacked without
    scales = [
        nomogram_scales(clinical, horizons, time_unit=unit, median_axis=True, name=labels["clinical"]),
        nomogram_scales(combined, horizons, signature_scores=sig_train, time_unit=unit, median_axis=True,
                        name=labels["combined"]),
    ]
    sig_test = combined.signature_score(test)
    patient = patient_values(test, 0, sig_test)
    save(plot_nomogram(scales, patient=patient), "nomogram_patient")
    save(plot_nomogram(scales, layout="rows"), "nomogram_stacked")

    # Kaplan-Meier by risk group: tertiles of the training linear predictor, applied to external patients
    groups = risk_groups(combined.linear_predictor(train), combined.linear_predictor(test), "tertiles")
    km = km_by_group(test.y, groups, time_unit=unit)
    save(plot_km_by_group(km, title="Clinical + imaging: risk tertiles (external cohort)"), "km_risk_groups",
         widths=("single",))

    # discrimination over time
    grid = np.arange(6.0, 49.0, 3.0)
    auc = td_auc_by_model(train.y, test.y, {labels[k]: m.predict_risk(test) for k, m in models.items()}, grid)
    save(plot_td_auc(auc, time_unit=unit, horizons=horizons, title="External cohort"), "td_auc",
         widths=("single",))

    # calibration at each horizon
    curves = {labels[k]: m.predict_survival(test, horizons) for k, m in models.items()}
    cal = {name: [calibration_at(test.y, c, h) for h in horizons] for name, c in curves.items()}
    save(plot_calibration_panels(cal, predicted=curves, time_unit=unit), "calibration")

    # decision curves at the middle horizon
    h = horizons[len(horizons) // 2]
    dca = decision_curves(test.y, curves, h)
    save(plot_decision_curve(dca, time_unit=unit, title="External cohort"), "decision_curve", widths=("single",))

    # hazard ratios
    save(plot_forest(forest_table(combined), title=labels["combined"]), "forest_combined")

    # signature: selection frequency and penalty path
    freq = selection_frequencies(combined, train, args.replicates, spec.seed)
    save(plot_selection_frequency(freq, n_replicates=args.replicates, selected=combined.selected_features_,
                                  title="Features kept in bootstrap refits"),
         "selection_frequency", widths=("single",))
    save(plot_coefficient_path(combined.signature_.path_, title="Imaging signature: penalised path"),
         "coefficient_path", widths=("single",))

    # proportional hazards
    save(plot_schoenfeld(clinical.ph_test(train)), "ph_schoenfeld_clinical")

    for p in written:
        print(p.relative_to(ROOT) if p.is_relative_to(ROOT) else p)
    print(f"{len(written)} figures in {time.perf_counter() - t0:.1f} s")


if __name__ == "__main__":
    main()
