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
    else:
        _study_files(result)
    _competing(state.current_study() or (result.spec if result is not None else None))


def _study_files(result) -> None:
    """The study run's files: study file, results.json and folder, bundle, report."""
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


def _competing(spec) -> None:
    """The competing-risks analysis's files, as 'workbench competing' writes them (studies with competing codes)."""
    if spec is None or not spec.data.competing_codes:
        return
    from workbench.app import competing_exports
    from workbench.app.views import competing

    st.subheader("Competing-risks results")
    held = competing.held_analysis()
    if held is None:
        st.info("No competing-risks analysis has run yet. The study names competing events "
                f"({', '.join(spec.data.competing_codes)}): run the analysis in the Competing risks section of "
                "the Results page, and its files are offered here.")
        return
    key, result = held
    if key[0] != state.study_text(spec):
        st.warning("The study changed since the competing-risks analysis ran: these files are those of the "
                   "analysis as it ran. Run it again on the Results page to bring them up to date.")
    st.caption(f"As 'workbench competing' writes them, from the analysis with {result.replicates} bootstrap "
               "replicates: competing_results.json (every number, with the study, seed, data hash and package "
               "versions), and the whole folder with the figures at both journal widths and the Fine-Gray "
               "nomogram's points tables.")
    ex = competing_exports.of_analysis(result, st.session_state.get(competing.JOB), st.session_state,
                                       "wb_competing_files")
    a, b = st.columns(2)
    try:
        text = _get(ex, "json", "Writing competing_results.json...")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Writing competing_results.json", exc)
    else:
        a.download_button("Download competing_results.json", text, mime="application/json",
                          file_name=state.study_filename(spec, ".json", "competing_results"), key="export_cr_json")
    try:
        folder = _get(ex, "folder", "Writing the competing-risks results folder (figures at both widths)...")
    except Exception as exc:  # noqa: BLE001
        state.show_error("Writing the competing-risks results folder", exc)
    else:
        b.download_button("Download the competing-risks results folder (JSON, figures, points tables; zip)",
                          folder, file_name=state.study_filename(spec, ".zip", "competing"), mime="application/zip",
                          key="export_cr_folder")


if __name__ == "__main__":
    render()
