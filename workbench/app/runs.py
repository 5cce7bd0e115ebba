"""The background study run of the browser front end, and which run the views' numbers come from.

A run goes in a thread (:class:`RunJob`) so that the page stays responsive and can cancel it;
fitted results are cached on the data hash and the study text. :func:`result_job` is the last
run that finished with a result (a cancelled or failed run leaves it in place), and
:func:`show_provenance` says on every view which study and run the numbers come from, flagging
them when the study has changed since.
"""

from __future__ import annotations

import hashlib
import importlib
import threading
import time
import warnings
from dataclasses import dataclass, field, replace

import streamlit as st

from workbench.app import state
from workbench.app.messages import plain
from workbench.app.tables import MIN_CI_REPLICATES
from workbench.cohort.io import file_digest
from workbench.errors import WorkbenchError
from workbench.study import StudySpec, dumps_study

# A quick run (fewer replicates than the study file's) runs the added-value permutation test
# with at most this many permutations: its p-value cannot go below 1 / 20 = 0.05, which the
# page says; the study's own number runs when its replicates are asked for.
QUICK_PERMUTATIONS = 19


def quick_permutations(spec: StudySpec, replicates: int) -> int | None:
    """The permutation count of a run with ``replicates`` (None: the study's own)."""
    if int(replicates) >= spec.validation.replicates or spec.added_value.permutations <= QUICK_PERMUTATIONS:
        return None
    return QUICK_PERMUTATIONS


def quick_interval(spec: StudySpec, replicates: int) -> StudySpec:
    """The study as a run with ``replicates`` computes it: below MIN_CI_REPLICATES the page shows
    no interval, so a quick run skips the two-stage interval's outer samples (most of its time)."""
    if int(replicates) >= MIN_CI_REPLICATES or spec.validation.interval != "two-stage":
        return spec
    return replace(spec, validation=replace(spec.validation, interval="shifted-percentile"))


@st.cache_resource(show_spinner=False, max_entries=4)
def run_study_cached(data_hash: str, text: str, replicates: int, workers: int,
                     _spec: StudySpec, _progress=None, _cancel=None):
    """Fitted study result, cached on the data hash and the study text."""
    workflow = importlib.import_module("workbench.workflow")
    return workflow.run_study(quick_interval(_spec, replicates), progress=_progress, cancel=_cancel,
                              replicates=replicates, workers=workers,
                              permutations=quick_permutations(_spec, replicates))


@dataclass
class RunJob:
    """One study run in a background thread, so the page stays responsive and can cancel it."""

    key: tuple
    spec: StudySpec
    replicates: int
    workers: int
    done: int = 0
    total: int = 0
    message: str = "starting"
    result: object = None
    error: BaseException | None = None
    cancelled: bool = False
    number: int = 1
    exports: object = None
    started: float = field(default_factory=time.monotonic)
    finished: float | None = None
    _cancel: threading.Event = field(default_factory=threading.Event)
    _thread: threading.Thread | None = None

    @property
    def elapsed(self) -> float:
        return (self.finished or time.monotonic()) - self.started

    def remaining(self) -> float | None:
        """Seconds left in the current phase, from the pace of the replicates so far (None when unknown)."""
        if not self.total or not self.done or self._phase_start is None:
            return None
        rate = (time.monotonic() - self._phase_start) / max(self.done - self._phase_done0, 1)
        return rate * (self.total - self.done)

    _phase_start: float | None = None
    _phase_done0: int = 0
    _phase: str = ""

    def start(self) -> RunJob:
        self._thread = threading.Thread(target=self._work, name="workbench-study-run", daemon=True)
        self._thread.start()
        return self

    def _progress(self, done, total, message="") -> None:
        message = str(message or "")
        if message != self._phase or self._phase_start is None:
            self._phase, self._phase_start, self._phase_done0 = message, time.monotonic(), int(done)
        self.done, self.total, self.message = int(done), int(total), message

    def _compute(self):
        return run_study_cached(self.key[0], self.key[1], self.replicates, self.workers,
                                self.spec, self._progress, self._cancel.is_set)

    def _finished(self) -> None:
        from workbench.app import exports

        self.exports = exports.prepare(self.result)  # the Export files are built while the user reads

    def _work(self) -> None:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # the result carries its warning counts
                self.result = self._compute()
        except BaseException as exc:  # noqa: BLE001 - reported in the page, never re-raised
            if self._cancel.is_set():
                self.cancelled = True
            else:
                self.error = exc
        finally:
            if self._cancel.is_set():  # a run cancelled after its last check is discarded all the same
                self.cancelled, self.result = True, None
            if self.result is not None:
                self._finished()
            self.finished = time.monotonic()

    def cancel(self) -> None:
        """Stop the run: the page treats it as cancelled at once and shows the last complete result;
        the thread stops at its next check between replicates and its output is discarded."""
        self._cancel.set()
        self.cancelled = True
        self.finished = time.monotonic()

    @property
    def running(self) -> bool:
        """True while the run goes on and has not been cancelled."""
        return self._thread is not None and self._thread.is_alive() and not self._cancel.is_set()

    @property
    def stopping(self) -> bool:
        """True while a cancelled run's thread finishes the replicates under way."""
        return self._thread is not None and self._thread.is_alive() and self._cancel.is_set()

    def wait(self, seconds: float) -> None:
        if self._thread is not None:
            self._thread.join(seconds)

    def count_text(self) -> str:
        """How far the run is, for the progress bar."""
        return f"{self.message}: {self.done} of {self.total} replicates"


@dataclass
class CompetingJob(RunJob):
    """The competing-risks analysis of the Results page, in the background like a study run."""

    PHASE = "Competing-risks bootstrap"

    def _compute(self):
        from workbench.competing.analysis import run_competing
        from workbench.workflow import RunCancelled

        def progress(done: int, total: int) -> None:
            if self._cancel.is_set():
                raise RunCancelled(f"the competing-risks analysis was stopped ({done} of {total} replicates done).")
            self._progress(done, total, self.PHASE)

        self._progress(0, 0, "Fitting the competing-risks models on all patients")
        return run_competing(self.spec, replicates=self.replicates, workers=self.workers, progress=progress)

    def _finished(self) -> None:
        from workbench.app import competing_exports

        # the Export view's files (competing_results.json, the folder as a zip), written while the user reads
        self.exports = competing_exports.prepare(self.result)


@dataclass
class RefitJob(RunJob):
    """Refits of the clinical + signature arm of a competing-risks analysis for patients' limits
    (:func:`workbench.competing.refit_limits.refit_arms` on the analysis's cohort, study and seed,
    as ``workbench competing-estimate --refits`` makes them), in the background."""

    analysis: object = None

    def _compute(self):
        from workbench.competing.refit_limits import refit_arms
        from workbench.workflow import RunCancelled

        a = self.analysis

        def progress(done: int, total: int) -> None:
            if self._cancel.is_set():
                raise RunCancelled(f"the refits were stopped ({done} of {total} done).")
            self._progress(done, total, "refit")

        self._progress(0, self.replicates, "refit")
        return refit_arms(a.cohort, a.spec, imaging=True, replicates=self.replicates,
                          random_state=int(a.spec.seed), workers=self.workers, progress=progress)

    def count_text(self) -> str:
        return f"Refit {self.done} of {self.total}"

    def _finished(self) -> None:
        pass  # the refits are the result: the patient subsection keeps them with its analysis


def run_key(spec: StudySpec, replicates: int, workers: int) -> tuple:
    d = spec.data
    h = hashlib.sha256()
    paths = [d.features, d.clinical]
    if spec.external is not None:
        paths += [spec.external.features, spec.external.clinical]
    for p in paths:
        h.update((file_digest(p) if p else "").encode())  # no features table: a clinical-only study
    return (h.hexdigest(), dumps_study(spec), int(replicates), int(workers))


def start_run(spec: StudySpec, replicates: int, workers: int) -> RunJob:
    from workbench.app import workers as app_workers

    app_workers.warm()  # the figure and file workers start (and load their layers) while the run goes on
    job = RunJob(run_key(spec, replicates, workers), spec, int(replicates), int(workers)).start()
    job.number = int(st.session_state.get("wb_run_number", 0)) + 1
    st.session_state["wb_run_number"] = job.number
    st.session_state[state.K_JOB] = job
    return job


def current_job() -> RunJob | None:
    return st.session_state.get(state.K_JOB)


def result_job() -> RunJob | None:
    """The run whose results the views show: the latest one that finished with a result.

    A cancelled or failed run leaves the last complete result in place.
    """
    ss = st.session_state
    job = ss.get(state.K_JOB)
    if job is not None and job.result is not None and not job.running:
        ss[state.K_LAST_GOOD] = job
    return ss.get(state.K_LAST_GOOD)


def current_result():
    """The result of the last complete run (see :func:`result_job`), or None."""
    job = result_job()
    return None if job is None else job.result


def result_is_current(job: RunJob | None = None) -> bool:
    """True when the study (tables, column roles and design) is still the one the run used."""
    job = job or result_job()
    spec = state.current_study()
    if job is None or spec is None:
        return False
    try:
        return job.key[:2] == run_key(spec, job.replicates, job.workers)[:2]
    except (OSError, WorkbenchError):
        return False


def show_provenance(what: str = "These numbers") -> bool:
    """Say which study and run the view's numbers come from; flag them when the study changed since.

    Returns True when the numbers are current.
    """
    job = result_job()
    if job is None:
        return False
    spec = job.result.spec
    at = time.strftime("%H:%M", time.localtime(time.time() - (time.monotonic() - (job.finished or job.started))))
    text = (f"{what} come from run {getattr(job, 'number', 1)} of the study \u201c{plain(spec.name)}\u201d "
            f"(finished at {at}, {job.replicates} replicate{'' if job.replicates == 1 else 's'}).")
    current = result_is_current(job)
    if current:
        st.caption(text)
    else:
        st.warning(f"**Out of date.** {text} The study has changed since (tables, column roles or design): "
                   "run it again on the Results page to update them.")
    return current
