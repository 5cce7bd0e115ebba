"""Public-dataset cohorts for the study matrix.

The tables come from datasets shipped in registry packages, split into a features
table and a clinical table by ``examples/public_tables.py`` (the script of the
README walkthrough): German Breast Cancer Study Group 2 and the Veterans'
Administration lung cancer trial (scikit-survival), and the Rossi recidivism data
(lifelines). Every column is a shipped value or computed from shipped values; a
few derived grouping columns (centre, batch codes) are mappings of shipped
categories, and missing cells are made by blanking shipped values, never by
inventing new ones.
"""

from __future__ import annotations




