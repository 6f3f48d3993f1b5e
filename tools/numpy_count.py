#!/usr/bin/env python3
"""NumPy reference for `tagsieve count`: coincidences of one pair at one window.

What a lab writes today: memory-map the two per-channel u64 arrays (`CH=PATH`, as written
by `tagsieve simulate --format arrays`), then for each A event find its B partners with
np.searchsorted. Rule (the same as tagsieve's): Δ = b − a − δ in int64 ps, a pair
coincides when |Δ| ≤ w // 2. Prints `pairs=N heralded=M a_events=K seconds=S`.

With `--offsets-ps O1,O2,...` it also counts pairs in windows of the same width centred
O_k from the peak (the off-peak windows `tagsieve count` measures accidentals in; windows
side by side share their edge searches) and prints `offpeak=N1,N2,...` after the pairs,
so the default `tagsieve count` can be timed against a script doing the same work.
"""
import argparse
import time

import numpy as np


def channel_file(arg):
    """`CH=PATH` → PATH (the channel number is only a label here)."""
    ch, sep, path = arg.partition("=")
    if not sep or not ch.isdigit():
        raise argparse.ArgumentTypeError(f"{arg}: expected CH=PATH")
    return path


def common_args(p):
    """The arguments both reference scripts take."""
    p.add_argument("a", type=channel_file, help="A channel, CH=PATH")
    p.add_argument("b", type=channel_file, help="B channel, CH=PATH")
    p.add_argument("--delta-ps", type=int, default=0, help="relative delay δ = d_B − d_A, ps (default 0)")
    p.add_argument("--prefix-events", type=int, default=0, help="use only the first N A events, 0 = all (default 0)")
    p.add_argument("--chunk-events", type=int, default=1 << 22, help="A events per chunk (default 2^22)")


def open_pair(args):
    """Memory-map A (u64) and B (as int64: times < 2^62 ps, so exact), A cut to the prefix."""
    a = np.memmap(args.a, dtype="<u8", mode="r")
    b = np.memmap(args.b, dtype="<i8", mode="r")
    return (a[:args.prefix_events] if args.prefix_events else a), b


def count(a, b, delta_ps, window_ps, chunk):
    """Pairs and heralded A events, A processed in chunks to bound the temporaries."""
    half = window_ps // 2
    pairs = heralded = 0
    for s in range(0, len(a), chunk):
        x = a[s:s + chunk].astype(np.int64) + delta_ps
        lo = np.searchsorted(b, x - half, side="left")
        hi = np.searchsorted(b, x + half, side="right")
        k = hi - lo
        pairs += int(k.sum())
        heralded += int(np.count_nonzero(k))
    return pairs, heralded


def offpeak(a, b, delta_ps, window_ps, offsets_ps, chunk):
    """Pairs in each off-peak window, one searchsorted per distinct window edge."""
    half = window_ps // 2
    # Window k holds Δ in [c − half, c + half]: its count is #(b < x + c + half + 1) −
    # #(b < x + c − half), both searches side="left". Side by side windows
    # (c' = c + 2·half + 1) share an edge, so five windows need six searches.
    lows = [o - half for o in offsets_ps]
    highs = [o + half + 1 for o in offsets_ps]
    edges = sorted(set(lows) | set(highs))
    index = {e: i for i, e in enumerate(edges)}
    sums = np.zeros(len(edges), dtype=np.int64)
    for s in range(0, len(a), chunk):
        x = a[s:s + chunk].astype(np.int64) + delta_ps
        for i, e in enumerate(edges):
            sums[i] += int(np.searchsorted(b, x + e, side="left").sum())
    return [int(sums[index[hi]] - sums[index[lo]]) for lo, hi in zip(lows, highs)]


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    common_args(p)
    p.add_argument("--window-ps", type=int, required=True, help="coincidence window w, ps")
    p.add_argument("--offsets-ps", default="", help="off-peak window centres from the peak, ps, comma-separated (default none)")
    args = p.parse_args()
    offsets = [int(o) for o in args.offsets_ps.split(",") if o.strip()]
    t0 = time.perf_counter()
    a, b = open_pair(args)
    pairs, heralded = count(a, b, args.delta_ps, args.window_ps, args.chunk_events)
    off = offpeak(a, b, args.delta_ps, args.window_ps, offsets, args.chunk_events) if offsets else []
    dt = time.perf_counter() - t0
    extra = f" offpeak={','.join(map(str, off))}" if offsets else ""
    print(f"pairs={pairs} heralded={heralded}{extra} a_events={len(a)} seconds={dt:.3f}")


if __name__ == "__main__":
    main()
