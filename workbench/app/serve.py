"""``streamlit run`` with the first view's imports done while the browser loads the page.

``python -m workbench.app.serve run workbench/app/main.py --server.port N ...`` takes the same
arguments as ``streamlit run`` (:func:`workbench.app.launch.command` builds them). Between the
server answering and the page's first script run the server sits idle while the browser fetches
and starts Streamlit's scripts (a few MB); the first run then spends most of its time importing
pandas and matplotlib and opening matplotlib's fonts. Here a thread waits until the server
listens (so the server's own start is not slowed) and does that work meanwhile; the first run
finds the modules loaded. A failure in the thread changes nothing but the time: the script
imports what it needs itself.
"""

from __future__ import annotations

import socket
import sys
import threading
import time

WARM_AFTER_S = 60.0
"""How long the thread waits for the server to listen before giving up."""


def _port(argv: list[str]) -> int | None:
    for i, a in enumerate(argv):
        if a == "--server.port" and i + 1 < len(argv):
            return int(argv[i + 1])
        if a.startswith("--server.port="):
            return int(a.split("=", 1)[1])
    return None


def _listening(port: int) -> bool:
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=0.2):
            return True
    except OSError:
        return False


def warm(port: int | None) -> None:
    """Wait for the server on ``port``, then import what the Data view needs and draw one tiny PNG
    (loads matplotlib's Agg backend and fonts)."""
    deadline = time.monotonic() + WARM_AFTER_S
    while port is not None and not _listening(port):
        if time.monotonic() > deadline:
            return
        time.sleep(0.02)
    try:
        import io

        import workbench.app.charts as charts
        import workbench.app.roles  # noqa: F401
        import workbench.app.state  # noqa: F401
        import workbench.cohort.samplesize  # noqa: F401
        import workbench.stats.km  # noqa: F401

        fig = charts.Figure(figsize=(1, 1))
        ax = fig.add_subplot()
        ax.set_xlabel("Time (months)")
        fig.savefig(io.BytesIO(), format="png", dpi=20)
    except Exception:  # noqa: BLE001 - only a head start; the script imports what it needs itself
        return


def main(argv: list[str] | None = None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    threading.Thread(target=warm, args=(_port(args),), name="workbench-warm", daemon=True).start()
    from streamlit.web import cli

    sys.argv = ["streamlit", *args]
    return cli.main(prog_name="streamlit")


if __name__ == "__main__":
    sys.exit(main())
