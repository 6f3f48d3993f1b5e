#!/usr/bin/env python3
"""Write the small seed corpus under fuzz/seeds/<target>/ (run from the repository root).

Seeds are short valid inputs so the fuzzers start inside the formats instead of having
to discover magic bytes and key names; byte layouts follow src/read/container.rs and
src/read/records/ and docs/formats.md, the TOML seeds follow fixtures/ and docs/manifest.md.
"""
import os
import shutil
import struct

ROOT = os.path.join("fuzz", "seeds")


def put(target, name, data):
    d = os.path.join(ROOT, target)
    os.makedirs(d, exist_ok=True)
    with open(os.path.join(d, name), "wb") as f:
        f.write(data if isinstance(data, bytes) else data.encode())


def text(s, width):
    b = s.encode()[:width]
    return b + b"\0" * (width - len(b))


def container(channels, tick_fs=1000, creator="seed"):
    """channels: list of (channel, name, [ps...]); sections back to back after the table."""
    head = b"\x7fTSIEVE\n" + struct.pack("<IIqq", 1, len(channels), tick_fs, 1_700_000_000) + text(creator, 64)
    offset = 96 + 64 * len(channels)
    table, body = b"", b""
    for ch, name, times in channels:
        table += struct.pack("<IIQQ", ch, 0, len(times), offset) + text(name, 40)
        body += b"".join(struct.pack("<Q", t) for t in times)
        offset += 8 * len(times)
    return head + table + body


def records_structured(layout8, recs):
    """Flags byte 0x02 (structured layout, chunk 2), 8 layout bytes, then the records."""
    return bytes([0x02]) + bytes(layout8) + recs


def main():
    shutil.rmtree(ROOT, ignore_errors=True)
    put("container", "two_channels", container([(1, "larch_plus", [10, 250, 900]), (3, "rowan_plus", [12, 600])]))
    put("container", "empty_channel", container([(2, "", []), (7, "x", [5])], tick_fs=12_345))
    put("container", "no_channels", container([]))
    put("container", "unsorted", container([(4, "u", [30, 20, 10, 40])]))

    # rec=12, skip=0, time=0:4:le, chan=4:2:le, tick 1 ps (fs-1 = 999), wrap=32.
    recs = b"".join(struct.pack("<IHxxxxxx", t, c) for t, c in [(100, 1), (4_294_967_000, 2), (50, 1), (60, 3)])
    put("records", "wrap32_le", records_structured([12, 0, 0, 4, 0xE7, 0x03, 0b0010_1000, 32], recs))
    # rec=16, time=0:8:be, chan=8:4:be, tick 2.5 ps (fs-1 = 2499), no wrap.
    recs = b"".join(struct.pack(">QI4x", t, c) for t, c in [(1, 70_000), (2, 5), (9, 70_000)])
    put("records", "be64", records_structured([16, 0, 0, 8, 0xC3, 0x09, 0b0001_0111, 0], recs))
    spec = b"rec=8,skip=4,time=0:4:le,chan=4:1,tick_ps=2.5,wrap=16\n"
    recs = b"HEAD" + b"".join(struct.pack("<IB3x", t, c) for t, c in [(65_530, 0), (3, 1), (9, 0)])
    put("records", "spec_wrap16", bytes([0x07]) + spec + recs)

    # The new layout keys through the spec form: bit fields sharing one word, kinds with
    # overflow (counted) and marker records, skip-unknown, a signed channel map, edges,
    # a reorder tolerance.
    spec = (b"rec=4,time=0:4[0..20],chan=0:4:signed[20..24],kind=0:4[24..27],edge=0:4[27..28],event=0,overflow=1,"
            b"marker=2>9,ignore=3,unknown=skip,map=-1>1+0>2+1>3,edge_keep=both,edge_falling=1,edge_falling_add=100,"
            b"tick_ps=1.5,wrap=20,reorder_ps=30\n")
    words = [5 | 0xF << 20, 9 | 1 << 20 | 1 << 27, 0 | 1 << 24, 2 | 2 << 24, 7 | 5 << 24, 1 | 0xF << 20]
    put("records", "packed_kinds", bytes([0x05]) + spec + b"".join(struct.pack("<I", w) for w in words))
    spec = b"rec=10,time=0:8:be[0..48],kind=0:8:be[56..64],chan=8:1,count=9:1,event=0,overflow_count=1,tick_ps=4,wrap=8\n"
    recs = [struct.pack(">QBB", w, c, n) for w, c, n in [(200, 3, 0), (1 << 56, 0, 2), (10, 1, 0), (1 << 56, 0, 0), (11, 3, 0)]]
    put("records", "counted_overflow", bytes([0x03]) + spec + b"".join(recs))
    for name in ("packed64", "edge32", "marker16"):
        put("layout_toml", name, open(os.path.join("fixtures", name + ".layout.toml"), "rb").read())
    put("layout_toml", "wrap32", open("fixtures/records_wrap32.layout.toml", "rb").read())
    put("layout_toml", "be64", 'record_bytes = 16\ntick_ps = 1\n[time]\noffset = 0\nwidth = 8\nendian = "big"\n'
        '[channel]\noffset = 8\nwidth = 4\nendian = "big"\n')
    put("layout_toml", "float_tick", "record_bytes = 8\nheader_bytes = 3\ntick_ps = 0.5\nwrap_bits = 20\n"
        "[time]\noffset = 4\nwidth = 4\n[channel]\noffset = 0\nwidth = 1\n")

    for name in ("four_detectors.toml", "one_per_side.toml"):
        put("manifest", name.removesuffix(".toml"), open(os.path.join("fixtures", "manifest", name), "rb").read())


if __name__ == "__main__":
    main()
