#!/usr/bin/env bash
# Set up kplan on a fresh machine: the system libraries WeasyPrint needs (Pango, HarfBuzz subsetting),
# poppler-utils for the tests that look at rendered pages, and a virtual environment in .venv.
#   bash scripts/setup.sh          -> .venv with kplan installed (pip install .)
#   bash scripts/setup.sh --test   -> .venv with kplan editable and the test extras
# System packages are installed only where missing, with apt-get (Debian/Ubuntu) as root or through sudo;
# elsewhere the script says what to install and goes on.
set -euo pipefail
cd "$(dirname "$0")/.."

mode=${1:-}
need=()
have_lib() { ldconfig -p 2>/dev/null | grep -q "$1"; }
have_lib "libpangoft2-1.0.so.0" || need+=(libpango-1.0-0 libpangoft2-1.0-0)
have_lib "libharfbuzz-subset.so.0" || need+=(libharfbuzz-subset0)
if [ "$mode" = "--test" ] && ! command -v pdftoppm >/dev/null 2>&1; then need+=(poppler-utils); fi

if [ ${#need[@]} -gt 0 ]; then
  if command -v apt-get >/dev/null 2>&1; then
    sudo=""
    [ "$(id -u)" -ne 0 ] && command -v sudo >/dev/null 2>&1 && sudo="sudo"
    echo "installing system packages: ${need[*]}"
    log=$(mktemp)
    if ! { $sudo apt-get update -qq && $sudo env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq \
          "${need[@]}"; } >"$log" 2>&1; then
      cat "$log" >&2; rm -f "$log"; exit 1
    fi
    rm -f "$log"
  else
    echo "please install with your package manager: ${need[*]} (Pango, HarfBuzz subset, poppler-utils)" >&2
  fi
fi

python3 -m venv .venv
if [ "$mode" = "--test" ]; then
  .venv/bin/pip install -q -e '.[test]'
else
  .venv/bin/pip install -q .
fi
