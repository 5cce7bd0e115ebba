"""Seeded simulator of an invented lung-cancer cohort with clinical and radiomic tables.

Nothing here describes real patients. The simulator exists so that the demo, the
tests and the benchmarks have data whose true structure is known: which clinical
factors matter and how much, which few imaging features carry prognostic signal
beyond stage, and how each scanner distorts the texture features.

Two sources of randomness are kept apart on purpose:

* ``design_seed`` fixes the *world*: feature loadings, value ranges and scanner
  shifts. Cohorts drawn with the same design seed (a training network and an
  external hospital, say) share one truth.
* ``random_state`` draws the *patients* of one cohort.

Survival follows a Weibull proportional-hazards model (Bender et al. 2005);
censoring combines staggered accrual with an administrative end and random loss
to follow-up. Radiomic features are built from latent factors per IBSI feature
family (Zwanenburg et al. 2020), so that features within a family are strongly
correlated, several track tumour volume, and scanner location/scale shifts are
applied after the prognostic signal, which is what batch harmonisation such as
ComBat (Johnson et al. 2007) is meant to undo.

References
----------
.. [1] Bender R, Augustin T, Blettner M. Generating survival times to simulate Cox
   proportional hazards models. Stat Med. 2005;24:1713-1723.
.. [2] Zwanenburg A, Vallieres M, Abdalah MA, et al. The Image Biomarker
   Standardization Initiative. Radiology. 2020;295:328-338.
.. [3] Johnson WE, Li C, Rabinovic A. Adjusting batch effects in microarray
   expression data using empirical Bayes methods. Biostatistics. 2007;8:118-127.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np
import pandas as pd
from lifelines.utils import concordance_index

from workbench.cohort.outcome import make_outcome
from workbench.errors import SpecError
from workbench.simulate_features import PROGNOSTIC_FEATURES, SHIFTED_FAMILIES, _build_design

__all__ = [
    "DESIGN_SEED",
    "EXTERNAL_HOSPITALS",
    "NETWORK_HOSPITALS",
    "HospitalProfile",
    "SimulatedCohort",
    "simulate_cohort",
]

STAGES = ("I", "II", "III", "IV")
HISTOLOGIES = ("adenocarcinoma", "squamous", "other")
CEA_DETECTION_LIMIT = 0.5  # ng/mL; a common lower limit of quantification (common practice)

# Weibull baseline, months. shape > 1: hazard rises slowly after diagnosis.
WEIBULL_SHAPE = 1.2
WEIBULL_RATE = 0.007  # months**-shape, for the reference patient (all terms zero)
ACCRUAL_MONTHS = 60.0  # patients enter uniformly over five years ...
STUDY_END_MONTHS = 72.0  # ... and the study closes a year later: 12-72 months of potential follow-up
LOSS_RATE = 0.003  # per month: random loss to follow-up

DESIGN_SEED = 1357
"""Default seed of the feature design (loadings, value ranges, scanner shifts); picked among
seeds 1000-1399 as the one whose scanner_A-D location shifts differ most in every texture
family, so that batch effects are plain to see in the demo."""

# True log hazard ratios of the clinical terms; their coding is spelled out in ``truth``.
CLINICAL_BETA: Mapping[str, float] = MappingProxyType({
    "age_per_10_years": 0.10,
    "male": 0.05,
    "ecog_1": 0.20,
    "ecog_2": 0.45,
    "stage_II": 0.25,
    "stage_III": 0.50,
    "stage_IV": 0.85,
    "cea_per_doubling": 0.04,
    "histology_squamous": 0.05,
    "histology_other": 0.08,
    "palliative_intent": 0.15,
})





@dataclass(frozen=True)
class HospitalProfile:
    """One invented hospital: its share of patients, case mix and scanners.

    Parameters
    ----------
    name : str
        Hospital name as written in the ``hospital`` column.
    code : str
        Prefix of patient identifiers (``"HB"`` gives ``"HB-0001"``); must be unique
        across every cohort drawn from one design so identifiers never collide.
    weight : float
        Relative share of the cohort's patients.
    scanner_mix : mapping of str to float
        Scanner model name -> share of this hospital's patients scanned on it
        (kept as a sorted tuple of pairs so the profile stays immutable).
    stage_probs : tuple of four floats
        Probabilities of stage I, II, III, IV.
    age_shift : float
        Years added to the mean age (older or younger catchment).
    """

    name: str
    code: str
    weight: float = 1.0
    scanner_mix: Mapping[str, float] = field(default_factory=lambda: {"scanner_A": 1.0})
    stage_probs: tuple[float, float, float, float] = (0.24, 0.13, 0.30, 0.33)
    age_shift: float = 0.0

    def __post_init__(self):
        mix = dict(self.scanner_mix)
        if not mix or any(p < 0 for p in mix.values()) or sum(mix.values()) <= 0:
            raise SpecError(
                f"hospital {self.name!r}: scanner_mix must map scanner names to non-negative "
                f"shares with a positive total, got {mix!r}."
            )
        if len(self.stage_probs) != 4 or any(p < 0 for p in self.stage_probs):
            raise SpecError(
                f"hospital {self.name!r}: stage_probs needs four non-negative probabilities "
                f"(stage I, II, III, IV), got {self.stage_probs!r}."
            )
        if self.weight <= 0:
            raise SpecError(f"hospital {self.name!r}: weight must be positive, got {self.weight}.")
        object.__setattr__(self, "scanner_mix", tuple(sorted(mix.items())))

    def as_dict(self) -> dict:
        return {
            "name": self.name,
            "code": self.code,
            "weight": self.weight,
            "scanner_mix": dict(self.scanner_mix),
            "stage_probs": list(self.stage_probs),
            "age_shift": self.age_shift,
        }


NETWORK_HOSPITALS: tuple[HospitalProfile, ...] = (
    HospitalProfile("Harbourside", "HB", 0.42, {"scanner_A": 0.65, "scanner_B": 0.30, "scanner_C": 0.05},
                    (0.26, 0.14, 0.29, 0.31), 0.0),
    HospitalProfile("Northgate", "NG", 0.33, {"scanner_A": 0.05, "scanner_B": 0.55, "scanner_C": 0.40},
                    (0.22, 0.12, 0.31, 0.35), 1.0),
    HospitalProfile("Millbrook", "MB", 0.25, {"scanner_A": 0.40, "scanner_C": 0.60},
                    (0.20, 0.13, 0.30, 0.37), -1.0),
)
"""The three-hospital training network (invented)."""

EXTERNAL_HOSPITALS: tuple[HospitalProfile, ...] = (
    HospitalProfile("Westmoor", "WM", 1.0, {"scanner_A": 0.30, "scanner_B": 0.20, "scanner_D": 0.50},
                    (0.18, 0.12, 0.32, 0.38), 1.5),
)
"""The external validation hospital (invented); half its scans come from an unseen scanner."""


@dataclass(frozen=True)
class SimulatedCohort:
    """An invented cohort and the truth behind it.

    Attributes
    ----------
    clinical : DataFrame
        One row per patient: ``patient_id, hospital, age, sex, ecog, stage, histology,
        cea_ng_ml, treatment_intent, os_months, status``. ``cea_ng_ml`` holds text as a
        laboratory export would (``"3.2"``, ``"<0.5"``, missing as NaN).
    imaging : DataFrame
        ``patient_id, scanner`` and the radiomic features (after scanner shifts).
    truth : dict
        JSON-serialisable description of the generating model (see ``README``).
    linear_predictors : DataFrame
        ``patient_id, lp_clinical, lp_imaging``: the true log relative hazards.
    latent : ndarray of shape (n, p) or None
        The standardised latent feature values before the scanner shift, in the rows of
        ``imaging`` (for :func:`simulate_repeats`).
    event_times : DataFrame or None
        ``patient_id, t_event, t_censor, age, ecog``: the unrounded event and censoring
        times behind ``os_months`` and the true age and ECOG (before any value is
        blanked), in the rows of ``clinical`` (for
        :func:`workbench.simulate_competing.add_competing_death`).
    """

    clinical: pd.DataFrame
    imaging: pd.DataFrame
    truth: dict
    linear_predictors: pd.DataFrame
    latent: np.ndarray | None = None
    event_times: pd.DataFrame | None = None

    def outcome(self) -> np.ndarray:
        """The overall-survival outcome as the package's structured array."""
        return make_outcome(self.clinical["os_months"].to_numpy(float),
                            self.clinical["status"].to_numpy() == "dead")


def _harrell_c(time: np.ndarray, event: np.ndarray, risk: np.ndarray) -> float:
    # lifelines' O(n log n) implementation expects "higher = longer survival".
    return float(concordance_index(time, -risk, event))


def _clinical(rng, n, hosp_idx, hospitals):
    """Draw the clinical factors; returns a dict of arrays (true values, before masking)."""
    age_shift = np.array([h.age_shift for h in hospitals])[hosp_idx]
    age = np.clip(rng.normal(66.5 + age_shift, 9.0), 32.0, 92.0)
    male = rng.random(n) < 0.56
    stage_p = np.array([np.asarray(h.stage_probs) / np.sum(h.stage_probs) for h in hospitals])
    cum = np.cumsum(stage_p[hosp_idx], axis=1)
    stage = (rng.random(n)[:, None] > cum[:, :-1]).sum(axis=1)  # 0..3
    # Squamous histology is commoner in men and in older patients.
    logit_sq = -1.1 + 0.6 * male + 0.02 * (age - 66.5)
    logit_ot = -1.3 + 0.0 * male
    w = np.column_stack([np.ones(n), np.exp(logit_sq), np.exp(logit_ot)])
    cumh = np.cumsum(w / w.sum(axis=1, keepdims=True), axis=1)
    histology = (rng.random(n)[:, None] > cumh[:, :-1]).sum(axis=1)
    # Performance status worsens with age and stage (ordinal latent variable).
    ecog_latent = 0.03 * (age - 66.5) + 0.35 * stage + rng.normal(size=n)
    ecog = np.searchsorted([0.2, 1.5], ecog_latent)
    # Serum CEA: log-normal, higher with advanced stage and in adenocarcinoma.
    log_cea = 0.15 + 0.38 * stage + 0.35 * (histology == 0) + rng.normal(0.0, 1.25, n)
    cea = np.exp(log_cea)
    logit_cur = np.array([2.6, 1.8, 0.1, -2.8])[stage] - 1.2 * (ecog == 2) - 0.03 * (age - 66.5)
    curative = rng.random(n) < 1.0 / (1.0 + np.exp(-logit_cur))
    return {"age": age, "male": male, "stage": stage, "histology": histology,
            "ecog": ecog, "cea": cea, "curative": curative}


def _clinical_lp(c) -> np.ndarray:
    b = CLINICAL_BETA
    return (b["age_per_10_years"] * (c["age"] - 65.0) / 10.0
            + b["male"] * c["male"]
            + np.array([0.0, b["ecog_1"], b["ecog_2"]])[c["ecog"]]
            + np.array([0.0, b["stage_II"], b["stage_III"], b["stage_IV"]])[c["stage"]]
            + b["cea_per_doubling"] * np.log2(c["cea"] / 5.0)
            + np.array([0.0, b["histology_squamous"], b["histology_other"]])[c["histology"]]
            + b["palliative_intent"] * ~c["curative"])


def _format_cea(rng, cea: np.ndarray) -> np.ndarray:
    text = np.where(cea < CEA_DETECTION_LIMIT, f"<{CEA_DETECTION_LIMIT:g}",
                    np.char.mod("%.1f", np.maximum(cea, CEA_DETECTION_LIMIT))).astype(object)
    text[rng.random(cea.size) < 0.04] = np.nan
    return text


def simulate_cohort(
    n_patients: int = 500,
    *,
    random_state: int | np.random.Generator | None = None,
    hospitals: Sequence[HospitalProfile] = NETWORK_HOSPITALS,
    scanner_mix: Mapping[str, Mapping[str, float]] | None = None,
    imaging_effect: float = 1.0,
    noise_only: bool = False,
    n_features: int = 240,
    design_seed: int = DESIGN_SEED,
) -> SimulatedCohort:
    """Simulate an invented non-small-cell lung cancer cohort with known truth.

    Parameters
    ----------
    n_patients : int
        Number of patients, split across ``hospitals`` by their weights.
    random_state : int, Generator or None
        Seed of the patient draws. Same seed and arguments give identical tables.
    hospitals : sequence of HospitalProfile
        Hospitals contributing patients (default: the three-hospital network).
    scanner_mix : mapping, optional
        Hospital name -> {scanner name: share}, overriding the profiles' scanner mix.
    imaging_effect : float
        Multiplier of the true imaging log hazard ratios (0 switches the imaging
        effect on survival off while keeping the features' link to tumour stage).
    noise_only : bool
        If True the imaging features are drawn independently of every clinical
        factor and of survival: an imaging signature can add nothing.
    n_features : int
        Number of radiomic features, between 44 and 291.
    design_seed : int
        Seed of the feature design and scanner shifts, shared between cohorts.

    Returns
    -------
    SimulatedCohort

    References
    ----------
    .. [1] Bender R, Augustin T, Blettner M. Generating survival times to simulate
       Cox proportional hazards models. Stat Med. 2005;24:1713-1723.
    """
    n = int(n_patients)
    if n < 1:
        raise SpecError(f"n_patients must be at least 1, got {n_patients!r}.")
    if not hospitals:
        raise SpecError("hospitals is empty: give at least one HospitalProfile.")
    hospitals = tuple(hospitals)
    codes = [h.code for h in hospitals]
    if len(set(codes)) != len(codes):
        raise SpecError(f"hospital codes must be unique so patient ids do not collide, got {codes}.")
    if scanner_mix:
        unknown = set(scanner_mix) - {h.name for h in hospitals}
        if unknown:
            raise SpecError(f"scanner_mix names hospitals that are not in the cohort: {sorted(unknown)}.")
        hospitals = tuple(
            HospitalProfile(h.name, h.code, h.weight, scanner_mix.get(h.name, dict(h.scanner_mix)),
                            h.stage_probs, h.age_shift) for h in hospitals)
    design = _build_design(n_features, design_seed)
    rng = np.random.default_rng(random_state)

    weights = np.array([h.weight for h in hospitals], float)
    hosp_idx = np.sort(rng.choice(len(hospitals), size=n, p=weights / weights.sum()))
    c = _clinical(rng, n, hosp_idx, hospitals)

    # Scanner per patient, drawn from the hospital's own mix.
    scanner = np.empty(n, dtype=object)
    for k, h in enumerate(hospitals):
        rows = np.flatnonzero(hosp_idx == k)
        names = [s for s, _ in h.scanner_mix]
        p = np.array([q for _, q in h.scanner_mix], float)
        scanner[rows] = np.asarray(names, dtype=object)[rng.choice(len(names), rows.size, p=p / p.sum())]

    # Standardised log tumour volume: tracks stage unless the features are pure noise.
    # Stage is standardised with the default case mix so the volume scale is the same
    # in every cohort of one design.
    ref = np.asarray(HospitalProfile.__dataclass_fields__["stage_probs"].default)
    ref_mean = float(ref @ np.arange(4))
    stage_std = (c["stage"] - ref_mean) / np.sqrt(float(ref @ (np.arange(4) - ref_mean) ** 2))
    v = rng.normal(size=n) if noise_only else 0.5 * stage_std + np.sqrt(0.75) * rng.normal(size=n)
    latent = design.latent(rng, v)
    features = design.observe(latent, scanner)
    pre_shift_z = {name: latent[:, design.names.index(name)] for name in PROGNOSTIC_FEATURES}

    lp_clin = _clinical_lp(c)
    beta_img = 0.0 if noise_only else float(imaging_effect)
    lp_img = beta_img * sum(b * pre_shift_z[name] for name, b in PROGNOSTIC_FEATURES.items())
    lp_img = np.asarray(lp_img, float) * np.ones(n)

    # Inverse-transform sampling of Weibull PH times (Bender et al. 2005).
    u = rng.random(n)
    t_event = (-np.log(u) / (WEIBULL_RATE * np.exp(lp_clin + lp_img))) ** (1.0 / WEIBULL_SHAPE)
    entry = rng.uniform(0.0, ACCRUAL_MONTHS, n)
    t_admin = STUDY_END_MONTHS - entry
    t_loss = rng.exponential(1.0 / LOSS_RATE, n)
    time = np.minimum.reduce([t_event, t_admin, t_loss])
    dead = t_event <= np.minimum(t_admin, t_loss)
    os_months = np.maximum(np.round(time, 1), 0.1)

    # Identifiers number patients in order of accrual within each hospital.
    order = np.lexsort((entry, hosp_idx))
    ids = np.empty(n, dtype=object)
    for k, h in enumerate(hospitals):
        rows = order[hosp_idx[order] == k]
        ids[rows] = [f"{h.code}-{i:04d}" for i in range(1, rows.size + 1)]
    ecog = pd.array(c["ecog"], dtype="Int64")
    ecog[rng.random(n) < 0.03] = pd.NA
    clinical = pd.DataFrame({
        "patient_id": ids,
        "hospital": np.array([h.name for h in hospitals], dtype=object)[hosp_idx],
        "age": np.round(c["age"], 1),
        "sex": np.where(c["male"], "male", "female").astype(object),
        "ecog": ecog,
        "stage": np.array(STAGES, dtype=object)[c["stage"]],
        "histology": np.array(HISTOLOGIES, dtype=object)[c["histology"]],
        "cea_ng_ml": _format_cea(rng, c["cea"]),
        "treatment_intent": np.where(c["curative"], "curative", "palliative").astype(object),
        "os_months": os_months,
        "status": np.where(dead, "dead", "alive").astype(object),
    })
    imaging = pd.concat([pd.DataFrame({"patient_id": ids, "scanner": scanner}), features], axis=1)
    lps = pd.DataFrame({"patient_id": ids, "lp_clinical": lp_clin, "lp_imaging": lp_img})
    times = pd.DataFrame({"patient_id": ids, "t_event": t_event, "t_censor": np.minimum(t_admin, t_loss),
                          "age": c["age"], "ecog": c["ecog"]})
    ordering = np.argsort(ids.astype(str), kind="stable")
    clinical, imaging, lps, times = (d.iloc[ordering].reset_index(drop=True)
                                     for d in (clinical, imaging, lps, times))
    latent = latent[ordering]

    time_o, dead_o = clinical["os_months"].to_numpy(float), clinical["status"].to_numpy() == "dead"
    lp_c, lp_i = lps["lp_clinical"].to_numpy(), lps["lp_imaging"].to_numpy()
    seen_scanners = sorted(set(scanner))
    truth = {
        "synthetic": True,
        "model": {
            "time_unit": "months",
            "weibull": {
                "shape": WEIBULL_SHAPE, "rate": WEIBULL_RATE,
                "scale_months": round(WEIBULL_RATE ** (-1.0 / WEIBULL_SHAPE), 4),
                "hazard": "h(t|x) = rate * shape * t**(shape - 1) * exp(lp_clinical + lp_imaging)",
            },
            "clinical_log_hazard_ratios": dict(CLINICAL_BETA),
            "clinical_terms": {
                "age_per_10_years": "(age - 65) / 10, age in years",
                "male": "1 if sex is male",
                "ecog_1": "ECOG 1 vs 0", "ecog_2": "ECOG 2 vs 0",
                "stage_II": "vs stage I", "stage_III": "vs stage I", "stage_IV": "vs stage I",
                "cea_per_doubling": "log2(true CEA / 5 ng/mL); the true value is used even "
                                    "where the table shows '<0.5' or a blank",
                "histology_squamous": "vs adenocarcinoma", "histology_other": "vs adenocarcinoma",
                "palliative_intent": "1 if treatment intent is palliative",
            },
            "imaging": {
                "noise_only": bool(noise_only),
                "effect_multiplier": beta_img,
                "prognostic_features": design.describe_prognostic(beta_img),
                "lp_imaging": "sum of beta * z over prognostic features, z as described, "
                              "computed from values before the scanner shift",
            },
            "censoring": {
                "accrual": f"uniform over 0-{ACCRUAL_MONTHS:g} months of calendar time",
                "administrative_end_months": STUDY_END_MONTHS,
                "loss_to_follow_up_rate_per_month": LOSS_RATE,
            },
            "feature_values": "x = centre + scale * z, or x = exp(centre + scale * z) for "
                              "log-normal features; z is standardised latent",
            "scanner_shift_rule": "families " + ", ".join(SHIFTED_FAMILIES) + ": z_observed = "
                                  "location_sd * sensitivity + exp(log_scale * sensitivity) * z; "
                                  "morph and stat features are not shifted",
            "design_seed": int(design_seed),
            "n_features": design.n_features,
            "near_constant_features": design.near_constant,
            "near_duplicate_pairs": design.near_duplicates,
        },
        "scanner_shifts": design.describe_shifts(seen_scanners),
        "scanner_sensitivity": design.describe_sensitivity(),
        "cohort": {
            "seed": int(random_state) if isinstance(random_state, int | np.integer) else None,
            "n_patients": n,
            "n_events": int(dead_o.sum()),
            "event_fraction": round(float(dead_o.mean()), 4),
            "hospitals": [h.as_dict() for h in hospitals],
            "c_index": {
                "method": "Harrell C of the true linear predictor against the tabulated outcome",
                "clinical_lp": round(_harrell_c(time_o, dead_o, lp_c), 4),
                "clinical_plus_imaging_lp": round(_harrell_c(time_o, dead_o, lp_c + lp_i), 4),
                "imaging_lp": round(_harrell_c(time_o, dead_o, lp_i), 4),
            },
        },
    }
    return SimulatedCohort(clinical=clinical, imaging=imaging, truth=truth, linear_predictors=lps, latent=latent,
                           event_times=times)
