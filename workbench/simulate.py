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

import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np
import pandas as pd
from lifelines.utils import concordance_index

from workbench.cohort.outcome import make_outcome
from workbench.errors import SpecError

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

# True log hazard ratios per standard deviation of the (pre-shift) latent feature scale.
PROGNOSTIC_FEATURES: Mapping[str, float] = MappingProxyType({
    "morph_volume_cc": 0.42,
    "morph_sphericity": -0.25,
    "cm_joint_entropy_fbn32": 0.42,
    "szm_glnu_norm_fbn32": -0.30,
    "ngt_coarseness_fbn32": -0.30,
})

# IBSI feature families and abbreviated feature names; texture and histogram features
# come in several discretisation settings, as radiomics software typically exports them.
FAMILIES: dict[str, tuple[str, ...]] = {
    "morph": ("volume_cc", "volume_voxel_cc", "surface_area_cm2", "surface_to_volume",
              "max_diameter_mm", "major_axis_mm", "sphericity", "compactness_1", "compactness_2",
              "asphericity", "spherical_disproportion", "minor_axis_mm", "least_axis_mm",
              "elongation", "flatness", "vol_density_aabb", "area_density_aabb",
              "vol_density_ombb", "vol_density_aee", "vol_density_conv_hull",
              "integrated_intensity", "moran_i", "geary_c", "n_components"),
    "stat": ("mean", "variance", "skewness", "kurtosis", "median", "p10", "p90", "max", "iqr",
             "range", "mad", "rmad", "medad", "cov", "qcod", "energy", "rms", "min"),
    "ih": ("mean", "variance", "skewness", "kurtosis", "median", "entropy", "uniformity",
           "p10", "p90", "max", "mode", "iqr", "range", "mad", "rmad", "medad", "cov", "qcod",
           "max_grad", "min_grad", "min"),
    "cm": ("joint_max", "joint_avg", "joint_var", "joint_entropy", "diff_avg", "diff_var",
           "diff_entropy", "sum_avg", "sum_var", "sum_entropy", "energy", "contrast",
           "dissimilarity", "inv_diff", "inv_diff_norm", "inv_diff_mom", "inv_diff_mom_norm",
           "inv_var", "correlation", "autocorrelation", "cluster_tendency", "cluster_shade",
           "cluster_prominence", "info_corr_1", "info_corr_2"),
    "rlm": ("sre", "lre", "lgre", "hgre", "glnu", "glnu_norm", "rlnu", "rlnu_norm", "r_perc",
            "srlge", "srhge", "lrlge", "lrhge", "gl_var", "rl_var", "rl_entropy"),
    "szm": ("sze", "lze", "glnu_norm", "zsnu", "glnu", "zsnu_norm", "z_perc", "lgze", "hgze",
            "szlge", "szhge", "lzlge", "lzhge", "gl_var", "zs_var", "zs_entropy"),
    "ngt": ("coarseness", "contrast", "busyness", "complexity", "strength"),
}
SETTINGS = ("fbn32", "fbs25", "fbn64")
SETTING_RHO = (1.0, 0.96, 0.93)  # correlation of each setting with the first
SETTING_FAMILIES = ("ih", "cm", "rlm", "szm", "ngt")
SHIFTED_FAMILIES = ("ih", "cm", "rlm", "szm", "ngt")
FAMILY_COUNTS_240 = {"morph": 24, "stat": 18, "ih": 32, "cm": 63, "rlm": 44, "szm": 44, "ngt": 15}
FAMILY_MIN = {"morph": 8, "stat": 4, "ih": 4, "cm": 6, "rlm": 4, "szm": 4, "ngt": 4}
HETEROGENEITY = {"morph": 0.2, "stat": 0.3, "ih": 0.45, "cm": 0.55, "rlm": 0.55, "szm": 0.55,
                 "ngt": 0.5}  # loading of each family factor on a shared heterogeneity factor
# Signed loading on standardised log volume; size-like and non-normalised features track volume.
VOLUME_LOADING = {
    "morph_surface_area_cm2": 0.95, "morph_max_diameter_mm": 0.9, "morph_major_axis_mm": 0.9,
    "morph_minor_axis_mm": 0.85, "morph_least_axis_mm": 0.8, "morph_integrated_intensity": 0.85,
    "morph_surface_to_volume": -0.9, "morph_sphericity": -0.3, "stat_energy": 0.8,
    "rlm_glnu": 0.8, "rlm_rlnu": 0.8, "szm_glnu": 0.75, "szm_zsnu": 0.75, "ngt_coarseness": -0.6,
    "ngt_busyness": 0.55, "cm_joint_entropy": 0.25, "szm_lze": 0.45,
}
LOG_NORMAL = {"morph_volume_cc", "morph_volume_voxel_cc", "morph_surface_area_cm2",
              "morph_max_diameter_mm", "morph_major_axis_mm", "morph_minor_axis_mm",
              "morph_least_axis_mm", "morph_integrated_intensity", "stat_variance", "stat_energy",
              "ih_variance", "cm_cluster_prominence", "rlm_glnu", "rlm_rlnu", "szm_glnu",
              "szm_zsnu", "szm_lze", "ngt_coarseness", "ngt_busyness", "ngt_contrast",
              "ngt_strength"}
# (centre, scale): on the log scale for log-normal features, else on the value scale. Texture
# features get random ranges from the design seed; their units are arbitrary anyway.
VALUE_SCALES = {
    "morph_volume_cc": (np.log(25.0), 1.1), "morph_volume_voxel_cc": (np.log(25.4), 1.1),
    "morph_surface_area_cm2": (np.log(55.0), 0.75), "morph_surface_to_volume": (2.4, 0.5),
    "morph_max_diameter_mm": (np.log(48.0), 0.38), "morph_major_axis_mm": (np.log(42.0), 0.38),
    "morph_minor_axis_mm": (np.log(30.0), 0.36), "morph_least_axis_mm": (np.log(22.0), 0.36),
    "morph_sphericity": (0.62, 0.07), "morph_compactness_1": (0.027, 0.004),
    "morph_compactness_2": (0.25, 0.05), "morph_asphericity": (0.62, 0.12),
    "morph_spherical_disproportion": (1.62, 0.2), "morph_elongation": (0.72, 0.08),
    "morph_flatness": (0.58, 0.08), "morph_vol_density_aabb": (0.42, 0.06),
    "morph_area_density_aabb": (0.55, 0.06), "morph_vol_density_ombb": (0.46, 0.06),
    "morph_vol_density_aee": (0.78, 0.07), "morph_vol_density_conv_hull": (0.82, 0.05),
    "morph_integrated_intensity": (np.log(800.0), 1.1), "morph_moran_i": (0.08, 0.03),
    "morph_geary_c": (0.85, 0.08), "morph_n_components": (1.0, 0.0),
    "stat_mean": (25.0, 18.0), "stat_variance": (np.log(2500.0), 0.5), "stat_skewness": (-0.4, 0.45),
    "stat_kurtosis": (3.8, 1.2), "stat_median": (32.0, 17.0), "stat_p10": (-40.0, 25.0),
    "stat_p90": (70.0, 15.0), "stat_max": (180.0, 40.0), "stat_iqr": (45.0, 10.0),
    "stat_range": (420.0, 90.0), "stat_mad": (38.0, 8.0), "stat_rmad": (26.0, 6.0),
    "stat_medad": (35.0, 8.0), "stat_cov": (2.0, 0.4), "stat_qcod": (0.9, 0.15),
    "stat_energy": (np.log(4.0e6), 1.1), "stat_rms": (60.0, 12.0), "stat_min": (-1000.0, 0.0),
    "ngt_coarseness_fbn32": (np.log(0.004), 0.5),
}
NEAR_DUPLICATE_RHO = {"cm_joint_entropy_fbs25": 0.995, "rlm_glnu_fbs25": 0.995,
                      "ih_entropy_fbs25": 0.995, "morph_volume_voxel_cc": 0.9995}
_NEAR_DUPLICATE_PAIRS = {d: ("morph_volume_cc" if d.startswith("morph") else d.replace("_fbs25", "_fbn32"))
                         for d in NEAR_DUPLICATE_RHO}


def _without_setting(name: str) -> str:
    head, _, tail = name.rpartition("_")
    return head if tail in SETTINGS else name


def _family_counts(n_features: int) -> dict[str, int]:
    caps = {f: len(b) * (len(SETTINGS) if f in SETTING_FAMILIES else 1) for f, b in FAMILIES.items()}
    lo, hi = sum(FAMILY_MIN.values()) + 10, sum(caps.values())
    if not lo <= n_features <= hi:
        raise SpecError(f"n_features must lie between {lo} and {hi}, got {n_features}.")
    counts = {f: int(np.clip(round(n_features * c / 240), FAMILY_MIN[f], caps[f]))
              for f, c in FAMILY_COUNTS_240.items()}
    cycle = ("cm", "rlm", "szm", "ih", "ngt", "stat", "morph")
    i = 0
    while sum(counts.values()) != n_features:
        f = cycle[i % len(cycle)]
        step = 1 if sum(counts.values()) < n_features else -1
        if FAMILY_MIN[f] <= counts[f] + step <= caps[f]:
            counts[f] += step
        i += 1
    return counts


@dataclass(frozen=True)
class _FeatureDesign:
    """The fixed structure of the radiomic features: loadings, value scales, shifts."""

    names: tuple[str, ...]
    family: np.ndarray  # family index of each feature
    base: np.ndarray  # index of each feature's base feature
    rho: np.ndarray  # correlation with the base (discretisation setting)
    base_family: np.ndarray
    base_loadings: np.ndarray  # (n_bases, 4): family factor, secondary factor, volume, unique
    log_normal: np.ndarray
    centre: np.ndarray
    scale: np.ndarray
    sensitivity: np.ndarray  # scanner sensitivity; 0 for unshifted families
    design_seed: int

    @property
    def n_features(self) -> int:
        return len(self.names)

    @property
    def near_constant(self) -> list[str]:
        return [n for n in ("morph_n_components", "stat_min") if n in self.names]

    @property
    def near_duplicates(self) -> list[list[str]]:
        return [[p, d] for d, p in _NEAR_DUPLICATE_PAIRS.items() if d in self.names]

    def latent(self, rng: np.random.Generator, v: np.ndarray) -> np.ndarray:
        """Standardised latent feature values (n, p) before any scanner shift."""
        n, fams = v.size, list(FAMILIES)
        tau = np.array([HETEROGENEITY[f] for f in fams])
        het = rng.normal(size=(n, 1))
        fam_factor = tau * het + np.sqrt(1 - tau**2) * rng.normal(size=(n, len(fams)))
        secondary = rng.normal(size=(n, len(fams)))
        a, s, w, d = self.base_loadings.T
        z_base = (a * fam_factor[:, self.base_family] + s * secondary[:, self.base_family]
                  + w * v[:, None] + d * rng.normal(size=(n, a.size)))
        noise = rng.normal(size=(n, self.n_features))
        return self.rho * z_base[:, self.base] + np.sqrt(1 - self.rho**2) * noise

    def observe(self, z: np.ndarray, scanner: np.ndarray) -> pd.DataFrame:
        """Apply scanner shifts to the latent values and map them to feature values."""
        z_obs = z.copy()
        fams = list(FAMILIES)
        for name in sorted(set(scanner)):
            rows = scanner == name
            for f, (loc, log_scale) in self._shifts(name).items():
                cols = self.family == fams.index(f)
                sens = self.sensitivity[cols]
                z_obs[np.ix_(rows, cols)] = loc * sens + np.exp(log_scale * sens) * z[np.ix_(rows, cols)]
        x = self.centre + self.scale * z_obs
        x = np.where(self.log_normal, np.exp(np.minimum(x, 700.0)), x)
        frame = pd.DataFrame(x, columns=list(self.names))
        # Near-constant features: a component count that is almost always 1, and an
        # intensity minimum clipped at the resegmentation floor of -1000 HU.
        for col, fn in (("morph_n_components", lambda q: 1.0 + (q > 1.75) + (q > 2.33)),
                        ("stat_min", lambda q: np.where(q > 1.75, -1000.0 + 60.0 * (q - 1.75), -1000.0))):
            if col in frame:
                frame[col] = fn(z_obs[:, self.names.index(col)])
        return frame

    def _shifts(self, scanner: str) -> dict[str, tuple[float, float]]:
        # Seeded by the scanner's name, so a scanner's distortion is the same in every
        # cohort, whichever other scanners it appears with.
        rng = np.random.default_rng([self.design_seed, zlib.crc32(scanner.encode())])
        out = {}
        for f in SHIFTED_FAMILIES:
            loc = rng.choice([-1.0, 1.0]) * rng.uniform(0.4, 1.2)
            # Rounded so that the truth file states the parameters exactly.
            out[f] = (round(float(loc), 4), round(float(rng.uniform(-0.35, 0.35)), 4))
        return out

    def describe_shifts(self, scanners: Sequence[str]) -> dict:
        return {s: {f: {"location_sd": loc, "log_scale": ls}
                    for f, (loc, ls) in self._shifts(s).items()} for s in scanners}

    def describe_sensitivity(self) -> dict[str, float]:
        return {n: float(s) for n, s in zip(self.names, self.sensitivity, strict=True) if s > 0}

    def describe_prognostic(self, multiplier: float) -> dict:
        out = {}
        for name, beta in PROGNOSTIC_FEATURES.items():
            j = self.names.index(name)
            log = bool(self.log_normal[j])
            out[name] = {
                "log_hazard_ratio_per_sd": round(beta * multiplier, 6),
                "z": "(ln(x) - centre) / scale" if log else "(x - centre) / scale",
                "centre": float(self.centre[j]),
                "scale": float(self.scale[j]),
            }
        return out


def _build_design(n_features: int, design_seed: int) -> _FeatureDesign:
    counts = _family_counts(int(n_features))
    rng = np.random.default_rng(design_seed)
    fams = list(FAMILIES)
    names, family, base, rho, base_family, loadings = [], [], [], [], [], []
    for fi, (f, bases) in enumerate(FAMILIES.items()):
        first = len(base_family)
        for b in bases:
            key = f"{f}_{b}"
            w = VOLUME_LOADING.get(key, rng.uniform(-0.1, 0.3))
            a, s = rng.uniform(0.8, 0.95), rng.uniform(0.0, 0.3)
            if f == "morph" and b == "volume_cc":
                a, s, w = 0.0, 0.0, 1.0
            a = min(a, np.sqrt(max(1 - w**2 - s**2 - 0.02, 0.0)))
            sign = rng.choice([-1.0, 1.0], p=[0.3, 0.7])
            loadings.append((sign * a, sign * s, w, np.sqrt(max(1 - a**2 - s**2 - w**2, 0.0))))
            base_family.append(fi)
        aliases = {"volume_voxel_cc": "volume_cc"}  # two ways of measuring one volume
        settings = SETTINGS if f in SETTING_FAMILIES else ("",)
        slots = [(k, bi) for k in range(len(settings)) for bi in range(len(bases))]
        for k, bi in slots[:counts[f]]:
            name = f"{f}_{bases[bi]}" + (f"_{settings[k]}" if settings[k] else "")
            names.append(name)
            family.append(fi)
            base.append(first + bases.index(aliases.get(bases[bi], bases[bi])))
            rho.append(NEAR_DUPLICATE_RHO.get(name, SETTING_RHO[k]))
    p = len(names)
    log_normal = np.array([_without_setting(n) in LOG_NORMAL for n in names])
    centre = np.where(log_normal, np.log(10 ** rng.uniform(-0.5, 3.0, p)), 10 ** rng.uniform(-0.5, 2.5, p))
    scale = np.where(log_normal, rng.uniform(0.25, 0.6, p), centre * rng.uniform(0.06, 0.18, p))
    for n, (c, s) in VALUE_SCALES.items():
        if n in names:
            centre[names.index(n)], scale[names.index(n)] = c, s
    # Rounded so that the truth file states them exactly.
    centre, scale = np.round(centre, 6), np.round(scale, 6)
    shifted = np.isin(np.array(family), [fams.index(f) for f in SHIFTED_FAMILIES])
    sensitivity = np.where(shifted, rng.uniform(0.5, 1.5, p), 0.0).round(4)
    for dup, partner in _NEAR_DUPLICATE_PAIRS.items():
        if dup in names:  # near-duplicates stay near-duplicates on every scanner
            sensitivity[names.index(dup)] = sensitivity[names.index(partner)]
    missing = [n for n in PROGNOSTIC_FEATURES if n not in names]
    if missing:
        raise SpecError(f"n_features={n_features} leaves out prognostic features {missing}; use more features.")
    return _FeatureDesign(tuple(names), np.array(family), np.array(base), np.array(rho),
                          np.array(base_family), np.array(loadings), log_normal, centre, scale,
                          sensitivity, int(design_seed))


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
