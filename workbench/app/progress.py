"""Progress of a background job on the page: a bar with elapsed and remaining time, and Cancel."""

from __future__ import annotations

import streamlit as st

POLL_SECONDS = 0.5


def clock(seconds: float) -> str:
    seconds = max(0, int(round(seconds)))
    return f"{seconds // 60}:{seconds % 60:02d}"


def watch(job, *, cancel_label: str = "Cancel the run", key: str = "results_cancel",
          idle: str = "Preparing the cohort and fitting the models on all patients...") -> None:
    """Show progress while ``job`` (a :class:`~workbench.app.runs.RunJob`) goes on; Cancel stops it
    between replicates. Reruns the page when the job ends."""
    st.button(cancel_label, on_click=job.cancel, key=key)
    bar = st.progress(0.0, text=idle)
    while job.running:
        if job._cancel.is_set():
            text = "Stopping after the replicates under way..."
        elif job.total:
            text = job.count_text()
        else:
            text = idle
        left = job.remaining()
        text += f" (elapsed {clock(job.elapsed)}" + (f", about {clock(left)} left)" if left is not None else ")")
        bar.progress(min(job.done / job.total, 1.0) if job.total else 0.0, text=text)
        job.wait(POLL_SECONDS)
    st.rerun()
