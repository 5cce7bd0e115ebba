"""What a study asks for, as frozen dataclasses: :class:`StudySpec` and its sections.

One dataclass a section of the study file (``[data]``, ``[imaging]`` with its
harmonisation, reduction, penalty and reproducibility tables, ``[models]``,
``[validation]``, ``[external]``, ``[added_value]``, ``[figures]``), with the
defaults a study file may leave out. Building a :class:`StudySpec` checks it
(``study_rules.py``); reading and writing the TOML file is in ``study.py``, from
where these classes are usually imported.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from workbench.cohort.io import ColumnMap
from workbench.models.stability import DEFAULT_MAX_FALSE, DEFAULT_PAIRS, DEFAULT_THRESHOLD
from workbench.preprocess.imaging_options import DEFAULT_MIN_ICC, DEFAULT_MIN_NEW_BATCH
from workbench.preprocess.predictor_spec import PredictorSpec
from workbench.study_rules import check_spec


@dataclass(frozen=True)
class DataSpec:
    """The input tables and what their columns mean (``features`` None: a clinical-only study)."""

    features: str | None = None
    clinical: str = ""
    id: str = "patient_id"
    time: str = "time"
    event: str = "event"
    time_unit: str = "months"
    event_codes: tuple[str, ...] | None = None
    censor_codes: tuple[str, ...] | None = None
    competing_codes: tuple[str, ...] | None = None  # codes of competing events (the competing-risks route)
    centre: str | None = None
    batch: str | None = None
    on_unmatched: str = "error"
    drop_unusable_features: bool = False
    features_sheet: str | None = None  # Excel: the sheet to read
    clinical_sheet: str | None = None
    take_from: tuple[tuple[str, str], ...] = ()  # column in both tables -> "clinical" or "features"
    repeats: str | None = None  # second measurements of some patients' features (reproducibility)
    repeats_sheet: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "take_from", ColumnMap(take_from=dict(self.take_from or ())).take_from)

    def column_map(self) -> ColumnMap:
        return ColumnMap(
            id=self.id,
            time=self.time,
            event=self.event,
            time_unit=self.time_unit,
            event_codes=self.event_codes,
            censor_codes=self.censor_codes,
            competing_codes=self.competing_codes,
            centre=self.centre,
            batch=self.batch,
            take_from=self.take_from,
        )


@dataclass(frozen=True)
class ExternalSpec:
    """An external validation cohort with the same columns as the training data."""

    features: str | None = None
    clinical: str = ""
    features_sheet: str | None = None
    clinical_sheet: str | None = None


@dataclass(frozen=True)
class HarmoniseSpec:
    """ComBat harmonisation of imaging features by scanner / batch."""

    method: str = "combat"  # "combat" or "none"
    protect: tuple[str, ...] = ()  # clinical predictors whose effects must be preserved
    unseen_batch: str = "error"  # "error", "reference" or "estimate"
    empirical_bayes: str = "parametric"  # "parametric", "nonparametric" or "none"
    min_new_batch: int = DEFAULT_MIN_NEW_BATCH  # patients of an unseen scanner needed by "estimate"
    reference_scanner: str | None = None  # harmonise every scanner to this one (its rows unchanged)


@dataclass(frozen=True)
class ReduceSpec:
    """Filters applied to the imaging pool before penalised regression."""

    min_variance: float = 1e-8
    correlation: float = 0.90
    screen: bool = False
    screen_fdr: float = 0.10


@dataclass(frozen=True)
class PenaltySpec:
    """The LASSO / elastic-net Cox penalty and how it is chosen."""

    l1_ratio: float = 1.0
    rule: str = "1se"  # "1se" or "min"
    folds: int = 5
    n_alphas: int = 50
    path_stop_ratio: float = 0.05
    selection: str = "cv"  # "cv" (penalty chosen by cross-validation) or "stability" (stability selection)
    stability_pairs: int = DEFAULT_PAIRS  # complementary pairs of half-samples
    stability_threshold: float = DEFAULT_THRESHOLD  # selection probability a feature must reach
    stability_max_false: float = DEFAULT_MAX_FALSE  # bound on the expected number of false selections


@dataclass(frozen=True)
class ReproducibilitySpec:
    """[imaging.reproducibility]: features whose ICC on the [data] repeats table is below min_icc are removed."""

    form: str = "ICC(3,1)"  # "ICC(1,1)", "ICC(2,1)" (absolute agreement) or "ICC(3,1)" (consistency)
    min_icc: float = DEFAULT_MIN_ICC


@dataclass(frozen=True)
class ImagingSpec:
    """Which feature columns form the imaging pool and how the signature is built."""

    include: tuple[str, ...] = ("*",)  # glob patterns or prefixes such as "cm_*"
    exclude: tuple[str, ...] = ()
    volume_feature: str | None = None
    harmonise: HarmoniseSpec = field(default_factory=HarmoniseSpec)
    reduce: ReduceSpec = field(default_factory=ReduceSpec)
    penalty: PenaltySpec = field(default_factory=PenaltySpec)
    reproducibility: ReproducibilitySpec = field(default_factory=ReproducibilitySpec)


@dataclass(frozen=True)
class ForestSpec:
    trees: int = 200
    min_leaf: int = 15
    max_features: str = "sqrt"
    time_grid: int = 100


@dataclass(frozen=True)
class CombinedSpec:
    """[models.combined]: how the signature term of the combined model is estimated."""

    coefficient: str = "prevalidated"  # "prevalidated" (out-of-fold scores) or "in_sample"
    prevalidation_folds: int = 5
    shrinkage: str = "none"  # "none" or "cross_validated_slope"


@dataclass(frozen=True)
class ModelsSpec:
    fit: tuple[str, ...] = ("clinical", "combined")
    baseline: str = "clinical"
    forest: ForestSpec = field(default_factory=ForestSpec)
    risk_groups: int = 3  # quantile groups of the training risk scores (figures, bundle, apply, estimate)
    combined: CombinedSpec = field(default_factory=CombinedSpec)


@dataclass(frozen=True)
class FiguresSpec:
    """[figures]: how the figures of a run are drawn."""

    min_at_risk: int = 10  # risk-group survival curves stop below this many patients at risk


@dataclass(frozen=True)
class AddedValueSpec:
    """[added_value]: the permutation test of imaging given the clinical model (0 = not run)."""

    permutations: int = 199
    folds: int = 5


@dataclass(frozen=True)
class ValidationSpec:
    method: str = "bootstrap"
    replicates: int = 200
    folds: int = 5
    repeats: int = 10
    forest_replicates: int = 25
    workers: int = 1
    backend: str = "processes"
    scheduler: str | None = None
    censoring: str = "auto"  # IPCW weights of external / held-out rows: auto, km, km_by_centre, cox
    pooling: str = "dl"  # random-effects pooling across centres/scanners: dl or reml
    uno_tau: float | None = None  # Uno's C truncation time; None: the last horizon

    @property
    def tau(self) -> float | None:
        return None if self.uno_tau is None else float(self.uno_tau)
    estimator: str = "auto"
    interval: str = "two-stage"
    outer_replicates: int = 100
    inner_replicates: int = 10


@dataclass(frozen=True)
class StudySpec:
    """Everything a study run needs, besides the data themselves."""

    name: str
    data: DataSpec
    predictors: tuple[PredictorSpec, ...]
    horizons: tuple[float, ...]
    seed: int = 20261202
    imaging: ImagingSpec = field(default_factory=ImagingSpec)
    models: ModelsSpec = field(default_factory=ModelsSpec)
    validation: ValidationSpec = field(default_factory=ValidationSpec)
    external: ExternalSpec | None = None
    anticipated_r2: float | None = None
    added_value: AddedValueSpec = field(default_factory=AddedValueSpec)
    figures: FiguresSpec = field(default_factory=FiguresSpec)

    def __post_init__(self):
        check_spec(self)


def with_validation(spec: StudySpec, **changes) -> StudySpec:
    """A copy of ``spec`` with validation settings changed (e.g. fewer replicates)."""
    return replace(spec, validation=replace(spec.validation, **changes))
