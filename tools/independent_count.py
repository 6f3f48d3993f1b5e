#!/usr/bin/env python3
"""Recount coincidences and singles from raw time tags with NumPy only, and compare them
exactly with the tables of an HDF5 file written by `tagsieve count`.

Tag files: one per channel, little-endian unsigned 64-bit picosecond timestamps, sorted.
Rule: with delta = (b - d_B) - (a - d_A) in integer ps, a pair coincides when
2*|delta| <= w, i.e. |delta| <= w // 2. Exit 0 on agreement, 1 with a diff, 2 on bad usage.

Example:
  independent_count.py run.h5 --tags 1=larch.u64 --tags 2=rowan.u64 \
      --delay 2=1500 --window-ps 800
"""
import argparse
import sys

import h5py
import numpy as np


def parse_pairs(items, what):
    out = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep:
            sys.exit(f"{what} {item!r}: expected CHANNEL=VALUE")
        out[int(key)] = value
    return out


def load_tags(path):
    t = np.fromfile(path, dtype="<u8")
    if t.size and t.max() >= 2**62:
        sys.exit(f"{path}: timestamps beyond 2^62 ps do not fit the int64 arithmetic used here")
    t = t.astype(np.int64)
    if np.any(np.diff(t) < 0):
        sys.exit(f"{path}: timestamps are not sorted")
    return t


def count_pair(ta, tb, d_a, d_b, window_ps):
    """Pairs with |(b - d_B) - (a - d_A)| <= w // 2: b in [a + delta - h, a + delta + h]."""
    delta = np.int64(d_b - d_a)
    h = np.int64(window_ps // 2)
    hi = np.searchsorted(tb, ta + delta + h, side="right")
    lo = np.searchsorted(tb, ta + delta - h, side="left")
    partners = hi - lo
    return int(partners.sum()), int(np.count_nonzero(partners))


def pick_block(f, label):
    blocks = f["blocks"]
    if label is not None:
        return label, blocks[label]
    names = list(blocks.keys())
    if len(names) != 1:
        sys.exit(f"file holds blocks {names}; choose one with --block")
    return names[0], blocks[names[0]]


def check_singles(block, tags, diffs):
    s = block["singles"]
    rows = {int(c): i for i, c in enumerate(s["channel"][()])}
    for ch, t in tags.items():
        if ch not in rows:
            diffs.append(f"singles: channel {ch} missing from the file")
            continue
        i = rows[ch]
        want = {"events": t.size}
        if t.size:
            want.update(first_ps=int(t[0]), last_ps=int(t[-1]))
        for col, value in want.items():
            got = int(s[col][i])
            if got != value:
                diffs.append(f"singles channel {ch} {col}: file {got}, recount {value}")


def check_coincidences(block, tags, delays, window_ps, diffs):
    if "coincidences" not in block:
        diffs.append("coincidences: the file has no such table")
        return
    c = block["coincidences"]
    n = c["a"].shape[0]
    if n == 0:
        diffs.append("coincidences: the file has no rows")
    for i in range(n):
        a, b = int(c["a"][i]), int(c["b"][i])
        if a not in tags or b not in tags:
            diffs.append(f"pair {a}-{b}: no tag file given for both channels")
            continue
        d_a, d_b = delays.get(a, 0), delays.get(b, 0)
        count, heralded = count_pair(tags[a], tags[b], d_a, d_b, window_ps)
        want = {"rel_delay_ps": d_b - d_a, "window_ps": window_ps, "coincidences": count, "heralded": heralded}
        for col, value in want.items():
            got = int(c[col][i])
            if got != value:
                diffs.append(f"pair {a}-{b} {col}: file {got}, recount {value}")
        print(f"pair {a}-{b}: {count} coincidences, {heralded} heralded (window {window_ps} ps)")


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("hdf5", help="file written by tagsieve count")
    ap.add_argument("--tags", action="append", default=[], metavar="CH=PATH", help="raw tags of one channel")
    ap.add_argument("--delay", action="append", default=[], metavar="CH=PS", help="delay of a channel in ps (default 0)")
    ap.add_argument("--window-ps", type=int, required=True, help="coincidence window w in ps")
    ap.add_argument("--block", help="block label (default: the only block)")
    args = ap.parse_args()
    tags = {ch: load_tags(p) for ch, p in parse_pairs(args.tags, "--tags").items()}
    delays = {ch: int(v) for ch, v in parse_pairs(args.delay, "--delay").items()}
    if not tags:
        sys.exit("give at least one --tags CH=PATH")
    diffs = []
    with h5py.File(args.hdf5, "r") as f:
        label, block = pick_block(f, args.block)
        check_singles(block, tags, diffs)
        check_coincidences(block, tags, delays, args.window_ps, diffs)
    if diffs:
        print(f"block {label}: {len(diffs)} difference(s)")
        print("\n".join(diffs))
        return 1
    print(f"block {label}: every checked value agrees")
    return 0


if __name__ == "__main__":
    sys.exit(main())
