#!/usr/bin/env python3
"""Cross-check `tagsieve inspect --json` on per-channel arrays against NumPy.

Usage: tools/crosscheck_inspect.py TAGSIEVE_BINARY CH=PATH [CH=PATH ...]
Reads each array with numpy.fromfile('<u8'), computes the statistics inspect reports
(definitions in docs/formats.md; shared with make_fixtures.py), runs the binary and
compares: integers exactly, rates to 1e-12 relative, and the exit code (2 when any step
goes backwards, else 0). Prints each mismatch; exits 1 if there is any.
"""
import json
import os
import subprocess
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from make_fixtures import stats, totals  # noqa: E402


def same(a, b):
    if isinstance(a, float) or isinstance(b, float):
        return a is not None and b is not None and abs(a - b) <= 1e-12 * max(abs(a), abs(b))
    return a == b


def main():
    binary, args = sys.argv[1], sys.argv[2:]
    want = []
    for a in args:
        ch, path = a.split("=", 1)
        t = np.fromfile(path, dtype="<u8")
        want.append(stats(int(ch), "", path, t))
    run = subprocess.run([binary, "--json", "--quiet", "inspect", *args], capture_output=True, text=True)
    got = json.loads(run.stdout)
    bad = []
    want_code = 2 if any(c["out_of_order_steps"] for c in want) else 0
    if run.returncode != want_code:
        bad.append(f"exit code {run.returncode}, expected {want_code}: {run.stderr.strip()}")
    by_channel = {c["channel"]: c for c in got["channels"]}
    for w in want:
        g = by_channel.get(w["channel"], {})
        bad += [f"channel {w['channel']} {k}: numpy {v}, inspect {g.get(k)}" for k, v in w.items() if not same(v, g.get(k))]
    bad += [f"totals {k}: numpy {v}, inspect {got['totals'].get(k)}" for k, v in totals(want).items() if not same(v, got["totals"].get(k))]
    for line in bad:
        print(line)
    print(f"crosscheck: {len(want)} channels, {sum(c['events'] for c in want)} events, {len(bad)} mismatches")
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
