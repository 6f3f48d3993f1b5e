#!/usr/bin/env bash
# The main job on built-in demo data: installs what is missing, builds tagsieve, then runs
# `tagsieve demo` (simulate → inspect → scan → sweep → count → CHSH) into ./tagsieve-demo.
set -euo pipefail
cd "$(dirname "$0")/.."
tools/setup.sh
echo "demo: building tagsieve (release)" >&2
cargo build --release --quiet
exec "${CARGO_TARGET_DIR:-target}/release/tagsieve" demo -o "${1:-tagsieve-demo}"
