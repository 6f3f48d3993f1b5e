#!/usr/bin/env bash
# One-off local check (not CI): a channel of more than 2^32 events (~34 GB per-channel u64
# file, an arithmetic progression) is inspected and counted against a small second channel;
# every figure is compared with exact integer arithmetic done here in Python.
#
#   tools/big_channel.sh [WORKDIR] [TAGSIEVE_BINARY]
#
# WORKDIR (default /tmp/tagsieve-big) must have >= 45 GB free, else the check is skipped.
# The big file is deleted at the end, whatever the outcome. Needs NumPy
# ($TAGSIEVE_PYTHON, default the repository's .venv/bin/python) and /usr/bin/time for peak RSS.
set -euo pipefail

work=${1:-/tmp/tagsieve-big}
bin=${2:-$(dirname "$0")/../target/release/tagsieve}
py=${TAGSIEVE_PYTHON:-$(dirname "$0")/../.venv/bin/python}
mkdir -p "$work"
trap 'rm -f "$work/big.u64"' EXIT

free_gb=$(df -P -BG "$work" | awk 'NR==2 { sub("G", "", $4); print $4 }')
need_gb=${BIG_MIN_FREE_GB:-45}
if [ "$free_gb" -lt "$need_gb" ]; then
    echo "big_channel: only ${free_gb} GB free in $work (need $need_gb): skipped"
    exit 0
fi

# Channel 1: a_i = 1000·i ps, i < N = 2^32 + 2^21. Channel 2: b_k = 4_297_000·k + 333 ps,
# k < M = 10^6, spread over the whole span so the last partners sit beyond index 2^32.
N=${BIG_N:-$(( (1 << 32) + (1 << 21) ))}   # BIG_N: a smaller trial run of this script
export N work
echo "writing $N events ($(( N * 8 )) bytes) to $work/big.u64"
start=$(date +%s)
"$py" - <<'EOF'
import numpy as np, os
n, work = int(os.environ["N"]), os.environ["work"]
step = 1 << 25                       # 256 MiB per chunk
with open(f"{work}/big.u64", "wb") as f:
    for s in range(0, n, step):
        (np.arange(s, min(n, s + step), dtype="<u8") * 1000).tofile(f)
(np.arange(10**6, dtype="<u8") * 4_297_000 + 333).tofile(f"{work}/small.u64")
EOF
echo "write: $(( $(date +%s) - start )) s, $(stat -c %s "$work/big.u64") bytes"

timed() { # timed NAME CMD... : stdout to $work/NAME.json, /usr/bin/time report to $work/NAME.time
    local name=$1; shift
    /usr/bin/time -v -o "$work/$name.time" "$@" >"$work/$name.json"
    grep -E "Elapsed|Maximum resident" "$work/$name.time" | sed "s/^/  $name: /"
}

timed inspect "$bin" --quiet --json inspect 1=$work/big.u64 2=$work/small.u64
# w = 5 µs (h = 2.5 µs), one off-peak window at +1 ms; both pair orders (A = big, A = small).
timed count "$bin" --quiet --json count 1=$work/big.u64 2=$work/small.u64 --pairs 1:2,2:1 \
    -w 5000000 --acc-offsets-ps 1000000000

"$py" - <<'EOF'
import json, os
n, work = int(os.environ["N"]), os.environ["work"]
m, p, r, h, off = 10**6, 4_297_000, 333, 2_500_000, 1_000_000_000

def ceil_div(x, d):
    return -((-x) // d)

def partners(c, big_is_a):
    """Per small event k, the range of big indices i with |Δ − c| ≤ h (exact integers)."""
    out = []
    for k in range(m):
        b = p * k + r
        # A = big: Δ = b − a, so a ∈ [b − c − h, b − c + h]; A = small: Δ = a − b, a ∈ [b + c − h, b + c + h]
        lo, hi = (b - c - h, b - c + h) if big_is_a else (b + c - h, b + c + h)
        i0, i1 = max(0, ceil_div(lo, 1000)), min(n - 1, hi // 1000)
        out.append((i0, i1))
    return out

def pairs_and_heralds(c, big_is_a):
    ranges = partners(c, big_is_a)
    pairs = sum(max(0, i1 - i0 + 1) for i0, i1 in ranges)
    if not big_is_a:
        return pairs, sum(1 for i0, i1 in ranges if i1 >= i0)
    covered, end = 0, -1                 # union of the ranges (they are sorted by start)
    for i0, i1 in ranges:
        if i1 < i0:
            continue
        i0 = max(i0, end + 1)
        if i1 >= i0:
            covered += i1 - i0 + 1
            end = i1
    return pairs, covered

ok = True
def check(what, got, want):
    global ok
    good = got == want
    ok &= good
    print(f"  {'ok  ' if good else 'FAIL'} {what}: {got}" + ("" if good else f" (expected {want})"))

ins = {c["channel"]: c for c in json.load(open(f"{work}/inspect.json"))["channels"]}
check("inspect ch1 events", ins[1]["events"], n)
check("inspect ch1 last_ps", ins[1]["last_ps"], 1000 * (n - 1))
check("inspect ch2 events", ins[2]["events"], m)
check("inspect out_of_order_steps", ins[1]["out_of_order_steps"] + ins[2]["out_of_order_steps"], 0)

# --json prints the Document (docs/hdf5-layout.md): tables are columns under groups.
block = json.load(open(f"{work}/count.json"))["groups"]["blocks"]["groups"]["block"]["tables"]
def table_rows(t):
    cols = {k: c["data"] for k, c in t["columns"].items()}
    return [dict(zip(cols, vals)) for vals in zip(*cols.values())]
singles = {s["channel"]: s["events"] for s in table_rows(block["singles"])}
check("count singles ch1", singles[1], n)
rows = {(row["a"], row["b"]): row for row in table_rows(block["coincidences"])}
off_peak = {(o["a"], o["b"]): o["counts"] for o in table_rows(block["off_peak_windows"])}  # one offset per pair
for (a, b), big_is_a in [((1, 2), True), ((2, 1), False)]:
    row = rows[(a, b)]
    pk, hk = pairs_and_heralds(0, big_is_a)
    check(f"pair {a}:{b} coincidences", row["coincidences"], pk)
    check(f"pair {a}:{b} heralded", row["heralded"], hk)
    check(f"pair {a}:{b} off-peak (+1 ms) count", off_peak[(a, b)], pairs_and_heralds(off, big_is_a)[0])
print("big_channel:", "PASS" if ok else "FAIL")
raise SystemExit(0 if ok else 1)
EOF
