#!/usr/bin/env bash
# Build and run tagsieve's libFuzzer targets (fuzz/), two at a time, each for SECONDS
# (default 600), then print each target's final libFuzzer stats. Not for CI: it is a long,
# CPU-bound job meant for a developer machine.
#
#   tools/fuzz.sh [SECONDS] [TARGET...]      e.g. tools/fuzz.sh 60 records manifest
#
# Needs cargo-fuzz (`cargo install cargo-fuzz`). cargo-fuzz passes nightly-only flags
# (-Zsanitizer=address, sanitizer-coverage passes); on a stable toolchain we set
# RUSTC_BOOTSTRAP=1, which lets stable rustc accept them. RUSTUP_TOOLCHAIN=stable keeps a
# dependency's own rust-toolchain file (jpeg-decoder pins 1.61) from switching compilers.
# Crashing inputs land in fuzz/artifacts/TARGET/; copy each to tests/fuzz_cases/TARGET/
# and fix the bug: tests/fuzz_regressions.rs replays them on every `cargo test`.
set -euo pipefail
cd "$(dirname "$0")/.."

SECONDS_PER_TARGET=${1:-600}
shift || true
TARGETS=("$@")
[ ${#TARGETS[@]} -gt 0 ] || TARGETS=(records container layout_toml manifest)
RSS_LIMIT_MB=${RSS_LIMIT_MB:-2048}
PARALLEL=${PARALLEL:-2}

export RUSTC_BOOTSTRAP=1 RUSTUP_TOOLCHAIN=stable
# Own target dir (ignored by git): sanitizer flags would otherwise rebuild the main one.
TARGET_DIR=fuzz/target
cargo fuzz build --target-dir "$TARGET_DIR"
BIN=$TARGET_DIR/x86_64-unknown-linux-gnu/release
LOGS=fuzz/artifacts/logs  # git-ignored with the artifacts
mkdir -p "$LOGS"

run_one() {
  local t=$1
  mkdir -p "fuzz/corpus/$t" "fuzz/artifacts/$t"
  ASAN_OPTIONS=${ASAN_OPTIONS:-detect_odr_violation=0} "$BIN/$t" "fuzz/corpus/$t" "fuzz/seeds/$t" \
    -max_total_time="$SECONDS_PER_TARGET" -rss_limit_mb="$RSS_LIMIT_MB" -timeout=10 \
    -print_final_stats=1 -artifact_prefix="fuzz/artifacts/$t/" >"$LOGS/$t.log" 2>&1
}

status=0
for ((i = 0; i < ${#TARGETS[@]}; i += PARALLEL)); do
  pids=()
  for t in "${TARGETS[@]:i:PARALLEL}"; do
    echo "fuzzing $t for ${SECONDS_PER_TARGET} s (log: $LOGS/$t.log)"
    run_one "$t" &
    pids+=($!)
  done
  for p in "${pids[@]}"; do wait "$p" || status=1; done
done

for t in "${TARGETS[@]}"; do
  echo "== $t"
  # Last status line (#N ... cov: ft: exec/s), then libFuzzer's final stats.
  grep -E '^#[0-9]+' "$LOGS/$t.log" | tail -n 1 || true
  grep -E '^stat::(number_of_executed_units|average_exec_per_sec|peak_rss_mb)' "$LOGS/$t.log" || true
  ls "fuzz/artifacts/$t" 2>/dev/null | sed 's/^/  crash: /' || true
done
exit $status
