"""The external-calibration limitation sentences follow the numbers they are built from.

The input is the results.json layout (``external_performance`` and ``external.by_group``); the
numbers are set by hand so that each check can change one of them and see the sentence follow.
"""

from __future__ import annotations

import copy

from workbench.report.external_text import (
    external_calibration_sentences,
    worst_external_calibration,
)


def _e(x, lo=None, hi=None):
    return {"estimate": x, "ci_lower": lo, "ci_upper": hi}


def _data():
    perf = {
        "clinical": {"oe_ratio@12": _e(1.05, 0.9, 1.2), "ici@12": _e(0.02, 0.01, 0.04),
                     "oe_ratio@24": _e(0.97, 0.85, 1.1), "ici@24": _e(0.03, 0.01, 0.05)},
        "combined": {"oe_ratio@12": _e(1.44, 1.2, 1.7), "ici@12": _e(0.14, 0.1, 0.19),
                     "oe_ratio@24": _e(1.2, 1.0, 1.4), "ici@24": _e(0.12, 0.08, 0.16)},
    }
    levels = {"scanner_A": 1.1, "scanner_B": 1.2, "scanner_D": 1.9}
    return {
        "study": {"horizons": [12, 24]},
        "models": {k: {"external_performance": v} for k, v in perf.items()},
        "external": {"n": 150, "by_group": {
            "centre": {"levels": ["Westmoor"], "n": {"Westmoor": 150},
                       "estimates": {"combined": {"Westmoor": {"oe_ratio@12": _e(1.44)}}}},
            "scanner": {"levels": list(levels), "n": {"scanner_A": 41, "scanner_B": 26, "scanner_D": 83},
                        "estimates": {"combined": {k: {"oe_ratio@12": _e(v, v - 0.2, v + 0.3)}
                                                   for k, v in levels.items()}}}}},
    }


LABELS = {"clinical": "Clinical Cox", "combined": "Clinical + imaging signature"}


def test_names_the_model_horizon_and_site_that_are_furthest_off():
    text = " ".join(external_calibration_sentences(_data(), LABELS, "months", unseen=("scanner_D",)))
    assert "Clinical + imaging signature model was miscalibrated" in text
    assert "at 12 months observed/expected was 1.44 (95% CI 1.20 to 1.70)" in text
    assert "44% more events than predicted (predicted survival too high)" in text
    assert "ICI 0.140 (95% CI 0.100 to 0.190)" in text
    assert "scanner_D (83 patients, a scanner absent from the development data): observed/expected 1.90" in text
    assert "Westmoor" not in text  # one centre is the whole cohort: not a site comparison
    # the clinical model's 1.05 (interval 0.90 to 1.20) is within the calibrated range
    assert "calibration in the large held for the Clinical Cox model: the largest departure was 1.05" in text


def test_sentence_changes_when_the_numbers_change():
    d = _data()
    base = external_calibration_sentences(d, LABELS, "months", unseen=("scanner_D",))
    # the clinical model now departs most, at 24 months and in the other direction
    d2 = copy.deepcopy(d)
    d2["models"]["clinical"]["external_performance"]["oe_ratio@24"] = _e(0.6, 0.5, 0.7)
    text = " ".join(external_calibration_sentences(d2, LABELS, "months"))
    assert text != " ".join(base)
    assert "Clinical Cox model was miscalibrated" in text and "at 24 months observed/expected was 0.60" in text
    assert "40% fewer events than predicted (predicted survival too low)" in text
    assert worst_external_calibration(d2)["model"] == "clinical"
    # another scanner departs most; it was seen in development, so no flag
    d3 = copy.deepcopy(d)
    d3["external"]["by_group"]["scanner"]["estimates"]["combined"]["scanner_B"]["oe_ratio@12"] = _e(2.5, 2.0, 3.1)
    text = " ".join(external_calibration_sentences(d3, LABELS, "months", unseen=("scanner_D",)))
    assert "scanner_B (26 patients): observed/expected 2.50 (95% CI 2.00 to 3.10)" in text


def test_calibrated_models_are_said_to_hold_and_no_external_gives_nothing():
    d = _data()
    for m in d["models"].values():
        for k, e in m["external_performance"].items():
            e["estimate"] = 1.03 if k.startswith("oe") else 0.02
    text = external_calibration_sentences(d, LABELS, "months")
    assert len(text) == 1 and "held for the Clinical Cox and Clinical + imaging signature models" in text[0]
    assert "1.03" in text[0]
    # outside the range but with an interval that holds 1: not called miscalibrated
    d["models"]["combined"]["external_performance"]["oe_ratio@24"] = _e(1.15, 0.95, 1.35)
    text = external_calibration_sentences(d, LABELS, "months")
    assert len(text) == 1 and "largest departure was 1.15 (95% CI 0.95 to 1.35) at 24 months" in text[0]
    d["external"] = None
    assert external_calibration_sentences(d, LABELS, "months") == []
