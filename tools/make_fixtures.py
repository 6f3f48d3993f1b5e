#!/usr/bin/env python3
"""Write the small format fixtures in fixtures/ with NumPy, independently of tagsieve's
own writers, together with the statistics `tagsieve inspect --json` must report for them
(fixtures/*.expected.json), computed here with NumPy / exact Python integers.

Usage: tools/make_fixtures.py [OUT_DIR]   (default: the fixtures/ folder beside tools/)
Deterministic: the same seed gives byte-identical files (a test checks this).
Byte layouts: docs/formats.md.
"""
import json
import os
import struct
import sys

import numpy as np

SEED = 20261201
MAX_PS = 1 << 62


def poisson_times(rng, n, mean_gap, start=0, dup_every=0):
    """Ascending integer times: exponential gaps (rounded), optionally some zero gaps."""
    gaps = np.rint(rng.exponential(mean_gap, n)).astype(np.int64) + 1
    if dup_every:
        gaps[dup_every::dup_every] = 0
    gaps[0] = start
    return np.cumsum(gaps).astype(np.uint64)


def stats(channel, name, source, t):
    """What inspect reports for one channel (definitions in docs/formats.md)."""
    t = np.asarray(t, dtype=np.uint64)
    d = np.diff(t.astype(np.int64)) if len(t) > 1 else np.zeros(0, np.int64)
    pos = d[d > 0]
    span = int(t.max() - t.min())
    return {
        "channel": channel,
        "name": name,
        "source": source,
        "events": int(len(t)),
        "first_ps": int(t[0]),
        "last_ps": int(t[-1]),
        "min_ps": int(t.min()),
        "max_ps": int(t.max()),
        "span_ps": span,
        "min_gap_ps": int(pos.min()) if len(pos) else None,
        "out_of_order_steps": int((d < 0).sum()),
        "duplicate_timestamps": int((d == 0).sum()),
    }


def totals(chans):
    lo = min(c["min_ps"] for c in chans)
    hi = max(c["max_ps"] for c in chans)
    n = sum(c["events"] for c in chans)
    # Rates (README, "Rates"): events / live time, one live time for all channels given
    # together: from the earliest to the latest tag of any channel, + 1 ps.
    live = hi - lo + 1
    for c in chans:
        c["rate_hz"] = c["events"] / (live * 1e-12)
    return {
        "channels": len(chans),
        "events": n,
        "min_ps": lo,
        "max_ps": hi,
        "span_ps": hi - lo,
        "live_time_ps": live,
        "rate_hz": n / (live * 1e-12),
        "out_of_order_steps": sum(c["out_of_order_steps"] for c in chans),
        "duplicate_timestamps": sum(c["duplicate_timestamps"] for c in chans),
    }


def expected(out, name, args, layout, chans, exit_code):
    tot = totals(chans)  # sets each channel's rate_hz
    doc = {"args": args, "layout": layout, "exit_code": exit_code, "channels": chans, "totals": tot}
    with open(os.path.join(out, name + ".expected.json"), "w") as f:
        json.dump(doc, f, indent=1, sort_keys=True)
        f.write("\n")


def arrays(out, rng):
    """Format (a): two per-channel arrays (scenario channels 1 and 3), one with duplicates."""
    a = poisson_times(rng, 3000, 4.0e5, start=1_000, dup_every=500)
    b = poisson_times(rng, 2500, 5.0e5, start=41_250)
    a.astype("<u8").tofile(os.path.join(out, "larch_plus.u64"))
    b.astype("<u8").tofile(os.path.join(out, "rowan_plus.u64"))
    chans = [stats(1, "larch_plus", "fixtures/larch_plus.u64", a), stats(3, "rowan_plus", "fixtures/rowan_plus.u64", b)]
    expected(out, "arrays", ["1:larch_plus=fixtures/larch_plus.u64", "3:rowan_plus=fixtures/rowan_plus.u64"], None, chans, 0)
    # An array with two steps backwards: inspect must count them and exit 2.
    c = poisson_times(rng, 400, 1.0e4, start=5)
    c[100], c[101] = c[101], c[100]
    c[300] = c[299] - 3
    c.astype("<u8").tofile(os.path.join(out, "unsorted.u64"))
    expected(out, "unsorted", ["2=fixtures/unsorted.u64"], None, [stats(2, "", "fixtures/unsorted.u64", c)], 2)


def records_wrap32(out, rng):
    """Format (b): 16-byte header, 12-byte records: u32 LE tick counter wrapping at 2^32,
    u16 LE channel, 6 filler bytes; tick 12.345 ps (= 12 345 fs, an invented value)."""
    n, tick_fs = 4000, 12_345
    ticks = poisson_times(rng, n, 3.0 * 2**32 / n, start=2**32 - 5_000_000)
    assert int(np.diff(ticks.astype(np.int64)).max()) < 2**32, "a gap of a full wrap period is undetectable"
    chan = rng.integers(1, 5, n).astype("<u2")
    rec = np.zeros(n, dtype=[("t", "<u4"), ("ch", "<u2"), ("fill", "V6")])
    rec["t"] = (ticks & np.uint64(0xFFFFFFFF)).astype("<u4")
    rec["ch"] = chan
    rec["fill"] = rng.integers(0, 256, (n, 6), dtype=np.uint8).view("V6").ravel()
    with open(os.path.join(out, "records_wrap32.bin"), "wb") as f:
        f.write(b"LARCHROWAN-RUN01")
        f.write(rec.tobytes())
    # Exact rule, in Python integers: ps = (ticks * tick_fs + 500) // 1000 (round half up).
    ps = np.array([(int(t) * tick_fs + 500) // 1000 for t in ticks], dtype=np.uint64)
    chans = [stats(c, "", "fixtures/records_wrap32.bin", ps[chan == c]) for c in range(1, 5)]
    expected(out, "records_wrap32", ["fixtures/records_wrap32.bin"], "fixtures/records_wrap32.layout.toml", chans, 0)


def records_be64(out, rng):
    """Format (b) through the compact spec: 16-byte records, u8 channel at 0, u64 big-endian
    time at 8 in 1 ps ticks, no header."""
    n = 1000
    ticks = poisson_times(rng, n, 2.0e4, start=7)
    chan = rng.integers(0, 3, n).astype(np.uint8)
    rec = np.zeros(n, dtype=[("ch", "u1"), ("pad", "V7"), ("t", ">u8")])
    rec["ch"], rec["t"] = chan, ticks
    rec.tofile(os.path.join(out, "records_be64.bin"))
    chans = [stats(c, "", "fixtures/records_be64.bin", ticks[chan == c]) for c in range(3)]
    expected(out, "records_be64", ["fixtures/records_be64.bin"], "rec=16,time=8:8:be,chan=0:1,tick_ps=1", chans, 0)


def container(out, rng):
    """Format (c), version 1, written from the byte layout in docs/formats.md."""
    names = ["larch_plus", "larch_minus", "rowan_plus", "rowan_minus"]
    delays = [0, 850, 41_250, 40_600]
    data = [poisson_times(rng, 1800 + 100 * k, 3.0e5, start=delays[k]) for k in range(4)]
    head = b"\x7fTSIEVE\n" + struct.pack("<IIqq", 1, 4, 1000, 1_764_547_200)
    head += b"make_fixtures.py".ljust(64, b"\0")
    offset = 96 + 64 * 4
    table = b""
    for k, t in enumerate(data):
        table += struct.pack("<IIQQ", k + 1, 0, len(t), offset) + names[k].encode().ljust(40, b"\0")
        offset += 8 * len(t)
    with open(os.path.join(out, "link_small.tsieve"), "wb") as f:
        f.write(head + table + b"".join(t.astype("<u8").tobytes() for t in data))
    chans = [stats(k + 1, names[k], "fixtures/link_small.tsieve", t) for k, t in enumerate(data)]
    expected(out, "link_small", ["fixtures/link_small.tsieve"], None, chans, 0)


def put_bits(word, shift, bits, value):
    """Set bits shift .. shift+bits of an integer word to value (plain Python integers)."""
    mask = ((1 << bits) - 1) << shift
    return (word & ~mask) | ((value << shift) & mask)


def write_layout(out, name, text):
    with open(os.path.join(out, name + ".layout.toml"), "w") as f:
        f.write(text)


PACKED64_TOML = """\
# docs/formats.md, worked example 1: one little-endian 64-bit word per record,
# the raw channel 0..3 in the top 8 bits, a 56-bit time below it, 1 ps ticks.
record_bytes = 8
tick_ps = "1"

[time]
offset = 0
width = 8
bits = 56

[channel]
offset = 0
width = 8
shift = 56
bits = 8

[channel.map]
0 = 1
1 = 2
2 = 3
3 = 4
"""


def packed64(out, rng):
    """Worked example 1 (docs/formats.md): channel (raw 0..3, mapped to 1..4) in bits
    56..64 of a LE u64, time in bits 0..56."""
    n = 3000
    ticks = poisson_times(rng, n, 2.0e5, start=123_456)
    raw = rng.integers(0, 4, n)
    words = [put_bits(put_bits(0, 0, 56, int(t)), 56, 8, int(c)) for t, c in zip(ticks, raw)]
    with open(os.path.join(out, "packed64.bin"), "wb") as f:
        f.write(b"".join(struct.pack("<Q", w) for w in words))
    write_layout(out, "packed64", PACKED64_TOML)
    chans = [stats(c + 1, "", "fixtures/packed64.bin", ticks[raw == c]) for c in range(4)]
    expected(out, "packed64", ["fixtures/packed64.bin"], "fixtures/packed64.layout.toml", chans, 0)


EDGE32_TOML = """\
# docs/formats.md, worked example 2: one little-endian 32-bit word per record: a 24-bit
# time counter, an edge flag (1 = falling), a 6-bit channel and a kind bit (1 = the
# counter wrapped once: an overflow record). Ticks of 6.789 ps (an invented value).
record_bytes = 4
tick_ps = "6.789"
wrap_bits = 24

[time]
offset = 0
width = 4
bits = 24

[edge]
offset = 0
width = 4
shift = 24
bits = 1
falling = 1
keep = "both"
falling_add = 100

[channel]
offset = 0
width = 4
shift = 25
bits = 6

[kind]
offset = 0
width = 4
shift = 31
bits = 1

[kinds]
0 = "event"
1 = "overflow"
"""


def edge32(out, rng):
    """Worked example 2: 32-bit words with overflow records and an edge flag; both edges
    kept, falling edges on channel + 100."""
    n, tick_fs, period_bits = 4000, 6_789, 24
    ticks = poisson_times(rng, n, 2.0**22, start=1_000)
    chan = rng.integers(1, 5, n)
    falling = rng.integers(0, 2, n)
    noise = rng.integers(0, 2**31, n + 4 * n)
    words, epoch, k = [], 0, 0
    for t, c, e in zip(ticks, chan, falling):
        t = int(t)
        while epoch < t >> period_bits:  # one overflow record per period passed
            words.append(put_bits(int(noise[k]), 31, 1, 1))
            k += 1
            epoch += 1
        w = put_bits(0, 0, 24, t & (2**24 - 1))
        w = put_bits(w, 24, 1, int(e))
        w = put_bits(w, 25, 6, int(c))
        words.append(put_bits(w, 31, 1, 0))
    with open(os.path.join(out, "edge32.bin"), "wb") as f:
        f.write(b"".join(struct.pack("<I", w) for w in words))
    write_layout(out, "edge32", EDGE32_TOML)
    ps = np.array([(int(t) * tick_fs + 500) // 1000 for t in ticks], dtype=np.uint64)
    ours = chan + 100 * falling
    chans = [stats(int(c), "", "fixtures/edge32.bin", ps[ours == c]) for c in sorted(set(ours.tolist()))]
    expected(out, "edge32", ["fixtures/edge32.bin"], "fixtures/edge32.layout.toml", chans, 0)


MARKER16_TOML = """\
# docs/formats.md, worked example 3: 16-byte big-endian records: a 48-bit time in the
# low bits and a kind byte in the top byte of the first 8-byte word, a 2-byte channel,
# 6 filler bytes. Kind 0: a time tag; 7: the external trigger, our channel 9; 15: a
# housekeeping record to ignore; any other kind is skipped and counted. Channels may
# arrive up to 500 ps out of order. Ticks of 4 ps.
record_bytes = 16
tick_ps = "4"
reorder_ps = 500

[time]
offset = 0
width = 8
endian = "big"
bits = 48

[kind]
offset = 0
width = 8
endian = "big"
shift = 56
bits = 8
unknown = "skip"

[kinds]
0 = "event"
7 = { marker = 9 }
15 = "ignore"

[channel]
offset = 8
width = 2
endian = "big"
"""


def marker16(out, rng):
    """Worked example 3: records with a marker kind, ignored and unknown kinds, and
    neighbours of different channels swapped by up to 120 ticks (480 ps ≤ 500 ps)."""
    n, tick_fs = 2000, 4000
    ticks = poisson_times(rng, n, 300.0, start=50)
    chan = rng.integers(1, 4, n)
    chan[rng.random(n) < 0.08] = 9  # marker records
    order = list(range(n))
    i = 0
    while i + 1 < n:
        a, b = order[i], order[i + 1]
        if chan[a] != chan[b] and int(ticks[b]) - int(ticks[a]) <= 120 and rng.random() < 0.5:
            order[i], order[i + 1] = b, a
            i += 2
        else:
            i += 1
    recs = []
    for j in order:
        if rng.random() < 0.05:  # a housekeeping record
            recs.append((put_bits(int(rng.integers(0, 2**48)), 56, 8, 15), 0))
        if rng.random() < 0.02:  # a kind the layout does not list
            recs.append((put_bits(int(rng.integers(0, 2**48)), 56, 8, 200), 0))
        kind = 7 if chan[j] == 9 else 0
        recs.append((put_bits(int(ticks[j]), 56, 8, kind), 0 if chan[j] == 9 else int(chan[j])))
    with open(os.path.join(out, "marker16.bin"), "wb") as f:
        for w, c in recs:
            f.write(struct.pack(">QH", w, c) + bytes(rng.integers(0, 256, 6, dtype=np.uint8)))
    write_layout(out, "marker16", MARKER16_TOML)
    ps = ticks * np.uint64(tick_fs // 1000)  # 4 ps ticks: whole ps, no rounding
    chans = [stats(int(c), "", "fixtures/marker16.bin", ps[chan == c]) for c in [1, 2, 3, 9]]
    expected(out, "marker16", ["fixtures/marker16.bin"], "fixtures/marker16.layout.toml", chans, 0)


LAYOUT_TOML = """\
# Layout of fixtures/records_wrap32.bin (keys: docs/formats.md).
record_bytes = 12
header_bytes = 16
tick_ps = "12.345"
wrap_bits = 32

[time]
offset = 0
width = 4
endian = "little"

[channel]
offset = 4
width = 2
endian = "little"
"""


def main():
    out = sys.argv[1] if len(sys.argv) > 1 else os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "fixtures")
    os.makedirs(out, exist_ok=True)
    rng = np.random.default_rng(SEED)
    arrays(out, rng)
    records_wrap32(out, rng)
    records_be64(out, rng)
    container(out, rng)
    # The worked examples of docs/formats.md, each from its own generator (so the files
    # above stay as they were).
    packed64(out, np.random.default_rng(SEED + 1))
    edge32(out, np.random.default_rng(SEED + 2))
    marker16(out, np.random.default_rng(SEED + 3))
    with open(os.path.join(out, "records_wrap32.layout.toml"), "w") as f:
        f.write(LAYOUT_TOML)


if __name__ == "__main__":
    main()
