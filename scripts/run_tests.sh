#!/usr/bin/env bash
# Set everything up, then run the whole test suite headless (no display, no GPU needed).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh --test
export QT_QPA_PLATFORM=${QT_QPA_PLATFORM:-offscreen}
# one test process per core, at most four (pytest-xdist; `-n 0` runs them in this one process)
exec .venv/bin/python -m pytest -n auto --maxprocesses 4 "$@"
