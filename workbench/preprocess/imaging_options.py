"""Allowed values and defaults of the imaging preprocessing options, without heavy imports.

The study-file reader checks settings against these; :mod:`workbench.preprocess.harmonize`
and :mod:`workbench.preprocess.reproducibility` (which need scikit-learn and scipy) use the
same names, so reading a study file stays quick.
"""

from __future__ import annotations

COMBAT_PRIORS = ("parametric", "nonparametric", "none")
UNSEEN_BATCH_POLICIES = ("error", "reference", "estimate")
DEFAULT_MIN_NEW_BATCH = 20  # patients of an unseen scanner needed to estimate its effects (our choice; see ComBat)

ICC_FORMS = ("ICC(1,1)", "ICC(2,1)", "ICC(3,1)")
DEFAULT_MIN_ICC = 0.75
"""Common practice (Koo & Li 2016: 0.75-0.90 'good')."""
