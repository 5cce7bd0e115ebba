"""Start the browser front end on this computer only.

``python -m workbench.app.launch [--port 8501] [--open]`` runs ``streamlit run`` (by way of
:mod:`workbench.app.serve`)
on ``workbench/app/main.py`` bound to 127.0.0.1, with usage statistics off and
an upload limit, whatever the local Streamlit configuration says. The command
line's ``app`` subcommand calls :func:`main`.
"""

from __future__ import annotations

import argparse
import socket
import subprocess
import sys
import webbrowser
from pathlib import Path

MAIN = Path(__file__).resolve().parent / "main.py"

SAFE_OPTIONS = {
    "server.address": "127.0.0.1",
    "server.headless": "true",
    "server.maxUploadSize": "200",
    "server.fileWatcherType": "none",
    "browser.gatherUsageStats": "false",
    "client.showErrorDetails": "none",
    "logger.level": "error",
    "theme.base": "light",
    "theme.primaryColor": "#2b6f8e",  # the workbench's own blue-teal (chips, buttons, sliders)
}


def free_port(start: int = 8501, tries: int = 50) -> int:
    """The first port from ``start`` on which nothing listens on 127.0.0.1."""
    for port in range(start, start + tries):
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
            try:
                s.bind(("127.0.0.1", port))
            except OSError:
                continue
            return port
    raise OSError(f"no free port between {start} and {start + tries - 1} on 127.0.0.1.")


def command(port: int, python: str | None = None) -> list[str]:
    """The ``streamlit run`` command line for the app on ``port`` (through :mod:`workbench.app.serve`,
    which does the first view's imports while the browser loads the page)."""
    cmd = [python or sys.executable, "-m", "workbench.app.serve", "run", str(MAIN), "--server.port", str(port)]
    for k, v in SAFE_OPTIONS.items():
        cmd += [f"--{k}", v]
    return cmd


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="workbench app", description="Start the browser front end (this computer only).")
    parser.add_argument("--port", type=int, default=None, help="port on 127.0.0.1 (default: the first free one from 8501)")
    parser.add_argument("--open", action="store_true", help="open the page in the default web browser")
    args = parser.parse_args(argv)
    port = args.port or free_port()
    url = f"http://127.0.0.1:{port}"
    print(f"Survival workbench: open {url} in a browser on this computer (Ctrl+C stops it).", flush=True)
    proc = subprocess.Popen(command(port), cwd=str(MAIN.parents[2]))
    if args.open:
        webbrowser.open(url)
    try:
        return proc.wait()
    except KeyboardInterrupt:
        proc.terminate()
        return 130


if __name__ == "__main__":
    sys.exit(main())
