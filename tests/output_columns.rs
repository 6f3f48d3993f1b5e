//! Each table column lands under its own name: a block whose every estimate, σ and ratio
//! differs is written as HDF5 and CSV, read back outside the project (h5py; Python's csv
//! module), and every column of the singles, coincidences and sweep tables is compared
//! with the engine's row field of the same name (an estimate's `_sigma` column with its
//! σ; `live_time_s` with `live_time_ps`/10¹²). Two columns swapped on the way into the
//! Document (e.g. `acc_analytic` ⇄ `acc_measured`) fail here. Units are asserted directly.

mod common;

use tagsieve::engine::tables::*;
use tagsieve::output::layout::run_document;
use tagsieve::output::provenance::Provenance;
use tagsieve::output::{write_document, Format};

/// Estimates whose values and σ all differ from each other and from every other field.
fn row(a: u32, b: u32, window_ps: u64, k: f64) -> CoincidenceRow {
    let est = |v: f64, s: f64| Estimate { value: v + k, sigma: s + k / 8.0 };
    CoincidenceRow {
        a,
        b,
        rel_delay_ps: -41_250 - k as i64,
        window_ps,
        coincidences: 5_000 + k as u64,
        heralded: 4_321 + k as u64,
        acc_analytic: est(11.125, 0.375),
        acc_measured: est(13.5, 0.625),
        acc_offset_counts: vec![12, 15, 14],
        acc_offsets_ps: vec![-2_000_001, 2_000_001, 2_001_002],
        net: est(4_977.25, 70.875),
        car: 449.4375 + k,
        acc_agreement_sigma: -2.8125 - k,
    }
}

fn block() -> BlockTables {
    BlockTables {
        label: "larch_rowan".into(),
        span: Some(BlockSpan { start_ps: 1_000, end_ps: 2_500_001_000 }),
        singles: vec![
            SinglesRow { channel: 1, name: "larch_plus".into(), events: 812_345, first_ps: 1_000, last_ps: 2_499_000_000, live_time_ps: 2_500_000_000, rate_hz: 324_938.0 },
            SinglesRow { channel: 3, name: "rowan_plus".into(), events: 790_001, first_ps: 1_017, last_ps: 2_500_000_999, live_time_ps: 2_500_000_000, rate_hz: 316_000.4 },
        ],
        delays_ps: vec![(1, 0), (3, 41_250)],
        window_ps: Some(1_001),
        coincidences: vec![row(1, 3, 1_001, 0.0), row(1, 4, 1_001, 1.0)],
        scans: vec![],
        sweeps: vec![SweepTable {
            a: 1,
            b: 3,
            rel_delay_ps: -41_250,
            rows: (1..=4).map(|k| row(1, 3, 250 * k, 2.0 + k as f64)).collect(),
            recommended_window_ps: 750,
            criterion: "max-net-significance".into(),
        }],
    }
}

/// Reads the HDF5 and CSV files back and compares every column with the engine rows
/// (JSON from serde). Prints one line per table checked; exits 1 listing differences.
const CHECK: &str = r##"
import csv, io, json, sys
import h5py

h5_path, csv_path, rows_path = sys.argv[1:4]
block = json.load(open(rows_path))
label = block["label"]
# The unit of every column, by what the column holds (common practice: integer times in
# ps, counts and estimates of counts in "counts", ratios and significances in "1").
UNITS = {
    "channel": "", "name": "", "events": "counts", "first_ps": "ps", "last_ps": "ps", "live_time_s": "s", "rate_hz": "Hz",
    "a": "", "b": "", "rel_delay_ps": "ps", "window_ps": "ps", "coincidences": "counts", "heralded": "counts",
    "acc_analytic": "counts", "acc_analytic_sigma": "counts", "acc_measured": "counts", "acc_measured_sigma": "counts",
    "net": "counts", "net_sigma": "counts", "car": "1", "acc_agreement_sigma": "1",
}
diffs = []

def engine_value(row, column):
    if column in row:
        v = row[column]
        return v["value"] if isinstance(v, dict) else v
    if column.endswith("_sigma") and isinstance(row.get(column[:-6]), dict):
        return row[column[:-6]]["sigma"]
    if column.endswith("_s") and column[:-2] + "_ps" in row:
        return row[column[:-2] + "_ps"] / 1e12
    raise KeyError(f"no engine field for column {column}")

def compare(where, columns, units, rows):
    if sorted(columns) != sorted(UNITS_OF[where]):
        diffs.append(f"{where}: columns {sorted(columns)}, expected {sorted(UNITS_OF[where])}")
    for name, values in columns.items():
        if units[name] != UNITS[name]:
            diffs.append(f"{where}/{name}: unit {units[name]!r}, expected {UNITS[name]!r}")
        want = [engine_value(r, name) for r in rows]
        got = [v.decode() if isinstance(v, bytes) else v for v in values]
        if isinstance(want[0], str):
            ok = got == want
        else:
            ok = len(got) == len(want) and all(float(g) == float(w) for g, w in zip(got, want))
        if not ok:
            diffs.append(f"{where}/{name}: file {got}, engine {want}")
    print(f"checked {where}: {len(columns)} columns")

SINGLES = ["channel", "name", "events", "first_ps", "last_ps", "live_time_s", "rate_hz"]
COINC = ["a", "b", "rel_delay_ps", "window_ps", "coincidences", "heralded", "acc_analytic", "acc_analytic_sigma",
         "acc_measured", "acc_measured_sigma", "net", "net_sigma", "car", "acc_agreement_sigma"]
sweep = block["sweeps"][0]
sweep_name = f"{sweep['a']}-{sweep['b']}"
TABLES = {
    f"blocks/{label}/singles": (SINGLES, block["singles"]),
    f"blocks/{label}/coincidences": (COINC, block["coincidences"]),
    f"blocks/{label}/sweeps/{sweep_name}": (COINC, sweep["rows"]),
}
UNITS_OF = {}
for path, (cols, rows) in TABLES.items():
    for fmt in ("hdf5", "csv"):
        UNITS_OF[f"{fmt} /{path}"] = cols

with h5py.File(h5_path, "r") as f:
    for path, (cols, rows) in TABLES.items():
        t = f[path]
        columns = {name: list(ds[()]) for name, ds in t.items()}
        units = {name: (ds.attrs["units"].decode() if isinstance(ds.attrs["units"], bytes) else ds.attrs["units"]) for name, ds in t.items()}
        compare(f"hdf5 /{path}", columns, units, rows)

# CSV: sections opened by "# table /path", "# key = value" comment lines, then a header of
# "name [unit]" cells and the rows, up to a blank line.
sections, current = {}, None
for line in open(csv_path, newline="").read().split("\n"):
    if line.startswith("# table "):
        current = line[len("# table "):].strip()
        sections[current] = []
    elif current is not None and line == "":
        current = None
    elif current is not None and not line.startswith("# "):
        sections[current].append(line)
for path, (cols, rows) in TABLES.items():
    lines = sections.get("/" + path)
    if lines is None:
        diffs.append(f"csv: no table /{path}")
        continue
    records = list(csv.reader(io.StringIO("\n".join(lines))))
    header, body = records[0], records[1:]
    names = [h.rsplit(" [", 1)[0] for h in header]
    units = {h.rsplit(" [", 1)[0]: h.rsplit(" [", 1)[1].rstrip("]") for h in header}
    columns = {n: [r[i] for r in body] for i, n in enumerate(names)}
    compare(f"csv /{path}", columns, units, rows)

if diffs:
    print("\n".join(diffs))
    sys.exit(1)
"##;

#[test]
fn every_column_holds_the_engine_field_of_its_name_in_hdf5_and_csv() {
    let d = tempfile::tempdir().unwrap();
    let b = block();
    // The premise: no two estimate fields of a row share a value or a σ.
    for r in b.coincidences.iter().chain(&b.sweeps[0].rows) {
        let mut v = vec![r.acc_analytic.value, r.acc_analytic.sigma, r.acc_measured.value, r.acc_measured.sigma, r.net.value, r.net.sigma, r.car, r.acc_agreement_sigma];
        v.sort_by(f64::total_cmp);
        v.dedup();
        assert_eq!(v.len(), 8, "{r:?}");
    }
    let doc = run_document(std::slice::from_ref(&b), &Provenance::new(vec!["tagsieve".into(), "test".into()]));
    let (h5, csv, rows) = (d.path().join("t.h5"), d.path().join("t.csv"), d.path().join("rows.json"));
    write_document(&doc, Some(&h5), Format::Hdf5, false).unwrap();
    write_document(&doc, Some(&csv), Format::Csv, false).unwrap();
    std::fs::write(&rows, serde_json::to_vec(&b).unwrap()).unwrap();
    let out = common::python().arg("-c").arg(CHECK).arg(&h5).arg(&csv).arg(&rows).output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{text}{}", String::from_utf8_lossy(&out.stderr));
    assert_eq!(text.matches("checked ").count(), 6, "{text}");
}
