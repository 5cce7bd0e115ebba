"""Nomogram of the Fine-Gray model: points to the risk of the cause of interest by each horizon.

The Fine-Gray model gives the cumulative incidence of the cause of interest as
:math:`F(t \\mid x) = 1 - \\{1 - F_0(t)\\}^{\\exp \\eta(x)}`: its complement has the Cox
form, with baseline :math:`1 - F_0(t)`. The nomogram arithmetic of the Cox models
(:func:`workbench.figures.nomogram_points.nomogram_scales`) therefore applies unchanged
to the weighted Cox fit behind the Fine-Gray model, and its probability axes are read
as the risk :math:`1 - S` (``risk_of``). The cause-specific route has no nomogram: its
cumulative incidence combines the hazards of every cause, so it is not a function of one
linear predictor.

References
----------
Fine JP, Gray RJ. A proportional hazards model for the subdistribution of a competing
risk. J Am Stat Assoc 1999;94:496-509.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from workbench.cohort.core import Cohort
from workbench.competing.fitting import FittedArm
from workbench.errors import ModelError
from workbench.figures.nomogram_axes import SIGNATURE_TERM, NomogramScales
from workbench.figures.nomogram_points import nomogram_scales

__all__ = ["incidence_nomogram_scales"]


@dataclass(frozen=True)
class _FineGrayView:
    """What the nomogram arithmetic reads from a fitted model: the fit, the clinical terms, a name."""

    fit_: object
    transformer_: object
    name: str


def incidence_nomogram_scales(arm: FittedArm, train: Cohort, horizons, *, cause_label: str, time_unit: str = "",
                              name: str = "") -> NomogramScales:
    """Scales of the Fine-Gray nomogram of a fitted arm (risk of ``cause_label`` by each horizon).

    ``train`` is the cohort the arm was fitted on: its signature scores set the imaging
    axis and its risk bands, as in the Cox nomograms.
    """
    if arm.fine_gray is None:
        raise ModelError("the arm has no Fine-Gray model (no competing events in its training rows), so there is "
                         "no incidence nomogram to draw.")
    names = tuple(arm.transformer.columns_) + ((SIGNATURE_TERM,) if arm.n_selected else ())
    fit = arm.fine_gray.cox
    if len(names) != len(fit.coef):
        raise ModelError(f"the Fine-Gray fit has {len(fit.coef)} coefficients for {len(names)} design columns.")
    sig = arm.design(train)[:, -1] if arm.n_selected else None
    view = _FineGrayView(replace(fit, names=names), arm.transformer, name)
    return nomogram_scales(view, tuple(np.asarray(horizons, dtype=float)), signature_scores=sig,
                           time_unit=time_unit, name=name, risk_of=cause_label)
