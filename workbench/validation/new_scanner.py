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


def new_scanner_calibration(models, cohort, horizons, policy: str, minimum: int) -> list[dict]:
    """Per model, adjusted new scanner and horizon: O/E and ICI harmonised vs left unadjusted.

    Empty unless ``policy`` is "estimate" and a scanner absent from training has at
    least ``minimum`` patients in ``cohort``. Each row: ``model``, ``scanner``, ``n``,
    ``horizon``, ``oe_harmonised``, ``oe_unadjusted``, ``ici_harmonised``,
    ``ici_unadjusted`` (point estimates on the scanner's patients, no intervals).
    """
    if policy != "estimate" or cohort.batch is None:
        return []
    labels = np.asarray(cohort.batch).astype(str)
    h = tuple(float(x) for x in horizons)
    rows = []
    for name, m in models.items():
        if not hasattr(m, "harmonisation_inputs"):
            continue
        X, C, combat = m.harmonisation_inputs(cohort)
        if combat is None:
            continue
        fresh = combat.new_batches(X, cohort.batch, C)
        if not fresh:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the unadjusted twin warns about the very rows it leaves alone
            both = {"harmonised": m.predict_survival(cohort, h),
                    "unadjusted": _with_policy(m, cohort, "reference").predict_survival(cohort, h)}
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
    rows.sort(key=lambda r: (r["model"], r["scanner"], r["horizon"]))
    return rows
