"""Entry point of the browser front end: ``streamlit run workbench/app/main.py``.

One router (``st.navigation``) over the views, in the order a study is worked
through. The caution text is shown once, above every view.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import streamlit as st

from workbench.app import state

HERE = Path(__file__).resolve().parent

PAGES = (
    ("views/data.py", "Data", "data", ":material/table:"),
    ("views/design.py", "Design", "design", ":material/tune:"),
    ("views/signature.py", "Signature", "signature", ":material/filter_alt:"),
    ("views/results.py", "Results", "results", ":material/monitoring:"),
    ("views/nomogram.py", "Nomogram", "nomogram", ":material/straighten:"),
    ("views/patient.py", "Patient", "patient", ":material/person:"),
    ("views/export.py", "Export", "export", ":material/download:"),
)

# When set, a file each script run appends to: its end (epoch s), view, wall and thread CPU seconds
# (bench/bench_app_browser.py reads it to split a view's time into the server's part and the browser's).
# A comment, not a string under the name: Streamlit would show a bare string on every page.
RUN_LOG = "WORKBENCH_RUN_LOG"


def main() -> None:
    log = os.environ.get(RUN_LOG)
    t0, c0 = time.perf_counter(), time.thread_time()
    view = ""
    try:
        st.set_page_config(page_title="Survival workbench", page_icon=":material/monitoring:", layout="wide")
        state.init_session()
        pages = [
            st.Page(str(HERE / path), title=title, url_path=url, icon=icon, default=(i == 0))
            for i, (path, title, url, icon) in enumerate(PAGES)
        ]
        page = st.navigation(pages)
        view = page.title
        with st.sidebar:
            st.caption("Does an imaging signature add to clinical factors?")
        state.show_caution()
        page.run()
    finally:  # also when the run ends early (st.rerun, st.stop)
        if log:
            with open(log, "a", encoding="utf-8") as f:
                f.write(f"{time.time():.4f}\t{view}\t{time.perf_counter() - t0:.4f}\t"
                        f"{time.thread_time() - c0:.4f}\n")


# Streamlit runs this script as "__main__" (its own stand-in module, whose __file__ is this file).
# A worker process started by app/workers.py while a script runs (spawn) re-runs the file named by
# __main__.__file__ under the name "__mp_main__": without this test every worker ran the app's
# first page in bare mode when it started.
if __name__ == "__main__":
    main()
