"""Per-user choices, cached reads and uploads of the browser front end (the background run is in runs.py).

Everything a user chooses lives in ``st.session_state`` under the keys below;
tables are cached with ``st.cache_data`` (keyed by file digest and column
mapping) and fitted study results with ``st.cache_resource`` (keyed by the data
hash and the study text). The views only call the functions here and the
library's workflow, figures, report and estimate layers.

Uploaded tables are written to a private temporary folder so that the library
can read them like any other file; nothing is logged, and messages shown to the
user name the file, never the temporary folder.
"""

from __future__ import annotations

import hashlib
import importlib
import importlib.util
import re
import tempfile
import warnings
from dataclasses import replace
from pathlib import Path

import streamlit as st

from workbench.app.messages import for_people, plain
from workbench.cohort.io import ColumnMap, file_digest, read_cohort, read_table
from workbench.cohort.summary import CAUTION, summarise_cohort
from workbench.errors import WorkbenchError
from workbench.study import DataSpec, ExternalSpec, StudySpec, dumps_study, read_study

REPO_ROOT = Path(__file__).resolve().parents[2]
DEMO_DIR = REPO_ROOT / "demo_cohort"
DEMO_STUDY = DEMO_DIR / "study.toml"

DEMO_REPLICATES = 20
"""Bootstrap replicates of the quick run in the browser (the study file keeps its own number)."""

# session_state keys
K_SOURCE = "wb_source"  # "demo" or "upload"
K_UPLOAD_DIR = "wb_upload_dir"
K_DATA = "wb_data"  # DataSpec of the chosen tables and column roles
K_STUDY = "wb_study"  # StudySpec being designed (or None)
K_STUDY_NOTE = "wb_study_note"
K_JOB = "wb_job"  # RunJob of the last study run
K_HORIZONS = "wb_horizons"
K_HORIZONS_AUTO = "wb_horizons_auto"  # (unit, data hash) the horizons were proposed for, or None when typed
K_LAST_GOOD = "wb_last_good"  # RunJob of the last run that finished with a result
K_ROLES_OK = "wb_roles_confirmed"  # digests of the tables whose column roles the user confirmed
K_DESIGN_GEN = "wb_design_gen"
K_REPEATS = "wb_repeats"  # path of an uploaded repeat-measurement table, or None
DEMO_NOTE = "The demo study (demo_cohort/study.toml) is loaded."

UPLOAD_TYPES = ["csv", "tsv", "txt", "parquet", "pq", "xlsx", "xlsm", "xls"]


# ------------------------------------------------------------------ messages


UPLOAD_FOLDER = re.compile(r"(?:[^\s'\"]*/)?workbench-upload-[^/\s]+/(?:features|clinical|external_features|"
                           r"external_clinical|patient)/[0-9a-f]{12}/")


def friendly(message: str) -> str:
    """A message for people: machine folders removed (users see file names they know), parser
    internals and command-line flags rewritten (:func:`workbench.app.messages.for_people`)."""
    text = UPLOAD_FOLDER.sub("", str(message))
    roots = [str(REPO_ROOT) + "/"]
    up = st.session_state.get(K_UPLOAD_DIR)
    if up:
        roots.insert(0, str(up) + "/")
    for r in roots:
        text = text.replace(r, "")
    return for_people(text)


def show_error(where: str, exc: BaseException) -> None:
    """Show an error as readable plain text; unexpected errors name their kind, never a traceback."""
    if isinstance(exc, WorkbenchError):
        st.error(plain(f"{where}: {friendly(str(exc))}"))
    else:
        first = str(exc).splitlines()[0] if str(exc) else ""
        st.error(plain(
            f"{where}: something unexpected went wrong ({type(exc).__name__}"
            f"{': ' + friendly(first) if first else ''}). Check the inputs on this page; "
            "if they look right, please report this message."
        ))


def show_warnings(messages) -> None:
    for m in messages:
        st.warning(plain(friendly(m)))


def show_caution() -> None:
    """The caution, once per view (above the view's title)."""
    st.info(f"**Caution.** {CAUTION}")


def not_available(what: str) -> None:
    st.info(f"{what} is not available yet in this version of the workbench.")


def module_available(name: str) -> bool:
    """True when a library layer (e.g. ``workbench.workflow``) is installed."""
    try:
        return importlib.util.find_spec(name) is not None
    except (ImportError, ValueError):
        return False


def load_module(name: str):
    """The module, or None when that layer has not been installed yet."""
    if not module_available(name):
        return None
    return importlib.import_module(name)


# ------------------------------------------------------------------ tables


@st.cache_data(show_spinner=False, max_entries=32)
def table_columns(path: str, digest: str) -> list[str]:
    """Column names of one table (the digest keys the cache on the file's content)."""
    return list(read_table(path).columns)


@st.cache_data(show_spinner=False, max_entries=64)
def column_levels(path: str, digest: str, column: str, limit: int = 30) -> list[str]:
    """Distinct non-blank values of one column, as text (for event codes and levels)."""
    df = read_table(path)
    if column not in df.columns:
        return []
    v = df[column].dropna().astype(str).str.strip()
    return sorted(v[v != ""].unique().tolist())[:limit]


def _record(fn, *args, **kwargs):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = fn(*args, **kwargs)
    return out, tuple(dict.fromkeys(str(w.message) for w in caught))


@st.cache_data(show_spinner="Reading and checking the tables...", max_entries=16)
def load_cohort(features: str, clinical: str, digests: tuple[str, str], columns: ColumnMap,
                on_unmatched: str = "error", drop_unusable: bool = False):
    """The joined, validated cohort and the warnings raised while reading it."""
    return _record(read_cohort, features, clinical, columns, on_unmatched=on_unmatched,
                   drop_unusable_features=drop_unusable)


@st.cache_data(show_spinner=False, max_entries=16)
def cohort_summary(data_hash: str, horizons: tuple[float, ...], _cohort):
    """Cohort summary (and its warnings) for the cohort whose hash is ``data_hash``."""
    return _record(summarise_cohort, _cohort, horizons)


def digests(data: DataSpec) -> tuple[str, str]:
    return file_digest(data.features) if data.features else "", file_digest(data.clinical)


# ------------------------------------------------------------------ session


def demo_study() -> StudySpec:
    return read_study(DEMO_STUDY)


def init_session() -> None:
    """Defaults on first visit: the demo cohort and its study, preselected."""
    ss = st.session_state
    if K_SOURCE in ss:
        return
    ss[K_SOURCE] = "demo"
    try:
        study = demo_study()
    except WorkbenchError:  # a damaged checkout: start empty rather than fail
        study = None
    ss[K_STUDY] = study
    ss[K_DATA] = study.data if study is not None else None
    ss[K_HORIZONS] = tuple(study.horizons) if study is not None else (12.0, 24.0, 36.0)
    ss[K_STUDY_NOTE] = DEMO_NOTE


def load_demo() -> None:
    """The demo cohort and its study, as on a first visit."""
    ss = st.session_state
    ss[K_SOURCE] = "demo"
    study = demo_study()
    ss[K_DATA] = study.data
    ss[K_HORIZONS] = tuple(study.horizons)
    ss[K_HORIZONS_AUTO] = None
    set_study(study, DEMO_NOTE)
    ss[K_DESIGN_GEN] = ss.get(K_DESIGN_GEN, 0) + 1
    for k in [k for k in ss if str(k).startswith("map_")]:
        del ss[k]


def start_own_study() -> None:
    """A clean study for the user's own tables: nothing of the demo (name, patterns, protected
    predictors, external cohort, horizons, note) is carried over. Earlier runs stay, flagged out of date."""
    ss = st.session_state
    ss[K_SOURCE] = "upload"
    ss[K_DATA] = None
    ss[K_STUDY] = None
    ss[K_STUDY_NOTE] = ""
    ss[K_HORIZONS] = ()
    ss[K_HORIZONS_AUTO] = None
    ss[K_ROLES_OK] = None
    ss[K_REPEATS] = None
    ss[K_DESIGN_GEN] = ss.get(K_DESIGN_GEN, 0) + 1
    for k in [k for k in ss if str(k).startswith("map_")]:
        del ss[k]


def is_demo() -> bool:
    return st.session_state.get(K_SOURCE, "demo") == "demo"


def propose_horizons(cohort) -> tuple[float, ...]:
    """Horizons proposed from the cohort's follow-up in its time unit, unless the user typed their own.

    Proposed again whenever the tables or the time unit change.
    """
    from workbench.app.roles import propose_horizons as propose

    ss = st.session_state
    tag = (cohort.time_unit, cohort.source.data_hash)
    auto = ss.get(K_HORIZONS_AUTO)
    if ss.get(K_HORIZONS) and (auto is None or auto == tag):
        return tuple(ss[K_HORIZONS])
    hz = propose(cohort.time, cohort.event, cohort.time_unit)
    ss[K_HORIZONS] = hz
    ss[K_HORIZONS_AUTO] = tag
    return hz


def upload_dir() -> Path:
    ss = st.session_state
    if not ss.get(K_UPLOAD_DIR):
        ss[K_UPLOAD_DIR] = tempfile.mkdtemp(prefix="workbench-upload-")
    return Path(ss[K_UPLOAD_DIR])


def save_upload(uploaded, role: str) -> Path:
    """Write an uploaded table into the session's private folder, named as the user named it.

    The folder is named by the content's hash, so a replaced file (even under the same
    name) gets a new path and every cache keyed on path or content sees the new table.
    """
    name = Path(uploaded.name).name or f"{role}.csv"
    data = uploaded.getvalue()
    digest = hashlib.sha256(data).hexdigest()[:12]
    target = upload_dir() / role / digest / name
    target.parent.mkdir(parents=True, exist_ok=True)
    if not target.exists():
        target.write_bytes(data)
    return target


def current_data() -> DataSpec | None:
    return st.session_state.get(K_DATA)


def current_study() -> StudySpec | None:
    return st.session_state.get(K_STUDY)


def set_study(spec: StudySpec | None, note: str = "") -> None:
    st.session_state[K_STUDY] = spec
    st.session_state[K_STUDY_NOTE] = note


def study_base() -> Path | None:
    """Folder the data paths of a downloaded study file are written relative to."""
    data = current_data()
    if data is None:
        return None
    return Path(data.clinical).resolve().parent


def portable(spec: StudySpec) -> StudySpec:
    """The study with its table paths as they should read in a downloaded study file.

    Uploaded tables (in the session's private folder) are named by their file names
    alone: the study file then goes in the folder that holds the user's tables. Other
    paths are written relative to the clinical table's folder by :func:`study_text`.
    """
    up = str(upload_dir())
    base = study_base() or Path(spec.data.clinical).resolve().parent

    def name(p):  # an uploaded table sits beside the study file, under the name the user gave it
        return str(base / Path(p).name) if str(p).startswith(up) else p

    d = spec.data
    out = replace(spec, data=replace(d, features=name(d.features), clinical=name(d.clinical)))
    if spec.external is not None:
        out = replace(out, external=ExternalSpec(features=name(spec.external.features),
                                                 clinical=name(spec.external.clinical)))
    return out


def study_text(spec: StudySpec) -> str:
    """The study file's text with paths relative to the folder it belongs in (portable)."""
    return dumps_study(portable(spec), base=study_base())


def study_filename(spec: StudySpec | None, suffix: str = ".toml", extra: str = "") -> str:
    """A download name from the study's name (``my_study.toml``, ``my_study_nomogram_24months.png``)."""
    base = re.sub(r"[^a-z0-9]+", "_", (spec.name if spec is not None else "study").lower()).strip("_") or "study"
    return f"{base}{'_' + extra if extra else ''}{suffix}"


def get_cohort():
    """(cohort, warnings) for the chosen tables, or raise the reading error."""
    data = current_data()
    if data is None:
        raise WorkbenchError("no tables are chosen yet; choose them on the Data page.")
    return load_cohort(data.features, data.clinical, digests(data), data.column_map(),
                       data.on_unmatched, data.drop_unusable_features)


def table(df, *, max_rows: int = 40, where=None) -> None:
    """A read-only table tall enough to show its rows without an inner scroll bar (up to ``max_rows``)."""
    target = where if where is not None else st
    height = min(max(len(df), 1), max_rows) * 35 + 38
    target.dataframe(df, hide_index=True, width="stretch", height=height)


# The background study run lives in runs.py; its names stay reachable here.
from workbench.app.runs import (  # noqa: E402, F401
    QUICK_PERMUTATIONS,
    RunJob,
    current_job,
    current_result,
    quick_interval,
    quick_permutations,
    result_is_current,
    result_job,
    run_key,
    run_study_cached,
    show_provenance,
    start_run,
)
