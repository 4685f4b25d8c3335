#!/usr/bin/env bash
# Prepare a fresh machine: the system libraries Qt needs headless (Debian/Ubuntu, via apt-get) and a
# project virtual environment in .venv with HazardTrace and its test tools installed.
# Idempotent: does nothing that is already done. Called by scripts/run.
set -euo pipefail
cd "$(dirname "$0")/.."

SYSTEM_PACKAGES=(libegl1 libgl1 libx11-6 libdbus-1-3 libfontconfig1 libfreetype6 libglib2.0-0
                 libxkbcommon0 fonts-dejavu-core
                 librsvg2-bin  # rsvg-convert: tests draw exported SVG with a renderer that is not Qt
                 xvfb xauth libxcb-cursor0 libxcb-icccm4 libxcb-image0 libxcb-keysyms1 libxcb-randr0
                 libxcb-render-util0 libxcb-shape0 libxcb-xinerama0 libxcb-xkb1 libxkbcommon-x11-0)
                 # ^ a real X server (Xvfb) and Qt's xcb plugin for scripts/screenshots.py
SYSTEM_PACKAGES+=(libpango-1.0-0 libpangoft2-1.0-0 libharfbuzz-subset0  # WeasyPrint's layout (report PDF)
                 poppler-utils  # pdftotext: tests read the report PDF's text
                 chromium)      # headless browser: tests open the HTML report in a real browser

missing=()
if command -v dpkg-query >/dev/null 2>&1; then
  for p in "${SYSTEM_PACKAGES[@]}"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
  done
fi
if ((${#missing[@]})); then
  echo "setup: installing system packages: ${missing[*]}"
  SUDO=""
  if [ "$(id -u)" -ne 0 ]; then SUDO="sudo"; fi
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
fi

PYTHON="${PYTHON:-python3}"
if [ ! -x .venv/bin/python ]; then
  echo "setup: creating .venv with $($PYTHON --version)"
  "$PYTHON" -m venv .venv
fi
stamp=.venv/.hazardtrace-installed
if [ ! -f "$stamp" ] || [ pyproject.toml -nt "$stamp" ]; then
  echo "setup: installing HazardTrace, its test tools and benchmark baselines into .venv"
  .venv/bin/python -m pip install -q --upgrade pip
  .venv/bin/python -m pip install -q -e ".[test,bench]"
  touch "$stamp"
fi
