//! Round trips of a realistic Document through every format, each read back by an outside
//! reader: HDF5 by h5py (and by the hdf5 crate), CSV by Python's csv module (RFC 4180),
//! JSON by serde_json and Python's json module.

mod common;

use std::path::Path;
use tagsieve::engine::tables::*;
use tagsieve::output::hdf5::read_document;
use tagsieve::output::layout::run_document;
use tagsieve::output::provenance::Provenance;
use tagsieve::output::{write_document, AttrValue, ColumnData, Document, Format, Group, Table};

fn row(a: u32, b: u32, window_ps: u64, coincidences: u64, car: f64) -> CoincidenceRow {
    let est = |v: f64| Estimate { value: v, sigma: v.sqrt() };
    CoincidenceRow {
        a,
        b,
        rel_delay_ps: -1_234_567,
        window_ps,
        coincidences,
        heralded: coincidences - 1,
        acc_analytic: est(0.1 + window_ps as f64 * 1e-3),
        acc_measured: est(1.0 / 3.0),
        acc_offset_counts: vec![0, 7, u64::MAX],
        acc_offsets_ps: vec![-50_000, 50_000, 100_000],
        net: est(coincidences as f64 - 0.25),
        car,
        acc_agreement_sigma: -0.75,
    }
}

/// Two blocks; one scan long enough (10 000 bins) to be chunked and compressed; a NaN CAR;
/// extreme integers; a channel name with a comma, a quote, a leading '#' and non-ASCII text.
fn sample_blocks() -> Vec<BlockTables> {
    let singles = vec![
        SinglesRow { channel: 1, name: "Larch, \"idler\" µ".into(), events: u64::MAX, first_ps: 0, last_ps: u64::MAX - 1, live_time_ps: 3_000_000_000_000, rate_hz: 1.5e5 },
        SinglesRow { channel: 7, name: "#Rowan".into(), events: 12, first_ps: 5, last_ps: 99, live_time_ps: 1, rate_hz: 0.0 },
    ];
    let counts: Vec<u64> = (0..10_000u64).map(|i| (i * 2_654_435_761) % 97).collect();
    let peak = PeakFit { delay_ps: -12.5, delay_sigma_ps: 0.3, fwhm_ps: 80.0, height: 900.0, background: 3.25, net_counts: 1e4 };
    let block = |label: &str, car: f64| BlockTables {
        label: label.into(),
        span: Some(BlockSpan { start_ps: 17, end_ps: 3_000_000_000_017 }),
        singles: singles.clone(),
        delays_ps: vec![(1, 0), (7, -1_234_567)],
        window_ps: Some(1001),
        coincidences: vec![row(1, 7, 1001, 4242, car)],
        scans: vec![ScanResult { a: 1, b: 7, rel_delay_ps: -1_234_567, half_range_ps: 500_000, bin_ps: 100, counts: counts.clone(), peak: Some(peak) }],
        sweeps: vec![SweepTable {
            a: 1,
            b: 7,
            rel_delay_ps: -1_234_567,
            rows: (1..=5).map(|k| row(1, 7, 200 * k, 100 * k, f64::INFINITY)).collect(),
            recommended_window_ps: 600,
            criterion: "max-net-significance".into(),
        }],
    };
    vec![block("A0B0", f64::NAN), block("A1B1", 12.0)]
}

fn sample_doc(dir: &Path) -> Document {
    let input = dir.join("ch1.tags");
    std::fs::write(&input, [1u8, 2, 3]).unwrap();
    let prov = Provenance::new(vec!["tagsieve".into(), "count".into(), "--window".into(), "1001".into()])
        .param("window_ps", AttrValue::U64(1001))
        .param("threads", AttrValue::I64(-1))
        .input(&input)
        .unwrap();
    let mut doc = run_document(&sample_blocks(), &prov);
    // The hook for later stages: an extra top-level group.
    let mut extra = Group::new("chsh");
    extra.attrs.push(("s_value".into(), AttrValue::F64(2.7)));
    extra.tables.push(Table::new("settings").col("setting", "", ColumnData::Str(vec!["a0b0".into()])));
    doc.root.groups.push(extra);
    doc
}

/// f64 compared by bit pattern so NaN equals NaN.
fn canon(g: &Group) -> Group {
    let mut g = g.clone();
    for t in &mut g.tables {
        for c in &mut t.columns {
            if let ColumnData::F64(v) = &c.data {
                c.data = ColumnData::Str(v.iter().map(|x| format!("f64:{:x}", x.to_bits())).collect());
            }
        }
    }
    g.groups = g.groups.iter().map(canon).collect();
    g
}

#[test]
fn hdf5_round_trip_through_the_hdf5_crate() {
    let d = tempfile::tempdir().unwrap();
    let doc = sample_doc(d.path());
    let p = d.path().join("run.h5");
    write_document(&doc, Some(&p), Format::Hdf5, false).unwrap();
    assert_eq!(canon(&read_document(&p).unwrap().root), canon(&doc.root));
    let f = hdf5::File::open(&p).unwrap();
    assert!(f.dataset("blocks/A0B0/scans/1-7/counts").unwrap().is_chunked());
}

// ---- h5py -------------------------------------------------------------------------------

const H5PY_DUMP: &str = r#"
import sys, json, h5py, numpy as np
out = {}
def conv(x):
    if isinstance(x, bytes): return x.decode("utf-8")
    if isinstance(x, (np.floating, float)): return repr(float(x))
    if isinstance(x, (np.integer, int)): return int(x)
    return str(x)
def visit(name, obj):
    e = {"attrs": {k: conv(v) for k, v in obj.attrs.items()}}
    if isinstance(obj, h5py.Dataset):
        e["dtype"] = obj.dtype.kind + str(obj.dtype.itemsize) if obj.dtype.kind != "O" else "str"
        data = obj.asstr()[()] if obj.dtype.kind == "O" else obj[()]
        e["data"] = [conv(x) for x in data]
    out["/" + name] = e
with h5py.File(sys.argv[1], "r") as f:
    out["/"] = {"attrs": {k: conv(v) for k, v in f.attrs.items()}}
    f.visititems(visit)
json.dump(out, sys.stdout)
"#;

fn attr_json(v: &AttrValue) -> serde_json::Value {
    match v {
        AttrValue::Str(s) => s.clone().into(),
        AttrValue::U64(x) => (*x).into(),
        AttrValue::I64(x) => (*x).into(),
        AttrValue::F64(x) => f64_repr_json(*x),
    }
}

/// Compare floats through Python's repr: parse it back in Rust (exact for finite values).
fn f64_repr_json(x: f64) -> serde_json::Value {
    serde_json::Value::String(format!("f64:{:x}", x.to_bits()))
}

fn normalise_py(v: &serde_json::Value) -> serde_json::Value {
    match v {
        serde_json::Value::String(s) => match s.parse::<f64>() {
            Ok(x) if s.contains(['.', 'n', 'e']) => f64_repr_json(x),
            _ => v.clone(),
        },
        serde_json::Value::Array(a) => a.iter().map(normalise_py).collect(),
        serde_json::Value::Object(m) => m.iter().map(|(k, v)| (k.clone(), normalise_py(v))).collect(),
        _ => v.clone(),
    }
}

fn expect_attrs(dump: &serde_json::Value, path: &str, attrs: &[(String, AttrValue)]) {
    let got = &dump[path]["attrs"];
    let want: serde_json::Map<_, _> = attrs.iter().map(|(k, v)| (k.clone(), attr_json(v))).collect();
    assert_eq!(got, &serde_json::Value::Object(want), "attributes of {path}");
}

fn expect_group(dump: &serde_json::Value, g: &Group, path: &str) {
    expect_attrs(dump, path, &g.attrs);
    let join = |n: &str| if path == "/" { format!("/{n}") } else { format!("{path}/{n}") };
    for t in &g.tables {
        let tp = join(&t.name);
        expect_attrs(dump, &tp, &t.attrs);
        for c in &t.columns {
            let cp = format!("{tp}/{}", c.name);
            let e = &dump[&cp];
            let (dtype, data): (&str, Vec<serde_json::Value>) = match &c.data {
                ColumnData::U64(v) => ("u8", v.iter().map(|x| (*x).into()).collect()),
                ColumnData::I64(v) => ("i8", v.iter().map(|x| (*x).into()).collect()),
                ColumnData::F64(v) => ("f8", v.iter().map(|x| f64_repr_json(*x)).collect()),
                ColumnData::Str(v) => ("str", v.iter().map(|x| x.clone().into()).collect()),
            };
            assert_eq!(e["dtype"], dtype, "{cp}");
            assert_eq!(e["attrs"]["units"], c.unit.as_str(), "{cp}");
            assert_eq!(e["data"], serde_json::Value::Array(data), "{cp}");
        }
    }
    for sub in &g.groups {
        expect_group(dump, sub, &join(&sub.name));
    }
}

#[test]
fn hdf5_file_reads_back_identically_in_h5py() {
    let d = tempfile::tempdir().unwrap();
    let doc = sample_doc(d.path());
    let p = d.path().join("run.h5");
    write_document(&doc, Some(&p), Format::Hdf5, false).unwrap();
    let out = common::python().arg("-c").arg(H5PY_DUMP).arg(&p).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let dump = normalise_py(&serde_json::from_slice(&out.stdout).unwrap());
    expect_group(&dump, &doc.root, "/");
}

// ---- CSV ----------------------------------------------------------------------------------

/// Sections split on blank lines; '#' lines are comments; data parsed by Python's csv module.
const CSV_PARSE: &str = r##"
import sys, csv, json
groups, tables, cur, section = {}, {}, None, []
def close():
    global section
    if cur is not None and cur[0] == "t" and section:
        tables[cur[1]]["rows"] = list(csv.reader(section))
    section = []
for line in open(sys.argv[1], encoding="utf-8", newline="").read().split("\n"):
    if line.startswith("# group "):
        close(); cur = ("g", line[8:]); groups[cur[1]] = {}
    elif line.startswith("# table "):
        close(); cur = ("t", line[8:]); tables[cur[1]] = {"attrs": {}, "rows": []}
    elif line.startswith("# "):
        k, v = line[2:].split(" = ", 1)
        (groups[cur[1]] if cur[0] == "g" else tables[cur[1]]["attrs"])[k] = v
    elif line == "":
        close()
    else:
        section.append(line + "\n")
close()
json.dump({"groups": groups, "tables": tables}, sys.stdout)
"##;

fn text_attrs(attrs: &[(String, AttrValue)]) -> serde_json::Value {
    attrs.iter().map(|(k, v)| (k.clone(), serde_json::Value::String(v.to_text()))).collect::<serde_json::Map<_, _>>().into()
}

fn cell_equal(data: &ColumnData, i: usize, cell: &str) -> bool {
    match data {
        ColumnData::U64(v) => v.get(i).map_or(cell.is_empty(), |x| cell.parse::<u64>().ok() == Some(*x)),
        ColumnData::I64(v) => v.get(i).map_or(cell.is_empty(), |x| cell.parse::<i64>().ok() == Some(*x)),
        ColumnData::F64(v) => v.get(i).map_or(cell.is_empty(), |x| cell.parse::<f64>().is_ok_and(|y| y.to_bits() == x.to_bits() || (x.is_nan() && y.is_nan()))),
        ColumnData::Str(v) => v.get(i).map_or(cell.is_empty(), |x| x == cell),
    }
}

fn expect_csv(parsed: &serde_json::Value, g: &Group, path: &str) {
    assert_eq!(parsed["groups"][path], text_attrs(&g.attrs), "group {path}");
    let join = |n: &str| if path == "/" { format!("/{n}") } else { format!("{path}/{n}") };
    for t in &g.tables {
        let tp = join(&t.name);
        let pt = &parsed["tables"][&tp];
        assert_eq!(pt["attrs"], text_attrs(&t.attrs), "table {tp}");
        let rows: Vec<Vec<String>> = serde_json::from_value(pt["rows"].clone()).unwrap();
        let header: Vec<String> = t.columns.iter().map(|c| format!("{} [{}]", c.name, c.unit)).collect();
        assert_eq!(rows[0], header, "{tp}");
        assert_eq!(rows.len() - 1, t.rows(), "{tp}");
        for (i, r) in rows[1..].iter().enumerate() {
            for (c, cell) in t.columns.iter().zip(r) {
                assert!(cell_equal(&c.data, i, cell), "{tp}/{} row {i}: {cell:?}", c.name);
            }
        }
    }
    for sub in &g.groups {
        expect_csv(parsed, sub, &join(&sub.name));
    }
}

#[test]
fn csv_sections_parse_back_with_python_csv() {
    let d = tempfile::tempdir().unwrap();
    let doc = sample_doc(d.path());
    let p = d.path().join("run.csv");
    write_document(&doc, Some(&p), Format::Csv, false).unwrap();
    let out = common::python().arg("-c").arg(CSV_PARSE).arg(&p).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let parsed: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    expect_csv(&parsed, &doc.root, "/");
}

// ---- JSON ---------------------------------------------------------------------------------

/// Python's json module parses the file (integers stay exact); floats come back as their
/// original text ("F<text>") so Rust's correctly rounded parser can compare bit for bit.
const JSON_REDUMP: &str = "import json,sys; d=json.load(open(sys.argv[1]), parse_float=lambda s: 'F'+s); json.dump(d, sys.stdout)";

fn float_matches(v: &serde_json::Value, x: f64) -> bool {
    match v {
        serde_json::Value::Null => !x.is_finite(),
        serde_json::Value::String(s) => s.strip_prefix('F').and_then(|t| t.parse::<f64>().ok()).is_some_and(|y| y.to_bits() == x.to_bits()),
        // A float written without a fraction ("2") comes back as an integer.
        serde_json::Value::Number(n) => n.as_f64() == Some(x) && x.fract() == 0.0,
        _ => false,
    }
}

fn expect_json_attrs(v: &serde_json::Value, attrs: &[(String, AttrValue)], at: &str) {
    assert_eq!(v.as_object().unwrap().len(), attrs.len(), "attrs of {at}");
    for (k, a) in attrs {
        match a {
            AttrValue::F64(x) => assert!(float_matches(&v[k], *x), "{at}@{k}: {}", v[k]),
            _ => assert_eq!(v[k], attr_json(a), "{at}@{k}"),
        }
    }
}

fn expect_json(v: &serde_json::Value, g: &Group, at: &str) {
    expect_json_attrs(&v["attrs"], &g.attrs, at);
    assert_eq!(v["tables"].as_object().unwrap().len(), g.tables.len(), "{at}");
    assert_eq!(v["groups"].as_object().unwrap().len(), g.groups.len(), "{at}");
    for t in &g.tables {
        let jt = &v["tables"][&t.name];
        expect_json_attrs(&jt["attrs"], &t.attrs, &t.name);
        assert_eq!(jt["columns"].as_object().unwrap().len(), t.columns.len());
        for c in &t.columns {
            let jc = &jt["columns"][&c.name];
            let at = format!("{at}/{}/{}", t.name, c.name);
            assert_eq!(jc["unit"], c.unit.as_str(), "{at}");
            assert_eq!(jc["dtype"], c.data.dtype_name(), "{at}");
            match &c.data {
                ColumnData::U64(x) => assert_eq!(jc["data"], serde_json::json!(x), "{at}"),
                ColumnData::I64(x) => assert_eq!(jc["data"], serde_json::json!(x), "{at}"),
                ColumnData::Str(x) => assert_eq!(jc["data"], serde_json::json!(x), "{at}"),
                ColumnData::F64(x) => {
                    let got = jc["data"].as_array().unwrap();
                    assert_eq!(got.len(), x.len(), "{at}");
                    assert!(got.iter().zip(x).all(|(g, w)| float_matches(g, *w)), "{at}: {got:?}");
                }
            }
        }
    }
    for sub in &g.groups {
        expect_json(&v["groups"][&sub.name], sub, &sub.name);
    }
}

#[test]
fn json_parses_back_with_python_json_exactly() {
    let d = tempfile::tempdir().unwrap();
    let doc = sample_doc(d.path());
    let p = d.path().join("run.json");
    write_document(&doc, Some(&p), Format::Json, false).unwrap();
    // serde_json accepts it too (structure only: its default float parsing is not exact).
    let _: serde_json::Value = serde_json::from_slice(&std::fs::read(&p).unwrap()).unwrap();
    let out = common::python().arg("-c").arg(JSON_REDUMP).arg(&p).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    expect_json(&v, &doc.root, "/");
    let events = &v["groups"]["blocks"]["groups"]["A0B0"]["tables"]["singles"]["columns"]["events"]["data"][0];
    assert_eq!(events.as_u64(), Some(u64::MAX), "integers beyond 2^53 stay exact");
}
