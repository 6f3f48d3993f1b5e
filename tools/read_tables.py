#!/usr/bin/env python3
"""Read a tagsieve HDF5 file the way an analyst would, with h5py: provenance, the blocks,
and each block's singles and coincidences with their units.

  read_tables.py run.h5
"""
import sys

import h5py


def columns(table):
    """A table is a group of 1-D datasets; each carries its unit in the `units` attribute."""
    return {name: (ds[()], ds.attrs["units"]) for name, ds in table.items()}


def text(x):
    return x.decode() if isinstance(x, bytes) else x


def print_table(title, table):
    cols = columns(table)
    print(f"  {title}:")
    print("    " + "  ".join(f"{name} [{unit}]" for name, (_, unit) in cols.items()))
    rows = len(next(iter(cols.values()))[0]) if cols else 0
    for i in range(rows):
        print("    " + "  ".join(str(text(data[i])) for data, _ in cols.values()))


def main(path):
    with h5py.File(path, "r") as f:
        print(f"{path}: {f.attrs['tool']} {f.attrs['tool_version']}, created {f.attrs['created_utc']}")
        print(f"  command: {f.attrs['command_line']}")
        for key, value in f.attrs.items():
            if key.startswith("param."):
                print(f"  {key[6:]} = {value}")
        inputs = f["provenance/inputs"]
        for p, size, xxh in zip(inputs["path"].asstr()[()], inputs["size_bytes"][()], inputs["xxh3"].asstr()[()]):
            print(f"  input {p}: {size} bytes, xxh3 {xxh}")
        for label, block in f["blocks"].items():
            window = block.attrs.get("window_ps", "none")
            print(f"block {label} (window {window} ps, span {block.attrs.get('span_s', 0.0):.3f} s)")
            # Tables with no rows are not written (docs/hdf5-layout.md): a scan has no
            # coincidences, a count no scans.
            print_table("singles", block["singles"])
            if "coincidences" in block:
                print_table("coincidences", block["coincidences"])
            for pair, scan in block.get("scans", {}).items():
                print(f"  scan {pair}: {scan['counts'].shape[0]} bins, peak at {scan.attrs.get('peak_delay_ps', 'n/a')} ps")


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    main(sys.argv[1])
