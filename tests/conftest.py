"""Shared fixtures.

Input-table fixtures are built from the German Breast Cancer Study Group 2 data
(Schumacher et al. 1994) as shipped with scikit-survival, split into an
"imaging features" table (its numeric measurements) and a "clinical" table, so
that reading and validation are exercised on real public data, not invented data.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import settings

# Property tests draw the same examples on every run, so a CI result can be repeated; set
# HYPOTHESIS_PROFILE=explore to search new examples locally.
settings.register_profile("repeatable", derandomize=True, database=None)
settings.register_profile("explore", derandomize=False)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))


def pytest_collection_modifyitems(config, items):
    """Files with a test marked ``slow`` first, each file's tests kept together and in order.

    With parallel test processes (``-n``, one file per process at a time), the long files then
    start at once instead of being left for the end, when the other process has run out of work.
    """
    slow = {item.path for item in items if item.get_closest_marker("slow")}
    items.sort(key=lambda item: item.path not in slow)  # a stable sort keeps the collected order


@dataclass
class TablePair:
    features: Path
    clinical: Path
    feat_df: pd.DataFrame
    clin_df: pd.DataFrame

    def write(self, feat_df=None, clin_df=None, suffix=".csv"):
        """Rewrite the tables (optionally modified) and return the pair."""
        feat_df = self.feat_df if feat_df is None else feat_df
        clin_df = self.clin_df if clin_df is None else clin_df
        f = self.features.with_suffix(suffix)
        c = self.clinical.with_suffix(suffix)
        _write(feat_df, f)
        _write(clin_df, c)
        return TablePair(f, c, feat_df, clin_df)


def _write(df: pd.DataFrame, path: Path) -> None:
    suf = path.suffix.lower()
    if suf == ".csv":
        df.to_csv(path, index=False)
    elif suf == ".tsv":
        df.to_csv(path, index=False, sep="\t")
    elif suf == ".parquet":
        df.to_parquet(path, index=False)
    elif suf == ".xlsx":
        df.to_excel(path, index=False)
    else:
        raise ValueError(suf)


@pytest.fixture(scope="session")
def gbsg2_frames():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)
    ids = [f"GB{i:04d}" for i in range(len(X))]
    feat = pd.DataFrame({"patient_id": ids})
    for c in ("age", "tsize", "pnodes", "progrec", "estrec"):
        feat[c] = X[c].astype(float).to_numpy()
    clin = pd.DataFrame(
        {
            "patient_id": ids,
            "horTh": X["horTh"].astype(str).to_numpy(),
            "menostat": X["menostat"].astype(str).to_numpy(),
            "tgrade": X["tgrade"].astype(str).to_numpy(),
            "time_days": y["time"],
            "status": np.where(y["cens"], "recurrence", "censored"),
        }
    )
    return feat, clin, y


@pytest.fixture(scope="session")
def gbsg2_cohort():
    """Build a Cohort from scikit-survival's GBSG2 with chosen clinical and feature columns.

    ``gbsg2_cohort(clinical_columns, feature_columns)`` returns ``(cohort, y)``: categorical
    columns as text, features as floats, ids "G0", "G1", ..., follow-up in days; ``y`` is the
    shipped outcome array (fields ``cens``, ``time``). ``clinical_columns=None`` takes them all.
    """
    from sksurv.datasets import load_gbsg2

    from workbench.cohort import Cohort, make_outcome

    X, y = load_gbsg2()
    X = X.reset_index(drop=True)

    def build(clinical_columns=None, feature_columns=()):
        cols = list(X.columns) if clinical_columns is None else list(clinical_columns)
        clin = pd.DataFrame({c: X[c].astype(str) if X[c].dtype.name == "category" else X[c] for c in cols})
        feats = (pd.DataFrame({c: X[c].astype(float) for c in feature_columns}) if feature_columns
                 else pd.DataFrame(index=range(len(X))))
        cohort = Cohort(ids=np.array([f"G{i}" for i in range(len(X))]), y=make_outcome(y["time"], y["cens"]),
                        clinical=clin, features=feats, time_unit="days")
        return cohort, y

    return build


@pytest.fixture
def gbsg2_tables(tmp_path, gbsg2_frames):
    feat, clin, _ = gbsg2_frames
    pair = TablePair(tmp_path / "features.csv", tmp_path / "clinical.csv", feat.copy(), clin.copy())
    return pair.write()


@pytest.fixture
def gbsg2_columns():
    from workbench.cohort.io import ColumnMap

    return ColumnMap(
        id="patient_id",
        time="time_days",
        event="status",
        time_unit="days",
        event_codes=("recurrence",),
        censor_codes=("censored",),
    )


@pytest.fixture(scope="session")
def simulated_cohort(tmp_path_factory):
    """A small cohort from the demo generator (invented data, used where the truth is needed).

    Written to CSV and read back through the real reader, as a user's tables would be.
    """
    from workbench.cohort.io import ColumnMap, read_cohort
    from workbench.simulate import simulate_cohort

    sim = simulate_cohort(300, random_state=11, n_features=60)
    d = tmp_path_factory.mktemp("sim")
    sim.imaging.to_csv(d / "imaging.csv", index=False)
    sim.clinical.to_csv(d / "clinical.csv", index=False)
    cols = ColumnMap(
        time="os_months", event="status", event_codes=("dead",), censor_codes=("alive",),
        centre="hospital", batch="scanner",
    )
    return read_cohort(d / "imaging.csv", d / "clinical.csv", cols), sim



@pytest.fixture(scope="session")
def demo_predictors():
    """The clinical predictor specification of demo_cohort/study.toml."""
    from workbench.study import read_study

    return read_study(Path(__file__).parents[1] / "demo_cohort" / "study.toml").predictors



# A small study on the demo generator (invented data): 260 patients, 50 imaging features,
# clinical + combined models, 3 bootstrap replicates run serially. Shared by the workflow,
# report and browser tests so that it runs once per test session.
SMALL_STUDY = """
[study]
name = "small simulated study"
horizons = [12, 24]
seed = 5

[data]
features = "imaging.csv"
clinical = "clinical.csv"
time = "os_months"
event = "status"
event_codes = ["dead"]
censor_codes = ["alive"]
centre = "hospital"
batch = "scanner"

[[predictor]]
column = "age"

[[predictor]]
column = "stage"
kind = "categorical"
reference = "I"

[[predictor]]
column = "ecog"
kind = "ordinal"
levels = ["0", "1", "2"]
missing = "impute"

[imaging]
include = ["*"]
volume_feature = "morph_volume_cc"

[imaging.harmonise]
method = "combat"
protect = ["age"]

[imaging.penalty]
n_alphas = 25

[models]
fit = ["clinical", "combined"]

[validation]
method = "bootstrap"
replicates = 3
backend = "serial"
# the two-stage interval at the smallest size that still gives one (10 outer samples)
outer_replicates = 10
inner_replicates = 1

[added_value]
permutations = 9
folds = 3
"""


@pytest.fixture(scope="session")
def small_study_file(tmp_path_factory):
    from workbench.simulate import simulate_cohort

    sim = simulate_cohort(260, random_state=3, n_features=50)
    d = tmp_path_factory.mktemp("small_study")
    sim.imaging.to_csv(d / "imaging.csv", index=False)
    sim.clinical.to_csv(d / "clinical.csv", index=False)
    (d / "study.toml").write_text(SMALL_STUDY)
    return d / "study.toml"


@pytest.fixture(scope="session")
def small_study_result(small_study_file):
    from workbench.study import read_study
    from workbench.workflow import run_study

    return run_study(read_study(small_study_file))


@pytest.fixture(scope="session")
def public_tables():
    """examples/public_tables.py as a module: public registry datasets split into the two tables."""
    import importlib.util

    script = Path(__file__).parents[1] / "examples" / "public_tables.py"
    spec = importlib.util.spec_from_file_location("public_tables", script)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="session")
def small_competing_study(tmp_path_factory):
    """The demo competing study (invented data, demo_cohort/study_competing.toml) cut to its first
    150 patients and the 24 shape features (``morph_*``), without harmonisation, 3 folds, no external
    cohort, one worker: 50 refits of the whole clinical + signature arm take seconds.

    Returns (study path, folder); the folder holds ``two.csv``, two of its patients with every value
    the combined model reads (clinical, scanner, shape features).
    """
    import tomllib

    import tomli_w

    demo = Path(__file__).resolve().parents[1] / "demo_cohort"
    tmp = tmp_path_factory.mktemp("small_competing")
    doc = tomllib.loads((demo / "study_competing.toml").read_text())
    doc.pop("external", None)
    doc["imaging"]["include"] = ["morph_*"]
    doc["imaging"]["harmonise"] = {"method": "none"}
    doc["imaging"]["penalty"]["folds"] = 3
    doc["models"]["combined"] = {"prevalidation_folds": 3}
    doc["validation"]["workers"] = 1
    clinical = pd.read_csv(demo / "clinical.csv").iloc[:150]
    imaging = pd.read_csv(demo / "imaging.csv")
    imaging = imaging[imaging["patient_id"].isin(clinical["patient_id"])]
    clinical.to_csv(tmp / "clinical.csv", index=False)
    imaging.to_csv(tmp / "imaging.csv", index=False)
    doc["data"]["clinical"], doc["data"]["features"] = str(tmp / "clinical.csv"), str(tmp / "imaging.csv")
    path = tmp / "study.toml"
    path.write_text(tomli_w.dumps(doc))
    shown = ("age", "sex", "ecog", "stage", "cea_ng_ml")
    rows = clinical.iloc[[3, 40]][["patient_id", *shown]].merge(imaging, on="patient_id")
    keep = [*shown, "scanner", *(c for c in imaging.columns if c.startswith("morph_"))]
    rows[keep].to_csv(tmp / "two.csv", index=False)
    return path, tmp
