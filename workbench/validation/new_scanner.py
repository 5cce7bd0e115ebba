"""What harmonising a scanner new to the model changes: calibration of its patients, both ways.

With ``[imaging.harmonise] unseen_batch = "estimate"`` the external patients of a scanner
the development data never had are harmonised from their own features
(:meth:`workbench.preprocess.harmonize.ComBat.new_batches`). This module puts the
consequence next to the alternative: for each harmonising model and each such scanner,
observed/expected and the smoothed ICI at every horizon on that scanner's patients, with
their features harmonised (what the run reports) and left unadjusted (what
``unseen_batch = "reference"`` would have given). The models are the fitted ones, applied
unchanged; only the new scanner's adjustment differs.
"""

from __future__ import annotations

import copy
import warnings

import numpy as np

from workbench.metrics.calibration import calibration_at
from workbench.predictions import SurvivalCurves


def _with_policy(model, cohort, policy: str):
    """A copy of ``model`` whose ComBat step treats unseen scanners by ``policy``."""
    twin = copy.deepcopy(model)
    _, _, combat = twin.harmonisation_inputs(cohort)
    combat.unseen_batch = policy
    return twin


def new_scanner_block(spec, models, cohort) -> dict | None:
    """How the scanners of ``cohort`` unseen in training were harmonised, and what it changed.

    ``{"policy", "min_new_batch", "scanners": [...], "calibration": [...]}``, or None without
    ComBat or a batch column. ``scanners``: per harmonising model and unseen scanner, ``model``,
    ``scanner``, ``n``, ``adjusted`` (estimated from its own features, else left unadjusted: below
    ``min_new_batch`` patients or under ``unseen_batch = "reference"``), ``mean_abs_shift_sd``,
    ``median_sd_ratio``. ``calibration``: per model, adjusted new scanner and horizon,
    ``oe_harmonised``, ``oe_unadjusted``, ``ici_harmonised``, ``ici_unadjusted`` on that scanner's
    patients (point estimates, no intervals; horizons beyond its follow-up left out). Each model's
    new scanner parameters are estimated once and serve both; no outcome enters the estimate.
    """
    h = spec.imaging.harmonise
    if h.method != "combat" or cohort.batch is None:
        return None
    labels = np.asarray(cohort.batch).astype(str)
    records, calibration = [], []
    for name, m in models.items():
        if not hasattr(m, "harmonisation_inputs"):
            continue
        X, C, combat = m.harmonisation_inputs(cohort)
        if combat is None:
            continue
        known = {str(b) for b in combat.batches_}
        fresh = combat.new_batches(X, cohort.batch, C) if h.unseen_batch == "estimate" else {}
        for lab in sorted(set(labels) - known):
            nb = fresh.get(lab)
            records.append({"model": name, "scanner": lab, "n": int((labels == lab).sum()),
                            "adjusted": nb is not None,
                            "mean_abs_shift_sd": None if nb is None else round(nb.shift_sd, 6),
                            "median_sd_ratio": None if nb is None else round(nb.scale_ratio, 6)})
        if fresh:
            calibration += _calibration_rows(name, m, cohort, fresh, spec.horizons, h.min_new_batch)
    records.sort(key=lambda r: (r["model"], r["scanner"]))
    calibration.sort(key=lambda r: (r["model"], r["scanner"], r["horizon"]))
    return {"policy": h.unseen_batch, "min_new_batch": int(h.min_new_batch), "scanners": records,
            "calibration": calibration}


def _calibration_rows(name, m, cohort, fresh: dict, horizons, minimum: int) -> list[dict]:
    labels = np.asarray(cohort.batch).astype(str)
    h = tuple(float(x) for x in horizons)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the unadjusted twin warns about the very rows it leaves alone
        both = {"harmonised": m.predict_survival(cohort, h),
                "unadjusted": _with_policy(m, cohort, "reference").predict_survival(cohort, h)}
    rows = []
    for lab, nb in fresh.items():
        sel = labels == lab
        if nb.n < minimum or sel.sum() < minimum:
            continue
        y = cohort.y[sel]
        for t in h:
            if t >= float(y["time"].max()):
                continue  # no follow-up of this scanner's patients reaches the horizon
            row = {"model": name, "scanner": lab, "n": int(sel.sum()), "horizon": t}
            for key, curves in both.items():
                sub = SurvivalCurves(curves.times, curves.probs[sel], curves.model)
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    cal = calibration_at(y, sub, t)
                row[f"oe_{key}"] = float(cal.observed_expected.ratio)
                row[f"ici_{key}"] = float(cal.smoothed.ici)
            rows.append(row)
    return rows
