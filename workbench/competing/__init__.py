"""Competing risks and conditional survival: pure estimators, regression and metrics.

Modules: outcome.py (the competing-risks outcome and predicted cumulative
incidence), cif.py (Aalen-Johansen cumulative incidence), regression.py
(cause-specific Cox and Fine-Gray, absolute risk), absolute_risk.py (one patient's
absolute risk of each cause with confidence limits), metrics.py (AUC, Brier/IPA,
calibration and net benefit for a predicted cumulative incidence),
conditional.py (conditional survival with intervals).
"""
