#!/usr/bin/env bash
# Install what tagsieve needs on a Debian machine, saying what it does:
#   system packages (libhdf5-dev, pkg-config; hdf5-tools for h5dump in the tests),
#   and, with --python, a local virtual environment .venv with NumPy, SciPy and h5py
#   (the outside references the tests check against).
set -euo pipefail
cd "$(dirname "$0")/.."

want_python=0
[ "${1:-}" = "--python" ] && want_python=1

say() { printf 'setup: %s\n' "$*" >&2; }

if ! command -v cargo >/dev/null 2>&1; then
  say "cargo not found: install a Rust toolchain (1.80 or newer, e.g. with rustup) and rerun"
  exit 1
fi

missing=()
for p in libhdf5-dev pkg-config hdf5-tools; do
  dpkg -s "$p" >/dev/null 2>&1 || missing+=("$p")
done
if [ "$want_python" = 1 ] && ! python3 -c 'import venv, ensurepip' >/dev/null 2>&1; then
  missing+=(python3-venv)
fi
if [ ${#missing[@]} -gt 0 ]; then
  sudo=""
  [ "$(id -u)" -ne 0 ] && sudo="sudo"
  say "installing system packages: ${missing[*]}"
  $sudo apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq "${missing[@]}" >/dev/null
else
  say "system packages present (libhdf5-dev, pkg-config, hdf5-tools)"
fi

if [ "$want_python" = 1 ]; then
  if ! .venv/bin/python -c 'import numpy, scipy, h5py, pandas' >/dev/null 2>&1; then
    say "creating .venv with NumPy, SciPy, h5py and pandas (outside references for the tests)"
    python3 -m venv .venv
    .venv/bin/python -m pip install -q --upgrade pip
    .venv/bin/python -m pip install -q numpy scipy h5py pandas
  else
    say "Python references present in .venv (NumPy, SciPy, h5py)"
  fi
fi
