#!/usr/bin/env bash
# Set everything up, then process the bundled demo session and open the review window on it
# (with no display: write the demo's shot sheet PDF and table instead, and say where).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh
exec .venv/bin/wakeline demo "$@"
