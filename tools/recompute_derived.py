#!/usr/bin/env python3
"""Recompute every derived column of a tagsieve HDF5 file with NumPy/SciPy only, from the
file's own integer counts and from slice counts taken from the raw tags, and compare them
with what the file holds (relative tolerance 1e-12).

Checked, per block: singles (live_time_s, rate_hz); the coincidences table (analytic and
measured accidentals with sigma, their agreement, net, sigma_net, CAR); every sweep table
(the same columns, plus the recommended window); and /chsh (E, sigma_E raw and corrected,
the four S variants with sigma_S, violation and one-sided p-value). Units are asserted
column by column.

Formulas (the definitions in the project's docs and doc comments, written out here anew):
  W = 2*floor(w/2) + 1 ps: the number of integer delays a window of w ps accepts
      (2*|delta| <= w).
  analytic = W * sum_k nA_k nB_k / T_k, sigma = W * sqrt(sum_k (nA_k^2 nB_k + nA_k nB_k^2) / T_k^2)
      over time slices k of length slice_ps cut from the block's first tag (the last one
      shorter), T_k the slice length in ps.
  measured = mean of the K off-peak window counts, sigma = sqrt(sum N)/K, or 1.841/K when
      sum N = 0 (the one-sided 84.13 % Poisson upper limit for zero counts, Gehrels,
      Astrophys. J. 303, 336 (1986), Table 1).
  agreement = (analytic - measured) / sqrt(sigma_a^2 + sigma_m^2).
  net = C - analytic, sigma_net = sqrt(C + sigma_a^2); CAR = C / analytic.
  E = (x++ + x-- - x+- - x-+) / sum x with x = (N - acc) / t (t = 1 unless live times),
      sigma_E^2 = 4 (x_diff^2 var_same + x_same^2 var_diff) / sum^4, var = (N + sigma_acc^2) / t^2.
  S = sum of the four E with one minus sign; sigma_S = quadrature of the sigma_E;
      violation = (|S| - 2) / sigma_S (CHSH, Phys. Rev. Lett. 23, 880 (1969)); p = norm.sf(violation)
      of the file's own violation value.

  recompute_derived.py FILE.h5 [--tags CH=PATH ...] [--manifest RUN.toml]

--tags: the raw tags (little-endian u64 ps per channel) of the file's only block.
--manifest: the run manifest of a `chsh` file; blocks given as per-channel arrays are
recounted from their files, and the corrected E takes its accidentals from the blocks.
Exit 0 on agreement, 1 with the differences listed, 2 on bad usage.
"""
import argparse
import json
import math
import sys
import tomllib
from pathlib import Path

import h5py
import numpy as np
from scipy.stats import norm

from independent_count import load_tags  # same folder: sorted little-endian u64 tags below 2^62

REL = 1e-12
ZERO_COUNT_UPPER_1SIGMA = 1.841  # Gehrels, ApJ 303, 336 (1986), Table 1
SIGNIFICANCE_TIE = 0.1  # the project's rule (engine::sweep doc): net/sigma within 0.1 of the best counts as a tie; the smallest such window wins

COUNT_UNITS = {
    "a": "", "b": "", "rel_delay_ps": "ps", "window_ps": "ps", "coincidences": "counts",
    "heralded": "counts", "acc_analytic": "counts", "acc_analytic_sigma": "counts",
    "acc_measured": "counts", "acc_measured_sigma": "counts", "net": "counts",
    "net_sigma": "counts", "car": "1", "acc_agreement_sigma": "1",
}
SINGLES_UNITS = {"channel": "", "name": "", "events": "counts", "first_ps": "ps", "last_ps": "ps", "live_time_s": "s", "rate_hz": "Hz"}
CORR_UNITS = {
    "setting_pair": "", "angle_a_deg": "deg", "angle_b_deg": "deg", "n_pp": "counts", "n_pm": "counts",
    "n_mp": "counts", "n_mm": "counts", "e_raw": "1", "e_raw_sigma": "1", "e_corrected": "1", "e_corrected_sigma": "1",
}
S_UNITS = {"kind": "", "formula": "", "s": "1", "s_sigma": "1", "violation_sigma": "1", "p_value": "1", "is_primary": "1", "is_max": "1"}
PAIR_ORDER = [("a", "b"), ("a", "b'"), ("a'", "b"), ("a'", "b'")]
COMBOS = ["pp", "pm", "mp", "mm"]


class Diffs(list):
    def close(self, what, got, want):
        got, want = float(got), float(want)
        if math.isnan(got) and math.isnan(want):
            return
        if math.isinf(want) or math.isinf(got):
            if got != want:
                self.append(f"{what}: file {got!r}, recomputed {want!r}")
            return
        if not abs(got - want) <= REL * max(abs(got), abs(want)):
            self.append(f"{what}: file {got!r}, recomputed {want!r}")

    def equal(self, what, got, want):
        if got != want:
            self.append(f"{what}: file {got!r}, expected {want!r}")


def cols(table):
    return {name: ds[()] for name, ds in table.items()}


def check_units(diffs, where, table, units):
    for name, unit in units.items():
        if name not in table:
            diffs.append(f"{where}: column {name} missing")
            continue
        got = table[name].attrs.get("units")
        got = got.decode() if isinstance(got, bytes) else got
        diffs.equal(f"{where}/{name} units", got, unit)


def default_offsets(window_ps):
    """The documented default off-peak offsets of a window (README, `--help`): ten windows
    side by side, +-(max(2 us, 2W) + k*W) ps, k = 0..4, W = 2*floor(w/2) + 1."""
    width = 2 * (window_ps // 2) + 1
    first = max(2_000_000, 2 * width)
    return [sign * (first + k * width) for k in range(5) for sign in (-1, 1)]


def parse_offsets(value):
    """The offsets parameter: a list (JSON text or an array), or None for the per-window
    default rule (a sweep stores the rule as text)."""
    if isinstance(value, bytes):
        value = value.decode()
    if isinstance(value, str):
        try:
            value = json.loads(value)  # e.g. "[-2000000, 2000000]"
        except ValueError:
            if value.startswith("per window"):
                return None
            sys.exit(f"param.acc_offsets_ps {value!r}: neither a list nor the per-window rule")
    return [int(x) for x in np.atleast_1d(value)]


def offsets_for(offsets_ps, window_ps):
    return default_offsets(window_ps) if offsets_ps is None else offsets_ps


def pairs_in(ta, tb, centre, h):
    """Pairs (a, b) with |b - a - centre| <= h, and the A events with a partner."""
    hi = np.searchsorted(tb, ta + centre + h, side="right")
    lo = np.searchsorted(tb, ta + centre - h, side="left")
    n = hi - lo
    return int(n.sum()), int(np.count_nonzero(n))


def slice_counts(t, start, end, slice_ps):
    edges = np.arange(start, end, slice_ps, dtype=np.int64)
    ends = np.minimum(edges + slice_ps, end)
    counts = np.searchsorted(t, ends, side="left") - np.searchsorted(t, edges, side="left")
    return counts.astype(np.float64), (ends - edges).astype(np.float64)


def analytic(na, nb, lengths, window_ps):
    w = 2 * (window_ps // 2) + 1
    rate = math.fsum(na * nb / lengths)
    var = math.fsum((na * na * nb + na * nb * nb) / (lengths * lengths))
    return rate * w, math.sqrt(var) * w


def measured(counts):
    k = len(counts)
    if k == 0:
        return math.nan, math.nan
    total = int(sum(counts))
    sigma = ZERO_COUNT_UPPER_1SIGMA if total == 0 else math.sqrt(total)
    return total / k, sigma / k


def derived(c, acc_a, acc_m):
    (a, sa), (m, sm) = acc_a, acc_m
    s = math.hypot(sa, sm)
    if s == 0:
        agree = 0.0 if a == m else math.inf
    else:
        agree = (a - m) / s
    car = c / a if a > 0 else math.nan
    return {
        "acc_analytic": a, "acc_analytic_sigma": sa, "acc_measured": m, "acc_measured_sigma": sm,
        "acc_agreement_sigma": agree, "net": c - a, "net_sigma": math.sqrt(c + sa * sa), "car": car,
    }


class Block:
    """One block's raw tags, its span and slice counts."""

    def __init__(self, tags, slice_ps):
        self.tags = tags
        present = [t for t in tags.values() if t.size]
        self.start = int(min(t[0] for t in present))
        self.end = int(max(t[-1] for t in present)) + 1
        self.slices = {ch: slice_counts(t, self.start, self.end, slice_ps) for ch, t in tags.items()}

    def analytic(self, a, b, window_ps):
        (na, lengths), (nb, _) = self.slices[a], self.slices[b]
        return analytic(na, nb, lengths, window_ps)


def check_row(diffs, where, c, i, blk, offsets_ps, offpeak_counts):
    a, b, w, delta = int(c["a"][i]), int(c["b"][i]), int(c["window_ps"][i]), int(c["rel_delay_ps"][i])
    h = w // 2
    count, heralded = pairs_in(blk.tags[a], blk.tags[b], delta, h)
    diffs.equal(f"{where} {a}-{b} w={w} coincidences", int(c["coincidences"][i]), count)
    diffs.equal(f"{where} {a}-{b} w={w} heralded", int(c["heralded"][i]), heralded)
    recount = [pairs_in(blk.tags[a], blk.tags[b], delta + o, h)[0] for o in offsets_for(offsets_ps, w)]
    if offpeak_counts is not None:
        diffs.equal(f"{where} {a}-{b} w={w} off-peak counts", offpeak_counts, recount)
    else:
        offpeak_counts = recount
    want = derived(int(c["coincidences"][i]), blk.analytic(a, b, w), measured(offpeak_counts))
    for name, value in want.items():
        diffs.close(f"{where} {a}-{b} w={w} {name}", c[name][i], value)
    return want


def check_block(diffs, label, g, blk, slice_ps, offsets_ps, delays):
    where = f"block {label}"
    diffs.equal(f"{where} span_start_ps", int(g.attrs["span_start_ps"]), blk.start)
    diffs.equal(f"{where} span_end_ps", int(g.attrs["span_end_ps"]), blk.end)
    diffs.close(f"{where} span_s", g.attrs["span_s"], (blk.end - blk.start) / 1e12)
    check_units(diffs, f"{where}/singles", g["singles"], SINGLES_UNITS)
    s = cols(g["singles"])
    for i, ch in enumerate(s["channel"]):
        diffs.close(f"{where} singles {ch} live_time_s", s["live_time_s"][i], (blk.end - blk.start) / 1e12)
        diffs.close(f"{where} singles {ch} rate_hz", s["rate_hz"][i], int(s["events"][i]) / ((blk.end - blk.start) / 1e12))
    d = cols(g["delays"])
    delay = {int(ch): int(v) for ch, v in zip(d["channel"], d["delay_ps"])}
    for ch, v in delays.items():
        diffs.equal(f"{where} delay of channel {ch}", delay.get(ch), v)
    checked = 0
    c = cols(g["coincidences"]) if "coincidences" in g else {"a": []}  # a sweep may store none
    if "coincidences" in g:
        check_units(diffs, f"{where}/coincidences", g["coincidences"], COUNT_UNITS)
        o = cols(g["off_peak_windows"])
    for i in range(len(c["a"])):
        a, b, w = int(c["a"][i]), int(c["b"][i]), int(c["window_ps"][i])
        diffs.equal(f"{where} {a}-{b} rel_delay_ps", int(c["rel_delay_ps"][i]), delay[b] - delay[a])
        sel = (o["a"] == a) & (o["b"] == b) & (o["window_ps"] == w)
        diffs.equal(f"{where} {a}-{b} offsets", [int(x) for x in o["offset_ps"][sel]], offsets_for(offsets_ps, w))
        check_row(diffs, where, c, i, blk, offsets_ps, [int(x) for x in o["counts"][sel]])
        checked += 1
    for name, t in (g["sweeps"].items() if "sweeps" in g else []):
        check_units(diffs, f"{where}/sweeps/{name}", t, COUNT_UNITS)
        sc = cols(t)
        rows = [check_row(diffs, f"{where} sweep", sc, i, blk, offsets_ps, None) for i in range(len(sc["a"]))]
        crit = t.attrs["criterion"]
        crit = crit.decode() if isinstance(crit, bytes) else crit
        if crit == "max-net-significance":
            z = [r["net"] / r["net_sigma"] if r["net_sigma"] > 0 else -math.inf for r in rows]
            best = max(z)
            want = next(int(sc["window_ps"][i]) for i, x in enumerate(z) if x >= best - SIGNIFICANCE_TIE)
            diffs.equal(f"{where} sweep {name} recommended_window_ps", int(t.attrs["recommended_window_ps"]), want)
        checked += len(rows)
    if checked == 0:
        diffs.append(f"{where}: no coincidence or sweep rows to check")
    return checked


def correlation(n, acc, t):
    x = [(n[i] - acc[i][0]) / t[i] for i in range(4)]
    v = [(n[i] + acc[i][1] ** 2) / t[i] ** 2 for i in range(4)]
    same, diff = x[0] + x[3], x[1] + x[2]
    total = same + diff
    e = (same - diff) / total
    var = 4 * (diff**2 * (v[0] + v[3]) + same**2 * (v[1] + v[2])) / total**4
    return e, math.sqrt(var)


def check_chsh(diffs, f, manifest, manifest_dir):
    g = f["chsh"]
    check_units(diffs, "chsh/correlations", g["correlations"], CORR_UNITS)
    check_units(diffs, "chsh/s_values", g["s_values"], S_UNITS)
    c = cols(g["correlations"])
    pairs = [x.decode() if isinstance(x, bytes) else x for x in c["setting_pair"]]
    diffs.equal("chsh pair order", pairs, [f"{a},{b}" for a, b in PAIR_ORDER])
    roles = manifest["roles"]
    setup = manifest["setup"]
    e_sets = {"raw": [], "accidental-corrected": []}
    for i, (la, lb) in enumerate(PAIR_ORDER):
        n = [int(c[f"n_{k}"][i]) for k in COMBOS]
        acc, t = [None] * 4, [1.0] * 4
        for spec in (s for s in manifest["block"] if s["alice"] == la and s["bob"] == lb):
            rows = cols(f["blocks"][spec["name"]]["coincidences"])
            span = f["blocks"][spec["name"]].attrs["span_s"]
            if setup == "four-detectors":
                for k, (pa, pb) in enumerate([("+", "+"), ("+", "-"), ("-", "+"), ("-", "-")]):
                    ca, cb = roles[f"alice{pa}"], roles[f"bob{pb}"]
                    j = [r for r in range(len(rows["a"])) if rows["a"][r] == ca and rows["b"][r] == cb][0]
                    diffs.equal(f"chsh {la},{lb} n_{COMBOS[k]}", n[k], int(rows["coincidences"][j]))
                    acc[k] = (rows["acc_analytic"][j], rows["acc_analytic_sigma"][j])
            else:
                k = ["++", "+-", "-+", "--"].index(spec["outcomes"])
                diffs.equal(f"chsh {la},{lb} n_{COMBOS[k]}", n[k], int(rows["coincidences"][0]))
                acc[k] = (rows["acc_analytic"][0], rows["acc_analytic_sigma"][0])
                t[k] = spec.get("live_time_s", span)
        e_raw = correlation(n, [(0.0, 0.0)] * 4, t)
        e_cor = correlation(n, acc, t)
        where = f"chsh {la},{lb}"
        diffs.close(f"{where} e_raw", c["e_raw"][i], e_raw[0])
        diffs.close(f"{where} e_raw_sigma", c["e_raw_sigma"][i], e_raw[1])
        diffs.close(f"{where} e_corrected", c["e_corrected"][i], e_cor[0])
        diffs.close(f"{where} e_corrected_sigma", c["e_corrected_sigma"][i], e_cor[1])
        e_sets["raw"].append(e_raw)
        e_sets["accidental-corrected"].append(e_cor)
    diffs.equal("chsh from_rates", int(g.attrs["from_rates"]), int(setup != "four-detectors"))
    s = cols(g["s_values"])
    kinds = [x.decode() if isinstance(x, bytes) else x for x in s["kind"]]
    for kind, es in e_sets.items():
        idx = [i for i, k in enumerate(kinds) if k == kind]
        diffs.equal(f"chsh {kind} variants", len(idx), 4)
        sigma = math.sqrt(math.fsum(x[1] ** 2 for x in es))
        values = []
        for minus, i in enumerate(idx):
            value = sum(-e if j == minus else e for j, (e, _) in enumerate(es))
            values.append(value)
            z = (abs(value) - 2) / sigma
            where = f"chsh {kind} S (minus on term {minus})"
            diffs.close(f"{where} s", s["s"][i], value)
            diffs.close(f"{where} s_sigma", s["s_sigma"][i], sigma)
            diffs.close(f"{where} violation_sigma", s["violation_sigma"][i], z)
            # p from the file's own violation (itself checked above): p's condition number is
            # about z, so a 1e-12 difference in z alone would move p by z·1e-12 relative.
            diffs.close(f"{where} p_value", s["p_value"][i], norm.sf(s["violation_sigma"][i]))
            diffs.equal(f"{where} is_primary", int(s["is_primary"][i]), int(minus == 1))
        best = int(np.argmax(np.abs(values)))
        diffs.equal(f"chsh {kind} is_max", [int(s["is_max"][i]) for i in idx], [int(m == best) for m in range(4)])
        if kind == "raw":
            diffs.close("chsh s_raw", g.attrs["s_raw"], values[1])
            diffs.close("chsh s_raw_sigma", g.attrs["s_raw_sigma"], sigma)
            diffs.close("chsh violation_raw_sigma", g.attrs["violation_raw_sigma"], (abs(values[1]) - 2) / sigma)
            diffs.close("chsh p_value_raw", g.attrs["p_value_raw"], norm.sf(g.attrs["violation_raw_sigma"]))
        else:
            diffs.close("chsh s_corrected", g.attrs["s_corrected"], values[1])
            diffs.close("chsh s_corrected_sigma", g.attrs["s_corrected_sigma"], sigma)


def manifest_tags(spec, manifest_dir):
    if spec.get("format") != "arrays":
        return None
    out = {}
    for item in spec["inputs"]:
        ch, _, path = item.partition("=")
        out[int(ch)] = load_tags(manifest_dir / path)
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("hdf5")
    ap.add_argument("--tags", action="append", default=[], metavar="CH=PATH")
    ap.add_argument("--manifest")
    args = ap.parse_args()
    diffs = Diffs()
    checked = []
    with h5py.File(args.hdf5, "r") as f:
        # The slice length as given (--slice-s), turned into ps as the tool does: rounded
        # half away from zero, at least 1 ps.
        slice_ps = max(1, int(math.floor(float(f.attrs["param.slice_s"]) * 1e12 + 0.5)))
        offsets_ps = parse_offsets(f.attrs["param.acc_offsets_ps"])
        blocks = f["blocks"]
        if args.tags:
            if len(blocks) != 1:
                sys.exit("--tags needs a file with one block")
            tags = {}
            for item in args.tags:
                ch, sep, path = item.partition("=")
                if not sep:
                    sys.exit(f"--tags {item!r}: expected CH=PATH")
                tags[int(ch)] = load_tags(path)
            label = next(iter(blocks))
            check_block(diffs, label, blocks[label], Block(tags, slice_ps), slice_ps, offsets_ps, {})
            checked.append(f"block {label}")
        if args.manifest:
            mpath = Path(args.manifest)
            manifest = tomllib.loads(mpath.read_text())
            delays = {c["number"]: c.get("delay_ps", 0) for c in manifest.get("channel", [])}
            for spec in manifest["block"]:
                tags = manifest_tags(spec, mpath.parent)
                if tags is not None:
                    used = {ch: d for ch, d in delays.items() if ch in tags}
                    check_block(diffs, spec["name"], blocks[spec["name"]], Block(tags, slice_ps), slice_ps, offsets_ps, used)
                    checked.append(f"block {spec['name']}")
            check_chsh(diffs, f, manifest, mpath.parent)
            checked.append("chsh")
    if diffs:
        print(f"{len(diffs)} difference(s):")
        print("\n".join(diffs[:200]))
        return 1
    print(f"every derived value agrees: {', '.join(checked)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
