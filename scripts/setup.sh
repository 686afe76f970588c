#!/usr/bin/env bash
# Set up wakeline in ./.venv on Debian with Python 3.11: Qt's system libraries, for the headless
# commands and for the window on an X11 desktop (installed when run as root, else the exact apt
# line is printed and we stop), then the project and its test extras. With --test, also the
# virtual display the test of the real window runs on (xvfb, xauth; without them it is skipped).
set -euo pipefail
cd "$(dirname "$0")/.."

DEBIAN_LIBS="libgl1 libegl1 libglib2.0-0 libdbus-1-3 libfontconfig1 libfreetype6 libxkbcommon0 libx11-6 fonts-dejavu-core poppler-utils"
# Qt 6.5+'s xcb platform (the window on X11) needs these too; without them Qt aborts at start
WINDOW_LIBS="libx11-xcb1 libxcb1 libxcb-cursor0 libxcb-icccm4 libxcb-image0 libxcb-keysyms1 libxcb-randr0 libxcb-render0 libxcb-render-util0 libxcb-shape0 libxcb-shm0 libxcb-sync1 libxcb-util1 libxcb-xfixes0 libxcb-xkb1 libxkbcommon-x11-0"
TEST_TOOLS="xvfb xauth"

missing_of() {  # those of the Debian packages "$@" that are not installed
  command -v dpkg-query >/dev/null 2>&1 || return 0
  for pkg in "$@"; do
    dpkg-query -W -f='${Status}' "$pkg" 2>/dev/null | grep -q "install ok installed" || echo "$pkg"
  done
}
PYTHON=${PYTHON:-python3.11}
command -v "$PYTHON" >/dev/null 2>&1 || PYTHON=python3
"$PYTHON" -c 'import sys; sys.exit(sys.version_info < (3, 11))' || {
  echo "setup: Python 3.11 or newer is needed (found $("$PYTHON" --version 2>&1))"; exit 1; }
# Debian's own Python makes virtual environments only with its venv package
VENV_PKG=""
if [ ! -x .venv/bin/python ] && ! "$PYTHON" -c 'import ensurepip, venv' >/dev/null 2>&1; then
  VENV_PKG="python3-venv"
fi

# shellcheck disable=SC2086  # the lists split into package names
mapfile -t missing < <(missing_of $DEBIAN_LIBS $WINDOW_LIBS $VENV_PKG)
tools=()
# shellcheck disable=SC2086
[ "${1:-}" != "--test" ] || mapfile -t tools < <(missing_of $TEST_TOOLS)

if [ "$(id -u)" = 0 ]; then
  if [ $((${#missing[@]} + ${#tools[@]})) -gt 0 ]; then
    echo "setup: installing Debian packages: ${missing[*]} ${tools[*]}"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${missing[@]}" "${tools[@]}" >/dev/null
  fi
elif [ ${#missing[@]} -gt 0 ]; then
  echo "setup: missing Debian libraries. Run as root, then run this command again:"
  echo "  apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends ${missing[*]}"
  exit 1
elif [ ${#tools[@]} -gt 0 ]; then
  echo "setup: no ${tools[*]}: the test of the real window will be skipped (as root: apt-get install ${tools[*]})"
fi

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
