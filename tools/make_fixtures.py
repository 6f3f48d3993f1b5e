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
    u16 LE channel, 6 filler bytes; tick 80.955 ps (= 80 955 fs)."""
    n, tick_fs = 4000, 80_955
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


LAYOUT_TOML = """\
# Layout of fixtures/records_wrap32.bin (keys: docs/formats.md).
record_bytes = 12
header_bytes = 16
tick_ps = "80.955"
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
    with open(os.path.join(out, "records_wrap32.layout.toml"), "w") as f:
        f.write(LAYOUT_TOML)


if __name__ == "__main__":
    main()
