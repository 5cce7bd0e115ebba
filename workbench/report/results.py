"""The results folder of a study run: ``results.json``, CSV tables and a log.

``results.json`` holds every number of the run with its apparent value,
optimism, corrected estimate and interval, plus the study file, seed, input data
hash and package versions (see ``docs/results-file.md``). Patient identifiers
are never written to it. Its sections are built in ``result_blocks.py``, plain JSON
by ``jsonable.py``; the terminal digest is in ``digest.py``.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pandas as pd

from workbench.cohort.codes import code_order
from workbench.cohort.summary import CAUTION, format_summary
from workbench.report.jsonable import jsonable
from workbench.report.naming import hazard_ratio_frame
from workbench.report.result_blocks import (
    _added_value_block,
    _comparison_block,
    _difference_blocks,
    _heterogeneity_blocks,
    _model_block,
    _reproducibility_block,
    _volume_comparison_block,
)
from workbench.units import time_phrase

FORMAT = "workbench-results/1"


def results_dict(result) -> dict:
    """Everything of a :class:`~workbench.workflow.StudyResult` as plain JSON data."""
    v = result.validation
    prep = result.prepared
    summary = jsonable(result.summary)
    summary.pop("dropped_ids", None)  # identifiers never leave the machine in results
    out = {
        "format": FORMAT,
        "caution": CAUTION,
        "study": {"name": result.spec.name, "horizons": list(result.spec.horizons), "file": result.study_text},
        "provenance": jsonable(result.provenance),
        "cohort": {
            "summary": summary,
            "n_read": prep.n_read,
            "n_analysed": prep.cohort.n,
            "n_incomplete_dropped": len(prep.incomplete_ids),
            "incomplete_by_column": prep.incomplete_by_column,
            "n_imaging_pool": len(prep.pool),
            "n_excluded_features": len(prep.excluded_features),
            "n_ids_only_in_one_table": len(prep.cohort.source.dropped_ids),
            # of those: a clinical row but no imaging row, and the reverse (the patient flow's reasons)
            "n_without_imaging_row": len(prep.cohort.source.only_in_clinical),
            "n_without_clinical_row": len(prep.cohort.source.only_in_features),
        },
        "validation": {
            "method": v.method,
            "settings": jsonable(v.settings),
            "n_replicates": jsonable(v.n_replicates),
            "failures": jsonable(v.failures),
            "failure_log": [{"model": f.model, "replicate": int(f.replicate),
                             "fold": None if f.fold is None else int(f.fold), "stage": f.stage, "message": f.message}
                            for f in v.failure_log],
            "dropped_metrics": jsonable(v.dropped_metrics),
            "warning_counts": jsonable(v.warning_counts),
            "notes": list(v.notes),
            "conf_level": v.conf_level,
            "estimator": jsonable(getattr(v, "estimator", {})),
            "interval": getattr(v, "interval", ""),
        },
        "models": {name: _model_block(result, name) for name in result.models},
        "baseline": result.spec.models.baseline,
        "comparison": {name: _comparison_block(c) for name, c in result.comparisons.items()},
        "added_value": {name: _added_value_block(t) for name, t in getattr(result, "added_value", {}).items()},
        "external": None,
        "volume_comparison": _volume_comparison_block(result),
        "warnings": [{"category": c, "message": m} for c, m in result.warnings],
    }
    if result.external is not None:
        ext = result.external_prepared
        out["external"] = {
            "n": ext.cohort.n,
            "n_events": ext.cohort.n_events,
            "n_incomplete_dropped": len(ext.incomplete_ids),
            "batches": {c: int(np.sum(np.asarray(ext.cohort.batch).astype(str) == c))
                        for c in code_order(ext.cohort.batch)}
            if ext.cohort.batch is not None
            else {},
            "comparison": {name: _comparison_block(c) for name, c in result.external_comparisons.items()},
            "new_batches": result.new_batches,
        }
    out["reproducibility"] = _reproducibility_block(result)
    out["harmonisation"] = jsonable(getattr(result, "harmonisation", None))
    _heterogeneity_blocks(result, out)
    _difference_blocks(result, out)
    if getattr(result, "new_site", None):
        out["new_site_sample_size"] = jsonable(result.new_site)
    return out


def performance_table(result, which: str = "internal") -> pd.DataFrame:
    """One row per model and metric: apparent, optimism, estimate, SD and interval."""
    v = result.validation if which == "internal" else result.external
    return v.summary_frame()


def comparison_table(comparisons: dict) -> pd.DataFrame:
    rows = []
    for name, c in comparisons.items():
        for d in c.differences.values():
            rows.append({"model": getattr(c, "model", name), "baseline": c.baseline, **dataclasses.asdict(d)})
    return pd.DataFrame(rows)


def write_results(result, out_dir) -> Path:
    """Write ``results.json``, CSV tables and ``run.log`` into ``out_dir``; returns the JSON path."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    data = results_dict(result)
    path = out / "results.json"
    path.write_text(json.dumps(data, indent=2, allow_nan=False))
    performance_table(result).to_csv(out / "performance.csv", index=False)
    icc_table = getattr(result.prepared, "reproducibility", None)
    if icc_table is not None:
        icc_table.assign(kept=icc_table["icc"] >= result.spec.imaging.reproducibility.min_icc).rename(
            columns={"lower": "ci_lower", "upper": "ci_upper"}).to_csv(out / "feature_icc.csv")
    vc = getattr(result, "volume_comparisons", None) or {}
    extra = {"combined vs volume": vc["internal"]} if "internal" in vc else {}
    comparison_table({**result.comparisons, **extra}).to_csv(out / "comparison.csv", index=False)
    if result.external is not None:
        performance_table(result, "external").to_csv(out / "external_performance.csv", index=False)
        extra = {"combined vs volume": vc["external"]} if "external" in vc else {}
        comparison_table({**result.external_comparisons, **extra}).to_csv(out / "external_comparison.csv",
                                                                          index=False)
    from workbench.report.heterogeneity import group_table

    for which, v in (("external", result.external), ("internal", result.validation)):
        if v is not None and getattr(v, "groups", None):
            group_table(v.groups).to_csv(out / f"{which}_by_group.csv", index=False)
    for name, m in result.models.items():
        if hasattr(m, "hazard_ratio_table"):
            hazard_ratio_frame(m.hazard_ratio_table(), for_csv=True).to_csv(out / f"hazard_ratios_{name}.csv", index=False)
        sel = result.validation.selection.get(name)
        if sel is not None:
            sel.to_frame().to_csv(out / f"selection_{name}.csv", index=False)
    from workbench.study import dumps_study

    # paths relative to the results folder, so the copy runs from there and names no machine path
    (out / "study.toml").write_text(dumps_study(result.spec, base=out))
    log = [format_summary(result.summary), "", "Settings taken by default:"]
    log += run_notes(result.spec) or ["  none"]
    log += ["", "Warnings during the run:"]
    log += [f"  {c}: {m}" for c, m in result.warnings] or ["  none"]
    log += ["", f"Provenance: {json.dumps(data['provenance'])}"]
    (out / "run.log").write_text("\n".join(log) + "\n")
    return path


def run_notes(spec) -> list[str]:
    """Lines for the run log about settings the study left to a default that depends on the data."""
    notes = []
    if not spec.data.batch and spec.imaging.harmonise.method == "none":
        notes.append("  harmonisation: none, because the study names no batch column ([data] batch); "
                     "name one and set [imaging.harmonise] method = 'combat' to harmonise by scanner.")
    if spec.validation.uno_tau is None:
        notes.append(f"  Uno's C truncated at the last horizon ({time_phrase(spec.horizons[-1], spec.data.time_unit)}); "
                     "set [validation] uno_tau to choose another time.")
    return notes
