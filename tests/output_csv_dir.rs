//! `--format csv-dir`: every table of a run as a plain CSV that pandas opens as it is
//! (`pandas.read_csv(path)`, no options), equal column by column to the HDF5 file of the
//! same run read with h5py, with units and attributes in the sidecar equal to the HDF5
//! `units` and attributes. The runs are chosen so that no two columns of a table hold the
//! same values (a column written under the wrong name cannot pass).

mod common;
use common::tagsieve;
use std::path::Path;

/// Compare a table directory with an HDF5 file of the same run; print "tables N columns M".
const COMPARE: &str = r##"
import sys, json, os
import numpy as np, pandas as pd, h5py

h5_path, dir_path = sys.argv[1], sys.argv[2]
side = json.load(open(os.path.join(dir_path, "attributes.json")))
assert side["format"] == "tagsieve table directory", side["format"]
# Differ between two runs of one command by nature: not compared.
RUN_SPECIFIC = {"command_line", "created_utc"}

def text(v):
    return v.decode() if isinstance(v, bytes) else v

def same_attr(a, b):
    a, b = text(a), text(b)
    if isinstance(a, str) or isinstance(b, str):
        return a == b
    if b is None:  # JSON null: a non-finite float
        return not np.isfinite(a)
    if isinstance(a, (float, np.floating)) and np.isnan(a):
        return False
    return a == b

def check_attrs(h5obj, attrs, where):
    h5keys = set(h5obj.attrs.keys()) - {"units"}
    assert h5keys == set(attrs), f"{where}: attributes {sorted(h5keys)} vs {sorted(attrs)}"
    for k, v in attrs.items():
        if k in RUN_SPECIFIC:
            continue
        assert same_attr(h5obj.attrs[k], v), f"{where}@{k}: {h5obj.attrs[k]!r} vs {v!r}"

n_tables = n_cols = 0
with h5py.File(h5_path, "r") as f:
    h5_tables = set()
    def visit(name, obj):
        if isinstance(obj, h5py.Group) and any(isinstance(x, h5py.Dataset) for x in obj.values()):
            h5_tables.add("/" + name)
    f.visititems(visit)
    assert h5_tables == {t["path"] for t in side["tables"]}, (sorted(h5_tables), [t["path"] for t in side["tables"]])
    for g in side["groups"]:
        check_attrs(f[g["path"]], g["attrs"], g["path"])
    for t in side["tables"]:
        path, file = t["path"], os.path.join(dir_path, t["file"])
        grp = f[path]
        check_attrs(grp, t["attrs"], path)
        lines = open(file, encoding="utf-8").read().splitlines()
        names = [c["name"] for c in t["columns"]]
        assert lines[0] == ",".join(names), f"{file}: header {lines[0]!r}"
        assert not any(l.startswith("#") for l in lines), f"{file}: a comment line"
        assert len(lines) == 1 + t["rows"], f"{file}: {len(lines)} lines for {t['rows']} rows"
        df = pd.read_csv(file)
        assert list(df.columns) == names == sorted(grp.keys(), key=names.index), (file, list(df.columns), list(grp.keys()))
        h5cols = {}
        for c in t["columns"]:
            ds = grp[c["name"]]
            want = ds[()]
            assert text(ds.attrs["units"]) == c["unit"], f"{path}/{c['name']}: units {ds.attrs['units']!r} vs {c['unit']!r}"
            assert len(want) == c["rows"], (path, c["name"])
            got = df[c["name"]]
            n = len(want)
            assert got.iloc[n:].isna().all(), f"{file}: {c['name']} has cells past its {n} rows"
            got = got.iloc[:n]
            if want.dtype.kind in "OSU":
                want = np.array([text(x) for x in want], dtype=object)
                got = got.fillna("").astype(str).to_numpy(dtype=object)
                assert (got == want).all(), f"{file}: {c['name']}: {got} vs {want}"
            elif want.dtype.kind == "f":
                assert np.array_equal(got.to_numpy(dtype=float), want, equal_nan=True), f"{file}: {c['name']}: {got.to_numpy()} vs {want}"
            else:
                assert want.dtype.kind in "iu", want.dtype
                g = got.to_numpy()
                assert g.dtype.kind in "iu" or n < len(df), f"{file}: {c['name']} read as {g.dtype}"
                assert np.array_equal(g.astype(want.dtype), want), f"{file}: {c['name']}: {g} vs {want}"
            h5cols[c["name"]] = want
            n_cols += 1
        # The precondition: no two columns of equal length hold the same values.
        names = list(h5cols)
        for i, a in enumerate(names):
            for b in names[i + 1:]:
                x, y = h5cols[a], h5cols[b]
                if len(x) != len(y) or len(x) == 0:
                    continue
                if x.dtype.kind == "O" or y.dtype.kind == "O":
                    same = x.dtype == y.dtype and (x == y).all()
                else:
                    same = np.array_equal(x.astype(float), y.astype(float), equal_nan=True)
                assert not same, f"{path}: columns {a} and {b} are equal; the run cannot tell them apart"
        n_tables += 1
print(f"tables {n_tables} columns {n_cols}")
"##;

/// Run `args` twice, to an HDF5 file and to a table directory, then compare them.
fn both_forms(dir: &Path, name: &str, args: &[&str]) -> (usize, usize) {
    let h5 = dir.join(format!("{name}.h5"));
    let tables = dir.join(format!("{name}_tables"));
    for (extra, out) in [(vec![], &h5), (vec!["--format", "csv-dir"], &tables)] {
        let o = tagsieve().args(args).arg("--quiet").args(extra).arg("-o").arg(out).output().unwrap();
        assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
    }
    let py = common::python().arg("-c").arg(COMPARE).arg(&h5).arg(&tables).output().unwrap();
    assert!(py.status.success(), "{name}: {}", String::from_utf8_lossy(&py.stderr));
    let s = String::from_utf8_lossy(&py.stdout);
    let n: Vec<usize> = s.split_whitespace().filter_map(|w| w.parse().ok()).collect();
    (n[0], n[1])
}

/// The demo's simulated CHSH run and the delays its scan found. Bob's two labels are
/// swapped between the blocks, so that the primary CHSH convention is not the variant with
/// the largest |S| (otherwise `is_primary` and `is_max` would be the same column).
fn demo_run(dir: &Path) -> (String, String) {
    let demo = dir.join("demo");
    let o = tagsieve().args(["demo", "--quiet", "-o"]).arg(&demo).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let manifest = demo.join("chsh-run/run.toml");
    let text = std::fs::read_to_string(&manifest).unwrap();
    assert!(text.contains("bob = \"b\"\n") && text.contains("bob = \"b'\"\n"), "{text}");
    let swapped = text.replace("bob = \"b'\"\n", "bob = SWAP\n").replace("bob = \"b\"\n", "bob = \"b'\"\n").replace("bob = SWAP\n", "bob = \"b\"\n");
    std::fs::write(&manifest, swapped).unwrap();
    (manifest.display().to_string(), demo.join("delays.toml").display().to_string())
}

#[test]
fn every_table_opens_in_pandas_and_equals_the_hdf5_of_the_same_run() {
    let tmp = tempfile::tempdir().unwrap();
    let (manifest, delays) = demo_run(tmp.path());
    let ab = tmp.path().join("demo/chsh-run/ab.tsieve").display().to_string();
    // A 1 µs window: some Alice events get two partners, so coincidences ≠ heralded.
    let (t, c) = both_forms(tmp.path(), "chsh", &["chsh", &manifest, "--delays", &delays, "-w", "1000000"]);
    // 4 blocks × (singles, delays, coincidences, off_peak_windows), inputs, correlations, s_values.
    assert!(t >= 19 && c >= 100, "chsh: {t} tables, {c} columns");
    // Histograms: counts is one row shorter than bin_edges_ps (its last cell empty).
    let (t, _) = both_forms(tmp.path(), "scan", &["scan", &ab, "--delays", &delays, "--pairs", "1:3,2:4"]);
    assert!(t >= 5, "scan: {t} tables");
    let (t, _) = both_forms(tmp.path(), "sweep", &["sweep", &ab, "--delays", &delays, "--pairs", "1:3,2:4", "--windows-ps", "400,500,1000000"]);
    assert!(t >= 5, "sweep: {t} tables");
}

#[test]
fn a_table_directory_is_never_half_written_and_never_replaces_a_foreign_directory() {
    let tmp = tempfile::tempdir().unwrap();
    let (manifest, delays) = demo_run(tmp.path());
    let out = tmp.path().join("tables");
    let run = |extra: &[&str], out: &Path| {
        tagsieve().args(["chsh", &manifest, "--delays", &delays, "-w", "500", "--quiet", "--format", "csv-dir", "-o"]).arg(out).args(extra).output().unwrap()
    };
    assert!(run(&[], &out).status.success());
    let again = run(&[], &out);
    assert_eq!(again.status.code(), Some(2), "an existing directory without --force");
    assert!(run(&["--force"], &out).status.success(), "our own directory is replaced with --force");
    assert!(out.join("attributes.json").is_file() && out.join("chsh/s_values.csv").is_file());
    // A directory we did not write is kept, even with --force.
    let foreign = tmp.path().join("photos");
    std::fs::create_dir(&foreign).unwrap();
    std::fs::write(foreign.join("keep.txt"), "x").unwrap();
    let o = run(&["--force"], &foreign);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("not a table directory"), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(foreign.join("keep.txt").is_file());
    // Not to stdout; and no temporary is left beside the outputs.
    assert_eq!(run(&[], Path::new("-")).status.code(), Some(2));
    let leftovers: Vec<_> = std::fs::read_dir(tmp.path()).unwrap().map(|e| e.unwrap().file_name()).filter(|n| n.to_string_lossy().starts_with('.')).collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}
