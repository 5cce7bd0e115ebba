"""The invented world's radiomic features: families, loadings, value scales and scanner shifts.

Part of the demo simulator (:mod:`workbench.simulate`): the fixed structure a ``design_seed``
draws once and every cohort of that design shares. Features are built from latent factors
per IBSI feature family (Zwanenburg et al., Radiology 2020;295:328-338), several track tumour
volume, and scanner location/scale shifts are applied after the prognostic signal.
"""

from __future__ import annotations

import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pandas as pd

from workbench.errors import SpecError

__all__ = ["FAMILIES", "PROGNOSTIC_FEATURES", "SETTINGS", "SHIFTED_FAMILIES"]

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
