"""A competing cause of death for an invented cohort (demo data only).

The cohort of :func:`workbench.simulate.simulate_cohort` has one death, driven by the
clinical factors and the tumour's imaging phenotype: here it is read as death from the
cancer. This module adds a death from other causes, independent of it given the
covariates, with a Weibull hazard that depends on age and ECOG only (never on imaging),
drawn from its own random stream so that every existing column stays as it was.

With independent latent times, the cause-specific hazard of each cause is the hazard of
its own latent time, so the truth is two cause-specific Weibull proportional-hazards
models (Beyersmann J, Allignol A, Schumacher M. Competing Risks and Multistate Models
with R. Springer 2012, ch. 3: simulating competing risks through latent times).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from workbench.simulate import SimulatedCohort

__all__ = [
    "OTHER_BETA",
    "OTHER_RATE",
    "OTHER_SHAPE",
    "add_competing_death",
    "draw_other_death",
    "other_cause_lp",
]

OTHER_SHAPE = 1.4
OTHER_RATE = 0.0013
OTHER_BETA = {"age_per_10_years": 0.6, "ecog_1": 0.3, "ecog_2": 0.7}
CAUSE_CODES = ("alive", "cancer", "other")  # 0 censored, 1 cause of interest, 2 competing


def other_cause_lp(age, ecog) -> np.ndarray:
    """True log relative hazard of death from other causes (age in years, ECOG 0-2)."""
    b = OTHER_BETA
    ecog = np.asarray(ecog, dtype=int)
    return (b["age_per_10_years"] * (np.asarray(age, float) - 65.0) / 10.0
            + np.array([0.0, b["ecog_1"], b["ecog_2"]])[ecog])


def draw_other_death(age, ecog, *, random_state) -> np.ndarray:
    """Latent times of death from other causes (months), by inverse-transform sampling."""
    rng = np.random.default_rng(random_state)
    lp = other_cause_lp(age, ecog)
    u = rng.random(np.asarray(lp).size)
    return (-np.log(u) / (OTHER_RATE * np.exp(lp))) ** (1.0 / OTHER_SHAPE)


def add_competing_death(sim: SimulatedCohort, *, random_state) -> tuple[pd.DataFrame, dict]:
    """Add ``followup_cr_months`` and ``death_cause`` to a simulated cohort's clinical table.

    Parameters
    ----------
    sim : SimulatedCohort
        A cohort from :func:`workbench.simulate.simulate_cohort` (it carries the
        unrounded event and censoring times).
    random_state : int or Generator
        Seed of the other-cause death times: a stream of its own, so the existing
        columns of ``sim.clinical`` are left exactly as they were.

    Returns
    -------
    clinical : DataFrame
        ``sim.clinical`` with the two new columns appended at the right.
    truth : dict
        The cause-specific model and the counts of each cause, JSON-serialisable.

    References
    ----------
    .. [1] Bender R, Augustin T, Blettner M. Generating survival times to simulate
       Cox proportional hazards models. Stat Med. 2005;24:1713-1723.
    """
    if sim.event_times is None:
        raise ValueError("the simulated cohort carries no event times; simulate it with workbench.simulate.")
    et = sim.event_times
    if not np.array_equal(et["patient_id"].to_numpy(), sim.clinical["patient_id"].to_numpy()):
        raise ValueError("event times and clinical rows are not in the same order.")
    t_other = draw_other_death(et["age"].to_numpy(), et["ecog"].to_numpy(), random_state=random_state)
    t_cancer, t_censor = et["t_event"].to_numpy(float), et["t_censor"].to_numpy(float)
    time = np.minimum.reduce([t_cancer, t_other, t_censor])
    cause = np.where(t_cancer <= np.minimum(t_other, t_censor), 1,
                     np.where(t_other < np.minimum(t_cancer, t_censor), 2, 0))
    clinical = sim.clinical.copy()
    clinical["followup_cr_months"] = np.maximum(np.round(time, 1), 0.1)
    clinical["death_cause"] = np.asarray(CAUSE_CODES, dtype=object)[cause]
    counts = {code: int(np.sum(cause == k)) for k, code in enumerate(CAUSE_CODES)}
    truth = {
        "columns": {"time": "followup_cr_months", "cause": "death_cause",
                    "codes": {"cancer": "death from the cancer (cause of interest)",
                              "other": "death from other causes (competing)", "alive": "censored"}},
        "seed": int(random_state) if isinstance(random_state, int | np.integer) else None,
        "cause_specific_hazards": {
            "cancer": "the model above: h1(t|x) = rate * shape * t**(shape - 1) * exp(lp_clinical + lp_imaging)",
            "other": {
                "weibull": {"shape": OTHER_SHAPE, "rate": OTHER_RATE},
                "hazard": "h2(t|x) = rate * shape * t**(shape - 1) * exp(lp_other)",
                "log_hazard_ratios": dict(OTHER_BETA),
                "terms": {"age_per_10_years": "(age - 65) / 10, true age in years",
                          "ecog_1": "ECOG 1 vs 0", "ecog_2": "ECOG 2 vs 0 (true ECOG, also where the table is blank)"},
                "imaging": "none: death from other causes does not depend on the tumour's imaging",
            },
        },
        "construction": "latent times independent given the covariates; followup_cr_months = min(cancer death, "
                        "other death, censoring), rounded to 0.1 month (at least 0.1); os_months and status are "
                        "the cancer death and censoring alone, as before",
        "counts": counts,
    }
    return clinical, truth
