//! Determinism: the same inputs give the same tables, bit for bit, whatever the thread
//! count (1, 2, 16), on a repeated run, and on the streaming and the whole-file pass, for
//! `count`, `sweep`, `scan` and `chsh`. Output files are compared by walking every group,
//! dataset and attribute with the HDF5 library (values, types and shapes); only the
//! provenance of the invocation itself (`command_line`, `created_utc`) may differ.

mod common;

use common::tagsieve;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Stdio;
use std::sync::OnceLock;
use tagsieve::jobs::pass::STREAM_CHUNK_EVENTS;

/// Layout of simulated record files (docs: `simulate --format records`).
const LAYOUT: &str = "rec=16,time=0:8:le,chan=8:4:le,tick_ps=1";
const DELAYS: [&str; 6] = ["--delay", "2=850", "--delay", "3=41250", "--delay", "4=40600"];
/// Root attributes that describe the invocation, not the result.
const INVOCATION_ATTRS: [&str; 2] = ["command_line", "created_utc"];

struct Inputs {
    dir: tempfile::TempDir,
    /// One simulated block as interleaved records, more events than one streaming chunk.
    records: PathBuf,
    /// The same events imported into a container.
    container: PathBuf,
    /// A four-block CHSH run (containers) and its manifest.
    manifest: PathBuf,
}

fn run_ok(args: &[&str]) {
    let o = tagsieve().args(args).stdout(Stdio::null()).output().unwrap();
    assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
}

fn inputs() -> &'static Inputs {
    static INPUTS: OnceLock<Inputs> = OnceLock::new();
    INPUTS.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let d = |n: &str| dir.path().join(n).to_str().unwrap().to_string();
        run_ok(&["-q", "simulate", "--format", "records", "--series", "0", "--pair-rate-hz", "5e6", "--duration-s", "2.5", "--seed", "11", "-o", &d("rec")]);
        let records = dir.path().join("rec/ab0.records");
        let events = std::fs::metadata(&records).unwrap().len() / 16;
        assert!(events > STREAM_CHUNK_EVENTS as u64, "{events} records: the stream pass must see several chunks");
        run_ok(&["-q", "import", records.to_str().unwrap(), "--layout", LAYOUT, "-o", &d("ab0.tsieve")]);
        run_ok(&["-q", "simulate", "--seed", "5", "-o", &d("chsh")]);
        Inputs { records, container: dir.path().join("ab0.tsieve"), manifest: dir.path().join("chsh/run.toml"), dir }
    })
}

/// Every group, dataset and attribute of an HDF5 file as path → "type shape values";
/// floats by their bit patterns, so NaN = NaN and −0 ≠ +0.
fn walk(path: &Path) -> BTreeMap<String, String> {
    let f = hdf5::File::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mut out = BTreeMap::new();
    visit(&f, "", &mut out);
    out
}

fn visit(g: &hdf5::Group, at: &str, out: &mut BTreeMap<String, String>) {
    attrs(g, at, out);
    for name in g.member_names().unwrap() {
        let p = format!("{at}/{name}");
        match g.loc_type_by_name(&name).unwrap() {
            hdf5::LocationType::Group => visit(&g.group(&name).unwrap(), &p, out),
            hdf5::LocationType::Dataset => {
                let ds = g.dataset(&name).unwrap();
                out.insert(p.clone(), format!("{:?} {}", ds.shape(), values(&ds)));
                attrs(&ds, &p, out);
            }
            other => panic!("{p}: unexpected HDF5 object {other:?}"),
        }
    }
}

fn attrs(loc: &hdf5::Location, at: &str, out: &mut BTreeMap<String, String>) {
    for name in loc.attr_names().unwrap() {
        if at.is_empty() && INVOCATION_ATTRS.contains(&name.as_str()) {
            continue;
        }
        out.insert(format!("{at}@{name}"), values(&loc.attr(&name).unwrap()));
    }
}

fn values(c: &hdf5::Container) -> String {
    use hdf5::types::{TypeDescriptor as T, VarLenUnicode};
    let desc = c.dtype().unwrap().to_descriptor().unwrap();
    let v = match &desc {
        T::Unsigned(_) => format!("{:?}", c.read_raw::<u64>().unwrap()),
        T::Integer(_) => format!("{:?}", c.read_raw::<i64>().unwrap()),
        T::Float(_) => format!("{:x?}", c.read_raw::<f64>().unwrap().iter().map(|x| x.to_bits()).collect::<Vec<_>>()),
        T::VarLenUnicode => format!("{:?}", c.read_raw::<VarLenUnicode>().unwrap().iter().map(|s| s.as_str().to_string()).collect::<Vec<_>>()),
        other => panic!("unexpected HDF5 type {other:?}"),
    };
    format!("{desc:?} {v}")
}

/// Entries under `prefix` (all of them for "").
fn under(m: &BTreeMap<String, String>, prefix: &str) -> BTreeMap<String, String> {
    m.iter().filter(|(k, _)| k.starts_with(prefix)).map(|(k, v)| (k.clone(), v.clone())).collect()
}

fn assert_same(what: &str, a: &BTreeMap<String, String>, b: &BTreeMap<String, String>) {
    let keys = |m: &BTreeMap<String, String>| m.keys().cloned().collect::<Vec<_>>();
    assert_eq!(keys(a), keys(b), "{what}: different objects");
    if let Some((k, v)) = a.iter().find(|(k, v)| b[*k] != **v) {
        let cut = |s: &str| s.chars().take(300).collect::<String>();
        panic!("{what}: {k} differs:\n  {}\n  {}", cut(v), cut(&b[k]));
    }
}

/// Run `cmd` with `args` once per variant (extra global flags), each into its own file.
fn outputs(tag: &str, cmd: &str, args: &[&str], variants: &[&[&str]]) -> Vec<(String, BTreeMap<String, String>)> {
    variants
        .iter()
        .enumerate()
        .map(|(k, extra)| {
            let out = inputs().dir.path().join(format!("{tag}-{k}.h5"));
            let mut a = vec!["--quiet", cmd];
            a.extend_from_slice(args);
            a.extend_from_slice(extra);
            a.extend(["-o", out.to_str().unwrap()]);
            run_ok(&a);
            (format!("{cmd} {args:?} {extra:?}"), walk(&out))
        })
        .collect()
}

fn all_same(runs: &[(String, BTreeMap<String, String>)], prefix: &str) {
    let (first, base) = &runs[0];
    for (what, m) in &runs[1..] {
        assert_same(&format!("{what} vs {first}"), &under(base, prefix), &under(m, prefix));
    }
}

/// Threads 1, 2, 16, 16 again (the records file streams by default), then whole-file.
const RECORD_VARIANTS: [&[&str]; 5] =
    [&["--threads", "1"], &["--threads", "2"], &["--threads", "16"], &["--threads", "16"], &["--threads", "2", "--pass", "whole"]];
const CONTAINER_VARIANTS: [&[&str]; 2] = [&["--threads", "16", "--pass", "stream"], &["--threads", "1", "--pass", "whole"]];

/// One command over both files: all record runs identical, both container runs identical,
/// and the result tables (`/blocks`) the same from records and container (the provenance
/// names different input files). `table` must hold a non-zero count, so the check is not
/// vacuous.
fn check_block_command(tag: &str, cmd: &str, extra: &[&str], table: &str) {
    let i = inputs();
    let mut args = vec![i.records.to_str().unwrap(), "--layout", LAYOUT];
    args.extend_from_slice(extra);
    let rec = outputs(&format!("{tag}-rec"), cmd, &args, &RECORD_VARIANTS);
    all_same(&rec, "");
    let mut args = vec![i.container.to_str().unwrap()];
    args.extend_from_slice(extra);
    let con = outputs(&format!("{tag}-con"), cmd, &args, &CONTAINER_VARIANTS);
    all_same(&con, "");
    assert_same(&format!("{cmd}: records vs container"), &under(&rec[0].1, "/blocks"), &under(&con[0].1, "/blocks"));
    let v = &rec[0].1[table];
    let list = &v[v.rfind('[').unwrap() + 1..v.rfind(']').unwrap()];
    assert!(list.split(", ").any(|n| n.parse::<u64>().unwrap() > 0), "{table} holds no counts: {v}");
}

#[test]
fn count_is_deterministic() {
    let mut extra = vec!["-w", "500"];
    extra.extend(DELAYS);
    check_block_command("count", "count", &extra, "/blocks/block/coincidences/coincidences");
}

#[test]
fn sweep_is_deterministic() {
    let mut extra = vec!["--pairs", "1:3,2:4"];
    extra.extend(DELAYS);
    check_block_command("sweep", "sweep", &extra, "/blocks/block/sweeps/1-3/coincidences");
}

#[test]
fn scan_is_deterministic() {
    check_block_command("scan", "scan", &["--pairs", "1:3,1:4"], "/blocks/block/scans/1-3/counts");
}

#[test]
fn chsh_is_deterministic() {
    let m = inputs().manifest.to_str().unwrap().to_string();
    let variants: [&[&str]; 6] = [
        &["--threads", "1"],
        &["--threads", "2"],
        &["--threads", "16"],
        &["--threads", "16"],
        &["--pass", "stream"],
        &["--pass", "whole", "--threads", "2"],
    ];
    let runs = outputs("chsh", "chsh", &[&m, "-w", "500"], &variants);
    all_same(&runs, "");
    assert!(runs[0].1.keys().any(|k| k.starts_with("/chsh")), "a CHSH group: {:?}", runs[0].1.keys().take(40).collect::<Vec<_>>());
}

/// The comparison can fail: one ps more of window changes the tables, and the walk sees it.
#[test]
fn the_walk_sees_a_different_window() {
    let c = inputs().container.to_str().unwrap().to_string();
    let mut args = vec![c.as_str()];
    args.extend(DELAYS);
    let narrow = outputs("walk-narrow", "count", &args, &[&["-w", "500"]]);
    let wide = outputs("walk-wide", "count", &args, &[&["-w", "502"]]);
    let (a, b) = (&narrow[0].1, &wide[0].1);
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    let differ: Vec<&String> = a.keys().filter(|k| a[*k] != b[*k]).collect();
    assert!(differ.iter().any(|k| k.ends_with("coincidences/window_ps")), "{differ:?}");
    assert!(differ.iter().any(|k| k.ends_with("coincidences/coincidences")), "{differ:?}");
}
