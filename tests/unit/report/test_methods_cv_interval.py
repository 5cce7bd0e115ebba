"""The methods text of a cross-validated run states the interval the engine computed.

The rule is the corrected resampled t interval of Nadeau & Bengio (Machine Learning
2003;52:239-81); the text must name it (intervals.CV_RULE), give J = folds x repeats and
n_test/n_train = 1/(k - 1) of the run, and not describe a two-stage bootstrap.
"""

from __future__ import annotations

from workbench.report.methods import _interval_text
from workbench.validation.intervals import CV_RULE


def test_cv_interval_text_names_the_corrected_rule_and_the_run_settings():
    v = {"method": "cv", "conf_level": 0.95, "interval": "corrected-t",
         "settings": {"folds": 5, "repeats": 10, "interval": "two-stage", "outer_replicates": 100}}
    t = _interval_text(v)
    assert t.startswith("95% intervals") and CV_RULE in t and "Nadeau & Bengio" in t
    assert "J = 5 x 10" in t and "n_test/n_train = 1/4" in t
    assert "two-stage" not in t and "outer" not in t and "bootstrap samples" not in t


def test_cv_interval_text_names_every_measure_whose_interval_is_withheld():
    # intervals.CV_WITHHELD / CV_WITHHELD_DIFFERENCE list the measures whose cv interval the engine
    # withholds (bench/bench_cv_metrics.py); the methods text must name each of them
    from workbench.validation.intervals import (
        CV_WITHHELD,
        CV_WITHHELD_BANDS,
        CV_WITHHELD_DIFFERENCE,
    )

    v = {"method": "cv", "conf_level": 0.95, "interval": "corrected-t", "settings": {"folds": 5, "repeats": 10}}
    t = _interval_text(v)
    words = {"ici": "ICI", "e50": "E50", "e90": "E90", "ibs": "integrated Brier score",
             "null_ibs": "integrated Brier score", "cal_slope": "calibration slope",
             "oe_ratio": "observed/expected", "idi": "IDI", "idi_events": "IDI", "idi_nonevents": "IDI",
             "net_benefit": "band for the difference in net benefit"}
    for family in {*CV_WITHHELD, *CV_WITHHELD_DIFFERENCE, *CV_WITHHELD_BANDS}:
        assert words[family] in t, family
