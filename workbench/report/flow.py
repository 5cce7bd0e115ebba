"""Patient flow of a run: who was read, who was set aside and why, who was analysed.

Counts come only from what reading and preparation recorded
(:class:`workbench.prepare.PreparedCohort` and the cohort's
:class:`~workbench.cohort.core.CohortSource`): identifiers found in one table
only (no imaging row, or no clinical row), patients missing a predictor handled
by complete-case analysis (by predictor; one patient may miss several), and the
patients analysed with their events. The external cohort also says how many of
its patients were imaged on a scanner the development data did not have (kept,
standardised without a batch adjustment). Identifiers never appear here.
"""

from __future__ import annotations

import numpy as np

from workbench.figures.flow import FlowColumn, FlowExit, FlowStage


def _labels(result) -> dict:
    return {p.column: (p.label or p.column) for p in result.spec.predictors}


def flow_column(prepared, title: str, labels: dict, unit: str, *, unseen: tuple = (), followup=None) -> FlowColumn:
    """One cohort's stages and exits from its :class:`~workbench.prepare.PreparedCohort`."""
    c = prepared.cohort
    src = c.source
    stages, exits = [], []
    if src.dropped_ids:
        stages.append(FlowStage("Patients in either table", prepared.n_read + len(src.dropped_ids)))
        reasons = []
        if src.only_in_clinical:
            reasons.append(("no imaging row", len(src.only_in_clinical)))
        if src.only_in_features:
            reasons.append(("no clinical row", len(src.only_in_features)))
        exits.append(FlowExit("Not in both tables", len(src.dropped_ids), tuple(reasons)))
    stages.append(FlowStage("Patients in both tables", prepared.n_read))
    # shown even when nobody was excluded: a reader should see that the step was there
    reasons = tuple((f"{labels.get(col, col)} missing", int(k)) for col, k in prepared.incomplete_by_column.items())
    exits.append(FlowExit("Excluded, a complete-case predictor missing", len(prepared.incomplete_ids), reasons))
    detail = [f"{c.n_events} events, {c.n - c.n_events} censored"]
    if followup is not None and np.isfinite(followup):
        detail.append(f"median follow-up {followup:.1f} {unit}")
    if unseen:
        k = int(np.isin(np.asarray(c.batch).astype(str), list(unseen)).sum())
        detail.append(f"{k} imaged on a scanner not in the development data ({', '.join(unseen)})")
    stages.append(FlowStage("Analysed", c.n, tuple(detail)))
    return FlowColumn(title, tuple(stages), tuple(exits))


def patient_flow(result) -> list[FlowColumn]:
    """Flow columns of the development cohort and, when there is one, the external cohort."""
    from workbench.report.characteristics import reverse_km_median
    from workbench.report.methods import unseen_batches

    unit, labels = result.spec.data.time_unit, _labels(result)
    cols = [flow_column(result.prepared, "Development cohort", labels, unit,
                        followup=result.summary.median_followup)]
    if result.external_prepared is not None:
        ext = result.external_prepared
        cols.append(flow_column(ext, "External cohort", labels, unit, unseen=unseen_batches(result),
                                followup=reverse_km_median(ext.cohort.time, ext.cohort.event)))
    return cols
