"""The app's background competing-risks analysis (workbench.app.runs.CompetingJob).

scikit-survival's load_cgvhd as a clinical-only competing study (the ``cgvhd_study`` fixture).
The job must give the library's own result when left to finish, and stop between replicates,
keeping nothing, when cancelled.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from workbench.app import state  # noqa: F401  (the app's entry: state imports runs)
from workbench.study import read_study


@pytest.fixture(scope="module")
def spec(cgvhd_study):
    import tomli_w

    folder, doc, _ = cgvhd_study
    path = folder / "study_job.toml"
    path.write_text(tomli_w.dumps(doc))
    return read_study(path)


def test_a_finished_job_holds_the_library_result(spec):
    from workbench.app.runs import CompetingJob
    from workbench.competing.analysis import run_competing

    job = CompetingJob(("study", 3), spec, 3, 1).start()
    job.wait(300)
    assert not job.running and job.error is None and not job.cancelled
    assert job.done == job.total == 3 and job.result.replicates == 3
    ref = run_competing(spec, replicates=3, workers=1)  # same study and seed: the same numbers
    key = ("cause", "clinical", "fine_gray")
    np.testing.assert_array_equal(job.result.corrected[key]["auc"], ref.corrected[key]["auc"])


def test_cancel_stops_the_job_between_replicates_and_keeps_nothing(spec):
    from workbench.app.runs import CompetingJob

    job = CompetingJob(("study", 400), spec, 400, 1).start()
    deadline = time.monotonic() + 300
    while job.done < 2 and job._thread.is_alive() and time.monotonic() < deadline:
        job.wait(0.02)
    assert job.total == 400 and job.done >= 2  # replicates under way, with progress
    job.cancel()
    assert job.cancelled and not job.running  # the page treats it as cancelled at once
    job.wait(60)
    assert not job._thread.is_alive()
    assert job.result is None and job.error is None and job.done < job.total
