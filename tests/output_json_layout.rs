//! `--json` on stdout is the Document of the table output: for `count`, `scan`, `sweep` and
//! `chsh`, every group, attribute and column of the printed JSON is one that
//! docs/hdf5-layout.md lists (same path, dtype and unit), the commands together print every
//! listed entry but the demo's own groups, and the printed JSON equals the `--format json`
//! file but for the creation time and the command line. Parameters given as lists, maps,
//! choices and durations read back from the HDF5 file with h5py + json.loads as typed.

mod common;

use common::{doc_at, tagsieve};
use serde_json::Value;
use std::collections::BTreeSet;
use std::path::Path;
use tagsieve::output::layout::{layout_entries, sample_document, EntryKind};

fn run(dir: &Path, args: &[&str]) -> Vec<u8> {
    let out = tagsieve().current_dir(dir).args(args).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    out.stdout
}

fn json(dir: &Path, args: &[&str]) -> Value {
    let mut a = vec!["--json", "-q"];
    a.extend_from_slice(args);
    serde_json::from_slice(&run(dir, &a)).unwrap()
}

/// A simulated CHSH run whose angles 0, 30 | 30, 60 also allow the three-setting form, and
/// a visibility series; container files.
fn simulated() -> tempfile::TempDir {
    let d = tempfile::tempdir().unwrap();
    run(d.path(), &["-q", "simulate", "-o", "run", "--duration-s", "0.2", "--angles", "0,30,30,60", "--seed", "3"]);
    run(d.path(), &["-q", "simulate", "-o", "series", "--duration-s", "0.1", "--series", "0,45,90,135", "--seed", "4"]);
    d
}

/// One walked entry: kind, path with the layout's placeholders, dtype, unit.
type Entry = (EntryKind, String, String, String);

/// `/blocks/ab/scans/1-3@a` → `/blocks/{label}/scans/{a}-{b}@a`, and likewise for
/// `points_{basis}` and `param.{key}`.
fn placeholder(path: &str) -> String {
    let (p, attr) = match path.split_once('@') {
        Some((p, a)) => (p, Some(a)),
        None => (path, None),
    };
    let mut seg: Vec<String> = p.split('/').filter(|s| !s.is_empty()).map(String::from).collect();
    for i in 0..seg.len() {
        if i == 1 && seg[0] == "blocks" {
            seg[i] = "{label}".into();
        }
        if i == 3 && seg[0] == "blocks" && (seg[2] == "scans" || seg[2] == "sweeps") {
            seg[i] = "{a}-{b}".into();
        }
        if i == 1 && seg[0] == "visibility" && seg[1].starts_with("points_") {
            seg[i] = "points_{basis}".into();
        }
    }
    let mut out = format!("/{}", seg.join("/"));
    if let Some(a) = attr {
        out.push('@');
        out.push_str(if a.starts_with("param.") { "param.{key}" } else { a });
    }
    out
}

/// JSON value → the documented dtype it can stand for (an integer ≥ 0 may be either).
fn attr_fits(v: &Value, dtype: &str) -> bool {
    match dtype {
        "string" => v.is_string(),
        "u64" => v.is_u64(),
        "i64" => v.is_i64(),
        "f64" => v.is_f64() || v.is_null(), // NaN is written as null
        _ => false,
    }
}

fn child(path: &str, name: &str) -> String {
    if path == "/" { format!("/{name}") } else { format!("{path}/{name}") }
}

/// Walk a Document's JSON with serde_json only, checking the shape of every level.
fn walk(g: &Value, path: &str, out: &mut Vec<(Entry, Value)>) {
    let keys: Vec<&String> = g.as_object().unwrap_or_else(|| panic!("{path}: not an object")).keys().collect();
    assert_eq!(keys.len(), 3, "{path}: a group is {{attrs, tables, groups}}, found {keys:?}");
    out.push(((EntryKind::Group, path.into(), String::new(), String::new()), Value::Null));
    for (k, v) in g["attrs"].as_object().unwrap() {
        out.push(((EntryKind::Attribute, format!("{path}@{k}"), String::new(), String::new()), v.clone()));
    }
    for (name, t) in g["tables"].as_object().unwrap() {
        let tpath = child(path, name);
        assert_eq!(t.as_object().unwrap().len(), 2, "{tpath}: a table is {{attrs, columns}}");
        out.push(((EntryKind::Group, tpath.clone(), String::new(), String::new()), Value::Null));
        for (k, v) in t["attrs"].as_object().unwrap() {
            out.push(((EntryKind::Attribute, format!("{tpath}@{k}"), String::new(), String::new()), v.clone()));
        }
        for (c, col) in t["columns"].as_object().unwrap() {
            let dtype = col["dtype"].as_str().unwrap().to_string();
            let data = col["data"].as_array().unwrap_or_else(|| panic!("{tpath}/{c}: data is not an array"));
            assert!(data.iter().all(|x| attr_fits(x, &dtype)), "{tpath}/{c}: data not all {dtype}");
            out.push(((EntryKind::Dataset, child(&tpath, c), dtype, col["unit"].as_str().unwrap().to_string()), Value::Null));
        }
    }
    for (name, sub) in g["groups"].as_object().unwrap() {
        walk(sub, &child(path, name), out);
    }
}

#[test]
fn every_command_prints_the_documented_document() {
    let d = simulated();
    let dir = d.path();
    let docs: Vec<(&str, Value)> = vec![
        ("count", json(dir, &["count", "run/ab.tsieve", "-w", "1000", "--pairs", "1:3", "--delay", "3=41250"])),
        ("scan", json(dir, &["scan", "run/ab.tsieve", "--reference", "1", "--delays-out", "d1.toml"])),
        ("scan ±30 ns", json(dir, &["scan", "run/ab.tsieve", "--reference", "1", "--half-range-ps", "30000", "--delays-out", "d2.toml"])),
        ("sweep", json(dir, &["sweep", "run/ab.tsieve", "--windows-ps", "500,1000", "--pairs", "1:3", "--delay", "3=41250"])),
        ("chsh", json(dir, &["chsh", "run/run.toml", "-w", "1000"])),
        ("chsh series", json(dir, &["chsh", "series/run.toml", "-w", "1000"])),
    ];
    let documented: Vec<(EntryKind, String, String, String)> =
        layout_entries(&sample_document()).into_iter().map(|e| (e.kind, e.path, e.dtype, e.unit)).collect();
    let mut seen = BTreeSet::new();
    for (what, doc) in &docs {
        let mut found = Vec::new();
        walk(doc, "/", &mut found);
        for ((kind, path, dtype, unit), value) in found {
            let p = placeholder(&path);
            let doc_entry = documented
                .iter()
                .find(|e| e.0 == kind && e.1 == p)
                .unwrap_or_else(|| panic!("{what}: {path} ({p}) is not in docs/hdf5-layout.md"));
            match kind {
                EntryKind::Dataset => assert_eq!((&dtype, &unit), (&doc_entry.2, &doc_entry.3), "{what}: {path}"),
                EntryKind::Attribute if !p.ends_with("@param.{key}") => {
                    assert!(attr_fits(&value, &doc_entry.2), "{what}: {path} = {value}, documented {}", doc_entry.2)
                }
                _ => {}
            }
            seen.insert((kind, p));
        }
    }
    // The demo's /scans and /sweeps groups are its own; everything else is printed by some command.
    let missing: Vec<&String> = documented
        .iter()
        .filter(|e| !seen.contains(&(e.0, e.1.clone())))
        .map(|e| &e.1)
        .filter(|p| !(p.starts_with("/scans") || p.starts_with("/sweeps")))
        .collect();
    assert!(missing.is_empty(), "documented but printed by no command: {missing:?}");
}

/// The root attributes that differ between two runs of one command.
fn without_run_stamp(mut v: Value) -> Value {
    let attrs = v["attrs"].as_object_mut().unwrap();
    for k in ["created_utc", "command_line"] {
        assert!(attrs.remove(k).is_some(), "{k}");
    }
    v
}

#[test]
fn json_on_stdout_equals_the_json_file() {
    let d = simulated();
    let dir = d.path();
    for args in [
        vec!["count", "run/ab.tsieve", "-w", "1000", "--delay", "3=41250", "--delay", "4=41250"],
        vec!["chsh", "run/run.toml", "-w", "1000"],
    ] {
        let printed = json(dir, &args);
        let mut a = vec!["-q"];
        a.extend_from_slice(&args);
        a.extend(["--format", "json", "-o", "t.json", "--force"]);
        run(dir, &a);
        let file: Value = serde_json::from_slice(&std::fs::read(dir.join("t.json")).unwrap()).unwrap();
        assert_eq!(without_run_stamp(printed), without_run_stamp(file), "{args:?}");
    }
}

#[test]
fn parameters_read_back_with_h5py_and_json_loads() {
    let d = simulated();
    let dir = d.path();
    run(dir, &["-q", "count", "run/ab.tsieve", "-w", "1000", "--pairs", "1:3", "--delay", "3=41250", "--slice-s", "0.25", "-o", "c.h5"]);
    run(dir, &["-q", "sweep", "run/ab.tsieve", "--windows-ps", "500,1000", "--pairs", "1:3", "--delay", "3=41250", "--criterion", "net-significance", "-o", "s.h5"]);
    run(dir, &["-q", "chsh", "run/run.toml", "-w", "1000", "--bell3-convention", "anti-correlated", "-o", "h.h5"]);
    let script = "import sys, json, h5py\n\
                  c, s, h = (h5py.File(p, 'r') for p in sys.argv[1:4])\n\
                  def text(v): return v.decode() if isinstance(v, bytes) else v\n\
                  out = {'delays': json.loads(text(c.attrs['param.delays_ps'])),\n\
                         'offsets': json.loads(text(c.attrs['param.acc_offsets_ps'])),\n\
                         'slice_s': float(c.attrs['param.slice_s']),\n\
                         'windows': json.loads(text(s.attrs['param.windows_ps'])),\n\
                         'criterion': text(s.attrs['param.criterion']),\n\
                         'chsh_delays': json.loads(text(h.attrs['param.delays_ps'])),\n\
                         'convention': text(h.attrs['param.bell3_convention']),\n\
                         'bell3': text(h['bell3'].attrs['convention']),\n\
                         'angles': json.loads(text(h['bell3'].attrs['angles_deg']))}\n\
                  print(json.dumps(out))";
    let out = common::python().current_dir(dir).arg("-c").arg(script).args(["c.h5", "s.h5", "h.h5"]).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["delays"], serde_json::json!({"3": 41250}), "{v}");
    // The default off-peak windows (README): ±(max(2 µs, 2W) + k·W), k = 0…4, W = 2⌊w/2⌋ + 1.
    let w: i64 = 2 * (1000 / 2) + 1;
    let mut want: Vec<i64> = (0..5).flat_map(|k| [-(2_000_000 + k * w), 2_000_000 + k * w]).collect();
    let mut got: Vec<i64> = v["offsets"].as_array().unwrap().iter().map(|x| x.as_i64().unwrap()).collect();
    want.sort_unstable();
    got.sort_unstable();
    assert_eq!(got, want);
    assert_eq!(v["slice_s"], 0.25, "the slice length in the unit given");
    assert_eq!(v["windows"], serde_json::json!([500, 1000]));
    assert_eq!(v["criterion"], "net-significance", "the choice as typed");
    assert_eq!(v["convention"], "anti-correlated");
    assert_eq!(v["bell3"], "anti-correlated");
    assert_eq!(v["angles"], serde_json::json!([0.0, 30.0, 60.0]));
    // The manifest's delays reach the chsh parameters as a map of channel → ps.
    assert!(v["chsh_delays"].as_object().is_some_and(|m| !m.is_empty() && m.values().all(Value::is_i64)), "{v}");
    // And no parameter anywhere is Rust debug text of a map ("{1: 0}").
    let printed = json(dir, &["count", "run/ab.tsieve", "-w", "1000", "--pairs", "1:3", "--delay", "3=41250"]);
    for (k, p) in doc_at(&printed, "/")["attrs"].as_object().unwrap() {
        if let Some(s) = p.as_str().filter(|_| k.starts_with("param.")) {
            assert!(!(s.starts_with('{') && serde_json::from_str::<Value>(s).is_err()), "{k} = {s}");
        }
    }
}

/// Every `x_sigma` key of a JSON summary (but a significance) has its `x` beside it, and
/// no value is a bare `[value, sigma]` pair.
fn check_conventions(v: &Value, what: &str) {
    match v {
        Value::Object(m) => {
            for (k, x) in m {
                // A significance in units of σ (`violation_raw_sigma`, as in /chsh) has no `x`.
                if let Some(base) = k.strip_suffix("_sigma").filter(|_| !k.contains("violation")) {
                    assert!(m.contains_key(base), "{what}: {k} without {base}");
                }
                check_conventions(x, what);
            }
        }
        Value::Array(a) => {
            assert!(!(a.len() == 2 && a.iter().all(Value::is_f64)), "{what}: a bare pair {v}");
            a.iter().for_each(|x| check_conventions(x, what));
        }
        _ => {}
    }
}

#[test]
fn summaries_without_tables_follow_the_same_conventions() {
    let d = tempfile::tempdir().unwrap();
    let dir = d.path();
    // import: the events written, as many as the inputs hold (8 bytes per u64 tag).
    let fx = common::root().join("fixtures");
    let inputs = [format!("1={}", fx.join("larch_plus.u64").display()), format!("3={}", fx.join("rowan_plus.u64").display())];
    let v = json(dir, &["import", &inputs[0], &inputs[1], "-o", "x.tsieve"]);
    let bytes: u64 = ["larch_plus.u64", "rowan_plus.u64"].iter().map(|f| std::fs::metadata(fx.join(f)).unwrap().len()).sum();
    assert_eq!(v["events"].as_u64(), Some(bytes / 8), "{v}");
    check_conventions(&v, "import");
    // demo: S as `s_raw` beside `s_raw_sigma`, equal to what h5py reads from its run.h5.
    let v = json(dir, &["demo", "-o", "demo", "--duration-s", "0.2"]);
    check_conventions(&v, "demo");
    let script = "import sys, h5py\nf = h5py.File(sys.argv[1], 'r')\nprint(repr(float(f['chsh'].attrs['s_raw'])), repr(float(f['chsh'].attrs['s_raw_sigma'])))";
    let out = common::python().arg("-c").arg(script).arg(dir.join("demo/run.h5")).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    let h5: Vec<f64> = text.split_whitespace().map(|x| x.parse().unwrap()).collect();
    assert_eq!((v["s_raw"].as_f64().unwrap(), v["s_raw_sigma"].as_f64().unwrap()), (h5[0], h5[1]), "{v}");
}
