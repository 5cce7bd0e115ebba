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

import importlib.util
from pathlib import Path

import pytest

EXAMPLE = Path(__file__).parents[2] / "examples" / "public_tables.py"


@pytest.fixture(scope="session")
def public_tables():
    spec = importlib.util.spec_from_file_location("public_tables", EXAMPLE)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod
