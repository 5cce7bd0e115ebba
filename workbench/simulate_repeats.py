"""Repeat measurements (a second segmentation of the same scan) of a simulated cohort, and their truth.

Part of the demo simulator (:mod:`workbench.simulate`): the reproducibility filter of the
workbench is judged against the ICCs these repeats imply.
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import pandas as pd

from workbench.errors import SpecError
from workbench.simulate import NETWORK_HOSPITALS, SimulatedCohort, simulate_cohort
from workbench.simulate_features import _build_design

__all__ = ["REPEAT_ERROR_SD", "REPEAT_SETTING_FACTOR", "population_icc", "repeat_error_sd", "simulate_repeats"]


# Measurement error of a repeat measurement (second segmentation) on the latent scale: SD by
# family, times a factor by discretisation setting (finer grey-level bins reproduce worse).
REPEAT_ERROR_SD = MappingProxyType({"morph": 0.15, "stat": 0.2, "ih": 0.3, "cm": 0.3, "rlm": 0.35, "szm": 0.4,
                                    "ngt": 0.4})
REPEAT_SETTING_FACTOR = MappingProxyType({"fbn32": 1.0, "fbs25": 3.0, "fbn64": 4.0})


def repeat_error_sd(name: str) -> float:
    """SD of the repeat-measurement error of a feature on its standardised latent scale."""
    family, _, rest = name.partition("_")
    setting = rest.rsplit("_", 1)[-1] if "_" in rest else ""
    return REPEAT_ERROR_SD[family] * REPEAT_SETTING_FACTOR.get(setting, 1.0)


def simulate_repeats(sim: SimulatedCohort, n_patients: int = 40, *, random_state=None) -> tuple[pd.DataFrame, dict]:
    """A second measurement (repeat segmentation, same scan) of ``n_patients`` patients, and its truth.

    Each feature's latent value gets an independent error of SD :func:`repeat_error_sd`
    (so the latent ICC is 1 / (1 + SD^2)); the scanner shift and the value mapping are those
    of the first measurement. Returns the table (``patient_id`` and the feature columns) and
    a truth dict with the latent ICC of every feature and those below 0.75.
    """
    if sim.latent is None:
        raise SpecError("this simulated cohort keeps no latent values; simulate it again.")
    model = sim.truth["model"]
    design = _build_design(int(model["n_features"]), int(model["design_seed"]))
    rng = np.random.default_rng(random_state)
    rows = np.sort(rng.choice(len(sim.imaging), size=int(n_patients), replace=False))
    sd = np.array([repeat_error_sd(nm) for nm in design.names])
    z = sim.latent[rows] + rng.normal(size=(rows.size, design.n_features)) * sd
    scanner = sim.imaging["scanner"].to_numpy()[rows]
    table = pd.concat([pd.DataFrame({"patient_id": sim.imaging["patient_id"].to_numpy()[rows]}),
                       design.observe(z, scanner)], axis=1)
    truth = {
        "n_patients": int(rows.size),
        "error_rule": "z_repeat = z + N(0, sd^2) on the latent scale before the scanner shift, sd = family SD x "
                      "setting factor; the scanner shift and value mapping of the first measurement",
        "family_sd": dict(REPEAT_ERROR_SD), "setting_factor": dict(REPEAT_SETTING_FACTOR),
    }
    return table, truth


def population_icc(n_patients: int = 20000, *, random_state=None, hospitals=NETWORK_HOSPITALS,
                   form: str = "ICC(3,1)") -> pd.Series:
    """Each feature's ICC between a first and a repeat measurement in a very large cohort of this design.

    The truth the demo's reproducibility filter is judged against: scanner shifts and the
    feature value mappings make the observed ICC differ from the latent 1 / (1 + sd^2).
    """
    from workbench.preprocess.reproducibility import feature_icc

    big = simulate_cohort(n_patients, random_state=random_state, hospitals=hospitals)
    rep, _ = simulate_repeats(big, n_patients, random_state=None if random_state is None else random_state + 1)
    first = big.imaging.drop(columns=["scanner"]).set_index("patient_id")
    return feature_icc(first, rep.set_index("patient_id"), form)["icc"]
