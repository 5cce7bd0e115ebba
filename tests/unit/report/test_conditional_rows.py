"""Observed conditional survival per risk group (results.json risk_groups.conditional_survival).

Reference: lifelines' KaplanMeierFitter within each group, S(t) / S(s) (Zabor et al., Cancer
2013;119:3589-92: conditional survival is the ratio of the survival curve at t and at s), on
scikit-survival's copy of the GBSG2 trial data.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from lifelines import KaplanMeierFitter
from sksurv.datasets import load_gbsg2

from workbench.report.result_blocks import conditional_rows
from workbench.stats.riskgroups import assign_groups, learn_cutpoints


def test_conditional_rows_are_kaplan_meier_ratios_within_each_group():
    X, y = load_gbsg2()
    time, event = y["time"].astype(float), y["cens"].astype(bool)
    risk = X["pnodes"].to_numpy(float) + 0.01 * X["age"].to_numpy(float)  # any score will do
    model = SimpleNamespace(predict_risk=lambda cohort: SimpleNamespace(values=risk))
    cohort = SimpleNamespace(time=time, event=event)
    cuts = learn_cutpoints(risk, 3)
    rows = conditional_rows(model, cohort, cuts, (365.0, 730.0, 1095.0))
    g = assign_groups(risk, cuts)
    # alive at 365: 730 and 1095; alive at 730: 1095 -> 3 rows per group
    assert len(rows) == 3 * 3
    for r in rows:
        k = {"low": 0, "intermediate": 1, "high": 2}[r["group"]]
        km = KaplanMeierFitter().fit(time[g == k], event[g == k])
        s = km.survival_function_at_times([r["alive_at"], r["horizon"]]).to_numpy()
        assert r["survival"] == pytest.approx(s[1] / s[0], abs=1e-10)
        assert r["ci_lower"] < r["survival"] < r["ci_upper"]
        assert r["at_risk"] == int(np.sum((g == k) & (time > r["alive_at"])))


def test_report_partial_lists_each_row_and_says_where_the_groups_come_from():
    from workbench.report.html import _environment

    rows = [{"group": "low", "alive_at": 12.0, "at_risk": 140, "horizon": 24.0, "survival": 0.91,
             "ci_lower": 0.85, "ci_upper": 0.95},
            {"group": "high", "alive_at": 12.0, "at_risk": 80, "horizon": 36.0, "survival": 0.52,
             "ci_lower": None, "ci_upper": None}]
    env = _environment()
    html = env.get_template("_conditional.html.j2").render(
        conditional={"model": "Clinical + imaging signature", "cohorts": [{"name": "external", "rows": rows}]},
        unit="months")
    assert "External cohort" in html and "Clinical + imaging signature" in html
    assert "0.91<span class=\"ci\">0.85 to 0.95</span>" in html and "0.52</td>" in html
    assert "cut-points learned on the development patients" in html
    assert env.get_template("_conditional.html.j2").render(conditional=None, unit="months").strip() == ""


def test_a_group_with_too_few_patients_at_the_visit_gets_no_estimate():
    from workbench.report.html import _environment

    X, y = load_gbsg2()
    time, event = y["time"].astype(float), y["cens"].astype(bool)
    risk = X["pnodes"].to_numpy(float)
    model = SimpleNamespace(predict_risk=lambda cohort: SimpleNamespace(values=risk))
    cuts = learn_cutpoints(risk, 3)
    rows = conditional_rows(model, SimpleNamespace(time=time, event=event), cuts, (365.0, 2200.0, 2400.0),
                            min_at_risk=60)
    few = [r for r in rows if r["at_risk"] < 60]
    assert few and all(r["survival"] is None and r["ci_lower"] is None for r in few)
    assert all(r["note"] == "fewer than 60 patients at risk" for r in few)
    assert all(r["survival"] is not None and r["note"] == "" for r in rows if r["at_risk"] >= 60)
    html = _environment().get_template("_conditional.html.j2").render(
        conditional={"model": "m", "cohorts": [{"name": "development", "rows": few}]}, unit="days")
    assert "fewer than 60 patients at risk" in html
