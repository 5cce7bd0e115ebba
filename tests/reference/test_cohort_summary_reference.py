"""Cohort summary numbers against lifelines on the GBSG2 data (Schumacher et al. 1994, shipped with scikit-survival)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from workbench.cohort.io import read_cohort
from workbench.cohort.summary import feature_family, format_summary, summarise_cohort
from workbench.errors import LowEventsWarning


@pytest.fixture
def summary(gbsg2_tables, gbsg2_columns):
    c = read_cohort(gbsg2_tables.features, gbsg2_tables.clinical, gbsg2_columns)
    return c, summarise_cohort(c, (365, 730, 1825))


def test_km_at_horizons_match_lifelines(summary):
    c, s = summary
    kmf = KaplanMeierFitter().fit(c.time, c.event)
    ci = kmf.confidence_interval_survival_function_
    for h in s.horizons:
        assert h.survival == pytest.approx(float(kmf.predict(h.horizon)), abs=1e-10)
        # lifelines uses the log(-log) (exponential Greenwood) interval as we do
        row = ci[ci.index <= h.horizon].iloc[-1]
        assert h.ci_lower == pytest.approx(row.iloc[0], abs=1e-6)
        assert h.ci_upper == pytest.approx(row.iloc[1], abs=1e-6)
        assert h.at_risk == int(np.sum(c.time >= h.horizon))


def test_median_followup_is_reverse_km_median_from_lifelines(summary):
    c, s = summary
    rev = KaplanMeierFitter().fit(c.time, ~c.event)
    assert s.median_followup == pytest.approx(rev.median_survival_time_, abs=1e-10)
    med = KaplanMeierFitter().fit(c.time, c.event).median_survival_time_
    assert s.median_survival == pytest.approx(med, abs=1e-10)


def test_counts_families_and_sample_size(summary):
    c, s = summary
    assert (s.n_patients, s.n_events, s.n_censored) == (686, 299, 387)
    assert s.feature_families == {"(no prefix)": 5}
    # horTh (2 levels) + menostat (2) + tgrade (3 levels) = 1 + 1 + 2 parameters
    assert s.n_clinical_parameters == 4
    assert s.events_per_clinical_parameter == pytest.approx(299 / 4)
    assert s.sample_size.n_required >= s.sample_size.n_shrinkage
    text = format_summary(s)
    assert "Median follow-up (reverse Kaplan-Meier)" in text and "Caution:" in text


def test_missingness_is_counted_per_column(gbsg2_tables, gbsg2_columns):
    feat = gbsg2_tables.feat_df.copy()
    feat.loc[[0, 1, 2], "progrec"] = np.nan
    clin = gbsg2_tables.clin_df.copy()
    clin.loc[[4], "menostat"] = None
    pair = gbsg2_tables.write(feat_df=feat, clin_df=clin)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        c = read_cohort(pair.features, pair.clinical, gbsg2_columns)
    s = summarise_cohort(c)
    got = {(m.table, m.column): m.n_missing for m in s.missing}
    assert got == {("imaging", "progrec"): 3, ("clinical", "menostat"): 1}


def test_low_events_per_parameter_warns(gbsg2_tables, gbsg2_columns):
    c = read_cohort(gbsg2_tables.features, gbsg2_tables.clinical, gbsg2_columns)
    with pytest.warns(LowEventsWarning, match=r"only 7\.5 events per candidate clinical parameter"):
        summarise_cohort(c, n_candidate_parameters=40)


def test_feature_family_prefix():
    assert feature_family("cm_contrast_d1") == "cm"
    assert feature_family("morph_volume_cc") == "morph"
    assert feature_family("volume") == "(no prefix)"
