//! The off-peak windows sit where README and `--help` say: ±(max(2 µs, 2W) + k·W),
//! k = 0…4, W = 2⌊w/2⌋+1 ps, for a window below 1 µs (nearest at 2 µs) and above 1 µs
//! (nearest at 2W); `count` and every `sweep` row use their own window's offsets.
//! The expected offsets are worked out by hand from the documented formula below.

mod common;
use common::tagsieve;
use serde_json::Value;
use std::path::Path;

/// The formula as README.md and `--help` state it.
const FORMULA: &str = "±(max(2 µs, 2W) + k·W)";

/// w = 500 ps: W = 2·250 + 1 = 501; max(2 000 000, 1 002) = 2 000 000;
/// centres 2 000 000 + k·501, k = 0…4, on both sides.
const OFFSETS_W500: [i64; 10] =
    [-2_002_004, -2_001_503, -2_001_002, -2_000_501, -2_000_000, 2_000_000, 2_000_501, 2_001_002, 2_001_503, 2_002_004];

/// w = 3 µs: W = 3 000 001; max(2 000 000, 6 000 002) = 6 000 002;
/// centres 6 000 002 + k·3 000 001, k = 0…4, on both sides.
const OFFSETS_W3US: [i64; 10] = [
    -18_000_006, -15_000_005, -12_000_004, -9_000_003, -6_000_002, 6_000_002, 9_000_003, 12_000_004, 15_000_005, 18_000_006,
];

fn squash(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

#[test]
fn readme_and_every_help_state_the_same_formula() {
    let readme = std::fs::read_to_string(common::root().join("README.md")).unwrap();
    assert!(squash(&readme).contains(FORMULA), "README.md does not state {FORMULA}");
    for cmd in ["count", "sweep", "chsh"] {
        let out = tagsieve().args([cmd, "--help"]).output().unwrap();
        let help = String::from_utf8_lossy(&out.stdout);
        assert!(squash(&help).contains(FORMULA), "`tagsieve {cmd} --help` does not state {FORMULA}:\n{help}");
        assert!(!squash(&help).contains("±(2 µs + k·W)"), "`tagsieve {cmd} --help` still states the old formula");
    }
}

/// Two channels of evenly spaced tags as little-endian u64 arrays (docs/formats.md).
fn arrays(dir: &Path) -> [String; 2] {
    let write = |name: &str, step: u64, first: u64| {
        let bytes: Vec<u8> = (0..20_000u64).flat_map(|i| (first + i * step).to_le_bytes()).collect();
        let p = dir.join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    };
    let a = write("a.u64", 1_000_003, 0);
    let b = write("b.u64", 999_983, 123);
    [format!("1={}", a.display()), format!("2={}", b.display())]
}

/// The off-peak offsets of the block's row (a, b, window) of `doc`, sorted.
fn offsets(doc: &Value, row: &Value) -> Vec<i64> {
    let mut o: Vec<i64> = off_peak(doc, row).iter().map(|r| r["offset_ps"].as_i64().unwrap()).collect();
    o.sort_unstable();
    o
}

/// The off_peak_windows rows of one coincidence or sweep row (same a, b, window_ps).
fn off_peak(doc: &Value, row: &Value) -> Vec<Value> {
    let same = |r: &Value| ["a", "b", "window_ps"].iter().all(|k| r[*k] == row[*k]);
    common::doc_rows(doc, "/blocks/block/off_peak_windows").into_iter().filter(same).collect()
}

fn run_json(args: &[&str], inputs: &[String]) -> Value {
    let out = tagsieve().args(args).args(["--quiet", "--json"]).args(inputs).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).unwrap()
}

#[test]
fn count_places_the_windows_by_the_formula_below_and_above_one_microsecond() {
    let dir = tempfile::tempdir().unwrap();
    let inputs = arrays(dir.path());
    for (w, want) in [("500", OFFSETS_W500), ("3000000", OFFSETS_W3US)] {
        let v = run_json(&["count", "-w", w], &inputs);
        assert_eq!(offsets(&v, &common::doc_rows(&v, "/blocks/block/coincidences")[0]), want, "count -w {w}");
    }
}

#[test]
fn each_sweep_row_uses_its_own_window_and_equals_count_there() {
    let dir = tempfile::tempdir().unwrap();
    let inputs = arrays(dir.path());
    let v = run_json(&["sweep", "--windows-ps", "500,3000000"], &inputs);
    let rows = common::doc_rows(&v, "/blocks/block/sweeps/1-2");
    assert_eq!(rows.len(), 2);
    assert_eq!(rows[0]["window_ps"], 500);
    assert_eq!(offsets(&v, &rows[0]), OFFSETS_W500, "sweep row at 500 ps");
    assert_eq!(rows[1]["window_ps"], 3_000_000);
    assert_eq!(offsets(&v, &rows[1]), OFFSETS_W3US, "sweep row at 3 µs");
    // A row is the count at its window, off-peak windows included.
    for (row, w) in rows.iter().zip(["500", "3000000"]) {
        let c = run_json(&["count", "-w", w], &inputs);
        let counted = &common::doc_rows(&c, "/blocks/block/coincidences")[0];
        assert_eq!(row, counted, "sweep row vs count -w {w}");
        assert_eq!(off_peak(&v, row), off_peak(&c, counted), "off-peak windows of the sweep row vs count -w {w}");
    }
    // Offsets given by hand stay the same on every row.
    let v = run_json(&["sweep", "--windows-ps", "500,900", "--acc-offsets-ps=-5000000,5000000"], &inputs);
    for row in common::doc_rows(&v, "/blocks/block/sweeps/1-2") {
        assert_eq!(offsets(&v, &row), [-5_000_000, 5_000_000]);
    }
}
