#!/usr/bin/env bash
# Whole-process engine benchmark: `tagsieve count` and `tagsieve scan` against the NumPy
# scripts a lab would write (tools/numpy_count.py, tools/numpy_scan.py) and against a plain
# sum over the same mapped files (examples/mem_read.rs), on one ≥ 1 GB two-channel input.
#
# Usage: tools/bench_engine.sh            (env: BENCH_DIR, REPS, TAGSIEVE_PYTHON, NUMPY_PREFIX)
# The simulated input is kept in BENCH_DIR for the next run (delete it by hand).
# NUMPY_PREFIX=N times NumPy on the first N A events only and scales linearly (counts are
# then not compared). Prints a table; see docs/benchmarks.md.
set -euo pipefail

cd "$(dirname "$0")/.."
BENCH_DIR=${BENCH_DIR:-/tmp/tagsieve-bench}
PYTHON=${TAGSIEVE_PYTHON:-$PWD/.venv/bin/python}   # the test venv (tools/setup.sh --python)
REPS=${REPS:-3}
NUMPY_PREFIX=${NUMPY_PREFIX:-0}
THREADS=2
WINDOW_PS=1000        # w = 1 ns
SPAN_PS=20000         # scan ±20 ns
BIN_PS=50             # 50 ps bins
DELTA_PS=41250        # d_3 − d_1 of the invented demo scenario (src/simulate: scenario_detectors)

cargo build --release --quiet --bin tagsieve --example mem_read
TARGET=$(cargo metadata --format-version 1 --no-deps | "$PYTHON" -c 'import json,sys; print(json.load(sys.stdin)["target_directory"])')
TS=$TARGET/release/tagsieve
MEMREAD=$TARGET/release/examples/mem_read

# Input: one block, channels 1 and 3 only (2 and 4 switched off), ≈ 1.17 GB for 40 s at
# 20 M pairs/s. Kept between runs unless the files are missing.
A=$BENCH_DIR/run/ab0_ch1.u64
B=$BENCH_DIR/run/ab0_ch3.u64
if [[ ! -s $A || ! -s $B ]]; then
    echo "simulating the input into $BENCH_DIR/run ..." >&2
    "$TS" simulate -o "$BENCH_DIR/run" --force -q --threads "$THREADS" --format arrays \
        --series 22.5 --pair-rate-hz 20000000 --duration-s 40 \
        --detector 2:efficiency=0,dark_rate_hz=0 --detector 4:efficiency=0,dark_rate_hz=0
fi
BYTES=$(( $(stat -c %s "$A") + $(stat -c %s "$B") ))
(( BYTES >= 1000000000 )) || { echo "input is only $BYTES bytes (< 1 GB)" >&2; exit 1; }
# A defined page-cache state for every figure below (from memory, not disk): drop the two
# files from the cache, then read them once through tagsieve's mapping (sequential and
# huge-page advice), as the first pass over a run does. How the cache was filled matters:
# a file cached in 4 KiB pages costs each later process ≈ 60 ms per GB more to map and to
# unmap (docs/benchmarks.md, "Fourth session"); NumPy, compute-bound, does not notice.
"$PYTHON" - "$A" "$B" <<'PY'
import os, sys
for p in sys.argv[1:]:
    fd = os.open(p, os.O_RDONLY)
    os.fdatasync(fd)
    os.posix_fadvise(fd, 0, 0, os.POSIX_FADV_DONTNEED)
    os.close(fd)
PY
"$TS" inspect -q --threads "$THREADS" "1=$A" "3=$B" >/dev/null

# best-of-REPS wall time of a command, seconds; its last stdout goes to $OUTFILE.
OUTFILE=$(mktemp)
trap 'rm -f "$OUTFILE"' EXIT
best_of() {
    local reps=$1; shift
    local best=""
    for ((i = 0; i < reps; i++)); do
        local t0 t1
        t0=$(date +%s.%N)
        "$@" >"$OUTFILE"
        t1=$(date +%s.%N)
        best=$(awk -v a="$best" -v t="$(echo "$t1 - $t0" | bc)" 'BEGIN { print (a == "" || t < a) ? t : a }')
    done
    echo "$best"
}
numpy() { env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE "$PYTHON" "$@"; }

echo "machine: $(nproc) cores, $(uptime | sed 's/.*load/load/')" >&2
# CPU time the hypervisor took from this machine during the run (steal), as a share of all
# CPU time: on a shared virtual machine, figures taken while it is high are slow and noisy.
cpu_ticks() { awk '/^cpu / { t = 0; for (i = 2; i <= 9; i++) t += $i; print t, $9 }' /proc/stat; }
read -r TICKS0 STEAL0 < <(cpu_ticks)
echo "input: $BYTES bytes ($A, $B)" >&2

# (d) memory-read rate: best warm in-process pass and a fresh mapping's first touch.
"$MEMREAD" "$THREADS" "$A" "$B" >"$OUTFILE"
MEM_FIRST=$(awk '/first touch/ { for (i = 1; i <= NF; i++) if ($i ~ /^gb_per_s=/) { sub("gb_per_s=", "", $i); print $i } }' "$OUTFILE")
MEM_WARM=$(awk '/warm/ { for (i = 1; i <= NF; i++) if ($i ~ /^gb_per_s=/) { sub("gb_per_s=", "", $i); if ($i > m) m = $i } } END { print m }' "$OUTFILE")
T_CAT=$(best_of "$REPS" sh -c 'cat "$0" "$1" >/dev/null' "$A" "$B")   # to /dev/null, not to $OUTFILE

# (a) whole count process, (b) whole scan process.
COUNT=("$TS" count -q --json --threads "$THREADS" --pairs 1:3 --delay 3=$DELTA_PS -w $WINDOW_PS "1=$A" "3=$B")
T_COUNT0=$(best_of "$REPS" "${COUNT[@]}" --no-offpeak)
T_COUNT=$(best_of "$REPS" "${COUNT[@]}")
# --json prints the Document (docs/hdf5-layout.md): tables are columns under groups.
TS_PAIRS=$("$PYTHON" -c 'import json,sys; d=json.load(open(sys.argv[1]))["groups"]["blocks"]["groups"]["block"]; c=d["tables"]["coincidences"]["columns"]; print(c["coincidences"]["data"][0], c["heralded"]["data"][0])' "$OUTFILE")
OFFSETS=$("$PYTHON" -c 'import json,sys; d=json.load(open(sys.argv[1]))["groups"]["blocks"]["groups"]["block"]; o=d["tables"]["off_peak_windows"]["columns"]; print(",".join(map(str, o["offset_ps"]["data"])))' "$OUTFILE")
TS_OFF=$("$PYTHON" -c 'import json,sys; d=json.load(open(sys.argv[1]))["groups"]["blocks"]["groups"]["block"]; o=d["tables"]["off_peak_windows"]["columns"]; print(",".join(map(str, o["counts"]["data"])))' "$OUTFILE")
SCAN=("$TS" scan -q --json --threads "$THREADS" --pairs 1:3 --delay 3=$DELTA_PS --half-range-ps $SPAN_PS --bin-ps $BIN_PS "1=$A" "3=$B")
T_SCAN=$(best_of "$REPS" "${SCAN[@]}")
TS_HIST=$("$PYTHON" -c 'import json,sys; d=json.load(open(sys.argv[1]))["groups"]["blocks"]["groups"]["block"]; print(",".join(map(str, d["groups"]["scans"]["tables"]["1-3"]["columns"]["counts"]["data"])))' "$OUTFILE")

# (c) NumPy on the same files (once each: they take minutes).
PREFIX_ARGS=()
(( NUMPY_PREFIX > 0 )) && PREFIX_ARGS=(--prefix-events "$NUMPY_PREFIX")
A_EVENTS=$(( $(stat -c %s "$A") / 8 ))
T_NP_COUNT=$(best_of 1 numpy tools/numpy_count.py "1=$A" "3=$B" --window-ps $WINDOW_PS --delta-ps $DELTA_PS "${PREFIX_ARGS[@]}")
NP_PAIRS=$(sed -n 's/^pairs=\([0-9]*\) heralded=\([0-9]*\).*/\1 \2/p' "$OUTFILE")
# The same peak window plus the ten off-peak windows `count` measured (the same work).
T_NP_COUNT_OFF=$(best_of 1 numpy tools/numpy_count.py "1=$A" "3=$B" --window-ps $WINDOW_PS --delta-ps $DELTA_PS --offsets-ps="$OFFSETS" "${PREFIX_ARGS[@]}")
NP_OFF=$(sed -n 's/.* offpeak=\([0-9,]*\) .*/\1/p' "$OUTFILE")
T_NP_SCAN=$(best_of 1 numpy tools/numpy_scan.py "1=$A" "3=$B" --half-range-ps $SPAN_PS --bin-ps $BIN_PS --delta-ps $DELTA_PS "${PREFIX_ARGS[@]}")
NP_HIST=$(sed -n 2p "$OUTFILE")
if (( NUMPY_PREFIX > 0 )); then
    SCALE=$(echo "$A_EVENTS / $NUMPY_PREFIX" | bc -l)
    T_NP_COUNT=$(echo "$T_NP_COUNT * $SCALE" | bc -l)
    T_NP_COUNT_OFF=$(echo "$T_NP_COUNT_OFF * $SCALE" | bc -l)
    T_NP_SCAN=$(echo "$T_NP_SCAN * $SCALE" | bc -l)
    echo "NumPy timed on the first $NUMPY_PREFIX of $A_EVENTS A events and scaled linearly; counts not compared" >&2
else
    [[ $TS_PAIRS == "$NP_PAIRS" ]] || { echo "COUNT MISMATCH: tagsieve $TS_PAIRS, NumPy $NP_PAIRS" >&2; exit 1; }
    [[ $TS_OFF == "$NP_OFF" ]] || { echo "OFF-PEAK MISMATCH: tagsieve $TS_OFF, NumPy $NP_OFF" >&2; exit 1; }
    [[ $TS_HIST == "$NP_HIST" ]] || { echo "SCAN MISMATCH between tagsieve and NumPy histograms" >&2; exit 1; }
    echo "counts agree: pairs heralded = $TS_PAIRS; off-peak windows = $TS_OFF; scan histograms equal ($(( (2 * SPAN_PS + BIN_PS - 1) / BIN_PS )) bins)" >&2
fi

row() {  # name seconds numpy_seconds
    awk -v n="$1" -v t="$2" -v np="$3" -v b="$BYTES" -v m="$MEM_WARM" 'BEGIN {
        g = b / t / 1e9
        r = (np == "") ? "" : sprintf("%.1f", np / t)
        printf "%-36s %9.3f %9.2f %10s %9.1f%%\n", n, t, g, r, 100 * g / m }'
}
printf '%-36s %9s %9s %10s %10s\n' "run ($THREADS threads)" "wall s" "GB/s" "× NumPy" "% mem-read"
# Same work on both sides in the first two rows; the third sets the default count (which
# also measures accidentals in ten off-peak windows) beside the peak-only script.
row "count --no-offpeak / numpy peak" "$T_COUNT0" "$T_NP_COUNT"
row "count (default) / numpy peak+10" "$T_COUNT" "$T_NP_COUNT_OFF"
row "count (default) / numpy peak" "$T_COUNT" "$T_NP_COUNT"
row "scan / numpy_scan.py" "$T_SCAN" "$T_NP_SCAN"
row "numpy_count.py (peak)" "$T_NP_COUNT" ""
row "numpy_count.py (peak + 10 off-peak)" "$T_NP_COUNT_OFF" ""
row "numpy_scan.py" "$T_NP_SCAN" ""
row "cat (warm cache)" "$T_CAT" ""
printf '%-36s %9s %9.2f %10s %9.1f%%\n' "mem_read sum, first touch" "" "$MEM_FIRST" "" "$(echo "100 * $MEM_FIRST / $MEM_WARM" | bc -l)"
printf '%-36s %9s %9.2f %10s %9.1f%%\n' "mem_read sum, warm" "" "$MEM_WARM" "" 100
read -r TICKS1 STEAL1 < <(cpu_ticks)
awk -v t=$((TICKS1 - TICKS0)) -v s=$((STEAL1 - STEAL0)) 'BEGIN { printf "steal during the run: %.1f%% of CPU time\n", (t > 0 ? 100 * s / t : 0) }'
