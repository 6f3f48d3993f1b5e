//! The demo's run.h5 as h5py sees it: counted blocks under /blocks, the delay scans under
//! /scans and the window sweep under /sweeps, no dataset without rows; and the window the
//! summary states is the widest of the pairs' recommendations stored in the file.

mod common;
use serde_json::Value;

/// Every group and dataset of the file: {"groups": [...], "datasets": {path: length},
/// "recommended": {pair: window}, "window_ps": /blocks/ab@window_ps}.
const H5PY_WALK: &str = r#"
import sys, json, h5py
out = {"groups": [], "datasets": {}, "recommended": {}}
with h5py.File(sys.argv[1], "r") as f:
    def visit(name, obj):
        if isinstance(obj, h5py.Group):
            out["groups"].append(name)
        else:
            out["datasets"][name] = int(obj.shape[0])
    f.visititems(visit)
    for pair, t in f["sweeps/ab/sweeps"].items():
        out["recommended"][pair] = int(t.attrs["recommended_window_ps"])
    out["window_ps"] = int(f["blocks/ab"].attrs["window_ps"])
print(json.dumps(out))
"#;

#[test]
fn demo_file_keeps_scans_and_sweeps_apart_and_writes_no_empty_table() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("demo");
    let out = common::tagsieve().args(["demo", "--quiet", "-o"]).arg(&dir).output().unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout).to_string();
    assert!(out.status.success(), "{stdout}\n{}", String::from_utf8_lossy(&out.stderr));
    let py = common::python().arg("-c").arg(H5PY_WALK).arg(dir.join("run.h5")).output().unwrap();
    assert!(py.status.success(), "{}", String::from_utf8_lossy(&py.stderr));
    let v: Value = serde_json::from_slice(&py.stdout).unwrap();
    let groups: Vec<&str> = v["groups"].as_array().unwrap().iter().map(|g| g.as_str().unwrap()).collect();
    let children = |parent: &str| -> Vec<&str> {
        let mut c: Vec<&str> = groups
            .iter()
            .filter_map(|g| g.strip_prefix(parent).and_then(|r| r.strip_prefix('/')).filter(|r| !r.contains('/')))
            .collect();
        c.sort_unstable();
        c
    };
    let mut top: Vec<&str> = groups.iter().copied().filter(|g| !g.contains('/')).collect();
    top.sort_unstable();
    assert_eq!(top, ["blocks", "chsh", "provenance", "scans", "sweeps"]);
    // The four CHSH blocks of the scenario, each a counted block; nothing else.
    assert_eq!(children("blocks"), ["ab", "abp", "apb", "apbp"]);
    for b in children("blocks") {
        assert_eq!(children(&format!("blocks/{b}")), ["coincidences", "delays", "off_peak_windows", "singles"], "/blocks/{b}");
    }
    assert_eq!(children("scans"), ["ab_fine", "ab_wide"]);
    for s in children("scans") {
        assert_eq!(children(&format!("scans/{s}")), ["delays", "scans", "singles"], "/scans/{s}");
    }
    assert_eq!(children("sweeps"), ["ab"]);
    assert_eq!(children("sweeps/ab"), ["delays", "off_peak_windows", "singles", "sweeps"]);
    assert_eq!(children("sweeps/ab/sweeps"), ["1-3", "1-4", "2-3", "2-4"]);
    // No empty tables: every dataset has rows.
    let datasets = v["datasets"].as_object().unwrap();
    assert!(datasets.len() > 100, "{}", datasets.len());
    for (path, n) in datasets {
        assert!(n.as_u64().unwrap() > 0, "{path} has no rows");
    }
    // The window used is the widest of the four recommendations, and the summary says so.
    let rec = v["recommended"].as_object().unwrap();
    let widest = rec.values().map(|w| w.as_u64().unwrap()).max().unwrap();
    assert_eq!(v["window_ps"].as_u64().unwrap(), widest);
    assert!(stdout.contains(&format!("window: {widest} ps, the widest of the pairs' sweep recommendations")), "{stdout}");
    for (pair, w) in rec {
        let pair = pair.replace('-', ":");
        assert!(stdout.contains(&format!("{pair} {w} ps")), "recommendation of {pair} ({w} ps) not in summary:\n{stdout}");
    }
}
