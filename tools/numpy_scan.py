#!/usr/bin/env python3
"""NumPy reference for `tagsieve scan`: the delay histogram of one pair.

What a lab writes today: memory-map the two per-channel u64 arrays (`CH=PATH`), find each
A event's B window [a + δ − span, a + δ + span) with np.searchsorted, expand the windows
into pairs and bin Δ = b − a − δ (int64 ps) with np.bincount, bins of `bin` ps from −span
(bin i covers [−span + i·bin, −span + (i+1)·bin)), as tagsieve does. Prints
`total=N seconds=S` and then the bin counts, one line, comma-separated.
"""
import argparse
import time

import numpy as np

from numpy_count import common_args, open_pair


def histogram(a, b, delta_ps, span_ps, bin_ps, chunk):
    """Δ histogram over [−span, span), A processed in chunks to bound the temporaries."""
    nbins = -(-2 * span_ps // bin_ps)
    hist = np.zeros(nbins, dtype=np.int64)
    for s in range(0, len(a), chunk):
        x = a[s:s + chunk].astype(np.int64) + delta_ps
        lo = np.searchsorted(b, x - span_ps, side="left")
        hi = np.searchsorted(b, x + span_ps, side="left")
        k = hi - lo
        total = int(k.sum())
        if total == 0:
            continue
        # Pair j of A event i takes B index lo[i] + (j − first pair of i).
        owner = np.repeat(np.arange(len(x)), k)
        starts = np.cumsum(k) - k
        jb = lo[owner] + (np.arange(total) - starts[owner])
        d = b[jb] - x[owner]
        hist += np.bincount((d + span_ps) // bin_ps, minlength=nbins)[:nbins]
    return hist


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    common_args(p)
    p.add_argument("--half-range-ps", type=int, required=True, help="half-range of the histogram, ps")
    p.add_argument("--bin-ps", type=int, required=True, help="bin width, ps")
    args = p.parse_args()
    t0 = time.perf_counter()
    a, b = open_pair(args)
    hist = histogram(a, b, args.delta_ps, args.half_range_ps, args.bin_ps, args.chunk_events)
    dt = time.perf_counter() - t0
    print(f"total={int(hist.sum())} a_events={len(a)} seconds={dt:.3f}")
    print(",".join(str(int(c)) for c in hist))


if __name__ == "__main__":
    main()
