#!/usr/bin/env bash
# The two set-up commands of the README, and a few conveniences.
#   ./tasks.sh demo   create .venv, install, run the demo study (results in results/demo)
#                     extra options go to 'workbench run', e.g. ./tasks.sh demo --replicates 200
#   ./tasks.sh test   create .venv, install, run the whole test suite
#   ./tasks.sh app    create .venv, install, start the browser front end
set -euo pipefail
cd "$(dirname "$0")"
VENV="${WORKBENCH_VENV:-.venv}"

setup() {
  if [ ! -x "$VENV/bin/python" ]; then
    python3 -m venv "$VENV"
  fi
  local stamp
  stamp="$VENV/.installed-$(cat pyproject.toml constraints.txt | sha256sum | cut -c1-16)"
  if [ ! -f "$stamp" ]; then
    "$VENV/bin/python" -m pip install --quiet --upgrade pip
    "$VENV/bin/python" -m pip install --quiet -c constraints.txt -e ".[test,app,dask]"
    touch "$stamp"
  fi
}

cmd="${1:-}"
[ $# -gt 0 ] && shift
case "$cmd" in
  demo)
    setup
    "$VENV/bin/workbench" run demo_cohort/study.toml --out results/demo "$@"
    ;;
  test)
    setup
    tests/app/install_browser.sh "$VENV"
    # one test process per core (pytest-xdist); a test file stays on one process, so the
    # module-scoped fixtures (a fitted study, an app server and its browser page) are built once
    "$VENV/bin/python" -m pytest -q -n "${WORKBENCH_TEST_WORKERS:-auto}" --dist loadfile "$@"
    ;;
  app)
    setup
    "$VENV/bin/python" -m workbench.app.launch "$@"
    ;;
  *)
    echo "usage: ./tasks.sh demo | test | app" >&2
    exit 2
    ;;
esac
