#!/usr/bin/env bash
# Set up wakeline in ./.venv on Debian with Python 3.11: Qt's system libraries (installed when run
# as root, else the exact apt line is printed and we stop), then the project and its test extras.
set -euo pipefail
cd "$(dirname "$0")/.."

DEBIAN_LIBS="libgl1 libegl1 libglib2.0-0 libdbus-1-3 libfontconfig1 libfreetype6 libxkbcommon0 libx11-6 fonts-dejavu-core poppler-utils"

missing=()
if command -v dpkg-query >/dev/null 2>&1; then
  for pkg in $DEBIAN_LIBS; do
    dpkg-query -W -f='${Status}' "$pkg" 2>/dev/null | grep -q "install ok installed" || missing+=("$pkg")
  done
fi
if [ ${#missing[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then
    echo "setup: installing Debian libraries: ${missing[*]}"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
  else
    echo "setup: missing Debian libraries. Run as root, then run this command again:"
    echo "  apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends ${missing[*]}"
    exit 1
  fi
fi

PYTHON=${PYTHON:-python3.11}
command -v "$PYTHON" >/dev/null 2>&1 || PYTHON=python3
"$PYTHON" -c 'import sys; sys.exit(sys.version_info < (3, 11))' || {
  echo "setup: Python 3.11 or newer is needed (found $("$PYTHON" --version 2>&1))"; exit 1; }

if [ ! -x .venv/bin/python ]; then
  echo "setup: creating .venv"
  "$PYTHON" -m venv .venv
fi
stamp=.venv/.wakeline-installed
if [ ! -f "$stamp" ] || [ pyproject.toml -nt "$stamp" ]; then
  echo "setup: installing wakeline and its dependencies into .venv (first time takes a minute)"
  .venv/bin/python -m pip install -q --disable-pip-version-check --upgrade pip
  .venv/bin/python -m pip install -q --disable-pip-version-check -e ".[test]"
  touch "$stamp"
fi
