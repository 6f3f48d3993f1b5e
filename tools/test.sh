#!/usr/bin/env bash
# The whole test suite: installs what is missing (system packages and the .venv with the
# NumPy/SciPy/h5py references), then runs every Rust test, unit and end to end.
set -euo pipefail
cd "$(dirname "$0")/.."
tools/setup.sh --python
export TAGSIEVE_PYTHON="$PWD/.venv/bin/python"
echo "test: cargo test --release (all unit, property and end-to-end tests)" >&2
cargo test --release --no-fail-fast
