#!/usr/bin/env bash
# Make sure the browser tests can run: Debian's chromium and the playwright
# Python package (used only as a driver for that chromium; no browser download).
#   tests/app/install_browser.sh [path/to/venv]
set -euo pipefail
cd "$(dirname "$0")/../.."
VENV="${1:-${WORKBENCH_VENV:-.venv}}"

if [ ! -x /usr/bin/chromium ]; then
  SUDO=""
  if [ "$(id -u)" -ne 0 ]; then SUDO="sudo"; fi
  export DEBIAN_FRONTEND=noninteractive
  $SUDO apt-get update -qq
  $SUDO apt-get install -y -qq --no-install-recommends chromium fonts-dejavu-core >/dev/null
fi

if ! "$VENV/bin/python" -c "import playwright" 2>/dev/null; then
  pin="$(grep -i '^playwright==' constraints.txt || true)"
  "$VENV/bin/python" -m pip install --quiet "${pin:-playwright}"
fi
