#!/usr/bin/env bash
# Set everything up, then run the whole test suite headless (no display, no GPU needed).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh --test
export QT_QPA_PLATFORM=${QT_QPA_PLATFORM:-offscreen}
exec .venv/bin/python -m pytest "$@"
