#!/usr/bin/env bash
# Bounded-memory check: a ≥ 4 GiB interleaved-record input, streamed by `tagsieve count`
# (`--pass auto` streams a single record file), under /usr/bin/time -v. Reports the maximum
# resident set size, and the peak anonymous (heap) memory sampled from /proc. With memory
# maps the resident set also counts clean page-cache pages of the mapped input, so the
# run is made twice: buffered reads (--no-mmap, RSS ≈ heap) and mapped (the default).
# The input is deleted afterwards. Target: peak heap < 256 MiB.
#
# Usage: tools/peak_heap.sh            (env: HEAP_DIR, default /tmp/tagsieve-heap)
set -euo pipefail

cd "$(dirname "$0")/.."
HEAP_DIR=${HEAP_DIR:-/tmp/tagsieve-heap}
NEED_GB=10           # 4.3 GB input plus headroom
[[ -x /usr/bin/time ]] || apt-get install -y time >/dev/null
cargo build --release --quiet --bin tagsieve
TARGET=$(cargo metadata --format-version 1 --no-deps | python3 -c 'import json,sys; print(json.load(sys.stdin)["target_directory"])')
TS=$TARGET/release/tagsieve

mkdir -p "$HEAP_DIR"
FREE_GB=$(df --output=avail -BG "$HEAP_DIR" | tail -1 | tr -dc 0-9)
(( FREE_GB >= NEED_GB )) || { echo "only ${FREE_GB} GB free under $HEAP_DIR (need $NEED_GB)" >&2; exit 1; }
trap 'rm -rf "$HEAP_DIR/run"' EXIT

# One block, four channels, 16-byte records: ≈ 122 MB/s of run at 20 M pairs/s → 38 s ≈ 4.3 GB.
"$TS" simulate -o "$HEAP_DIR/run" --force -q --format records --series 22.5 \
    --pair-rate-hz 20000000 --duration-s 38
IN=$HEAP_DIR/run/ab0.records
LAYOUT=$(sed -n 's/^layout = "\(.*\)"$/\1/p' "$HEAP_DIR/run/run.toml")
BYTES=$(stat -c %s "$IN")
(( BYTES >= 4 << 30 )) || { echo "input is only $BYTES bytes (< 4 GiB)" >&2; exit 1; }
echo "input: $IN, $BYTES bytes, layout $LAYOUT"

# Run count with extra flags "$@"; print wall time, max RSS and sampled peak RssAnon.
measure() {
    local log peak=0 pid anon
    log=$(mktemp)
    /usr/bin/time -v -o "$log" "$TS" count -q --json --threads 2 --pairs 1:3 --delay 3=41250 -w 1000 \
        --layout "$LAYOUT" "$@" "$IN" >"$log.out" &
    pid=$!
    while kill -0 "$pid" 2>/dev/null; do
        for p in $(pgrep -P "$pid" 2>/dev/null) ; do
            anon=$(awk '/^RssAnon:/ { print $2 }' "/proc/$p/status" 2>/dev/null || echo 0)
            (( ${anon:-0} > peak )) && peak=$anon
        done
        sleep 0.05
    done
    wait "$pid"
    local rss wall pairs
    rss=$(awk -F': ' '/Maximum resident set size/ { print $2 }' "$log")
    wall=$(awk -F': ' '/Elapsed \(wall clock\)/ { print $2 }' "$log")
    pairs=$(python3 -c 'import json,sys; d=json.load(open(sys.argv[1]))["groups"]["blocks"]["groups"]["block"]; print(d["tables"]["coincidences"]["columns"]["coincidences"]["data"][0])' "$log.out")
    printf '%-22s wall %-9s max RSS %7.1f MiB  peak RssAnon %7.1f MiB  coincidences %s\n' \
        "${*:-mapped (default)}" "$wall" "$(echo "$rss / 1024" | bc -l)" "$(echo "$peak / 1024" | bc -l)" "$pairs"
    rm -f "$log" "$log.out"
}
measure --no-mmap
measure
