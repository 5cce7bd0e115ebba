"""Export: the report, the results file and the fitted-model bundle, as downloads."""

from __future__ import annotations

import tempfile
from pathlib import Path

import streamlit as st

from workbench.app import exports, state


def _files(job) -> exports.Exports:
    """The run's files: built in the background after the run, or now when that has not started."""
    return exports.of_job(job)


def _get(ex, name: str, text: str):
    if ex.ready(name):
        return ex.get(name)
    with st.spinner(text):
        return ex.get(name)


def chromium() -> str | None:
    """The Chromium that prints the PDF report, or None when none is installed."""
    mod = state.load_module("workbench.report.pdf")
    try:
        return mod.find_chromium() if mod is not None else None
    except Exception:  # noqa: BLE001 - no browser: the PDF is simply not offered
        return None


@st.cache_data(show_spinner="Printing the report to PDF...", max_entries=2)
def _pdf_bytes(run_key: tuple, html: str) -> bytes:
    mod = state.load_module("workbench.report.pdf")
    with tempfile.TemporaryDirectory(prefix="workbench-pdf-") as tmp:
        src = Path(tmp) / "report.html"
        src.write_text(html, encoding="utf-8")
        return Path(mod.print_pdf(src, Path(tmp) / "report.pdf")).read_bytes()


def _pdf(key, html: str, spec) -> None:
    """The PDF report, offered when a Chromium is installed to print it (printed once per run)."""
    if chromium() is None:
        st.caption("The PDF version needs the Chromium browser on this computer; the HTML report prints "
                   "from any browser.")
        return
    done = st.session_state.get("export_pdf_for") == key
    if not done and not st.button("Prepare the PDF report", key="export_pdf_make"):
        return
    try:
        data = _pdf_bytes(key, html)
    except Exception as exc:  # noqa: BLE001
        state.show_error("Printing the PDF report", exc)
        return
    st.session_state["export_pdf_for"] = key
    st.download_button("Download the report (PDF)", data, file_name=state.study_filename(spec, ".pdf", "report"),
                       mime="application/pdf", key="export_pdf")


def render() -> None:
    st.title("Export")
    st.write("Download what the run produced, to archive it, share it or apply the models to new patients.")
    if not state.module_available("workbench.workflow"):
        state.not_available("Export (it needs a study run)")
        return
    result = state.current_result()
    if result is None:
        st.info("Run the study on the Results page first.")
        return
    state.show_provenance("These files")
    job = state.result_job()
    key = job.key
    spec = result.spec

    st.subheader("Study file")
    st.download_button("Download the study file as run (TOML)", state.study_text(spec),
                       file_name=state.study_filename(spec), mime="application/toml", key="export_study")
    st.caption("Save it in the folder that holds the study's tables: it names them relative to its own folder.")

    ex = _files(job)
    st.subheader("Results file")
    st.caption("Every number of the run with the study, seed, data hash and package versions (results.json).")
    try:
        text = _get(ex, "json", "Preparing results.json...")
        folder = _get(ex, "folder", "Writing the results folder...")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Writing the results", exc)
        text = folder = None
    if text is None:
        state.not_available("results.json")
    else:
        a, b = st.columns(2)
        a.download_button("Download results.json", text, file_name=state.study_filename(spec, ".json", "results"),
                          mime="application/json", key="export_json")
        if folder is not None:
            b.download_button("Download the results folder (JSON, CSV tables, run log; zip)", folder,
                              file_name=state.study_filename(spec, ".zip", "results"), mime="application/zip",
                              key="export_folder")

    st.subheader("Model bundle")
    st.caption("The fitted models in a safe format (JSON and arrays, no executable code) to estimate survival "
               "for new patients. It holds no patient identifiers.")
    try:
        data = _get(ex, "bundle", "Saving the model bundle...")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Saving the model bundle", exc)
        data = None
    if data is None:
        state.not_available("The model bundle")
    else:
        st.download_button("Download the model bundle (zip)", data,
                           file_name=state.study_filename(spec, ".zip", "model_bundle"),
                           mime="application/zip", key="export_bundle")



    st.subheader("Report")
    if exports.report_function() is None:
        state.not_available("The HTML report")
    else:
        st.caption("One self-contained HTML file with the methods, every table and figure, and the caution; "
                   "it lists no patient identifiers.")
        try:
            html = _get(ex, "report", "Writing the report (it is written in the background after each run)...")
            st.download_button("Download the report (HTML)", html, file_name=state.study_filename(spec, ".html", "report"),
                               mime="text/html", key="export_report")
        except Exception as exc:  # noqa: BLE001
            state.show_error("Writing the report", exc)
        else:
            _pdf(key, html, spec)



if __name__ == "__main__":
    render()
