//! `inspect --json` against the fixtures in fixtures/: files written by
//! tools/make_fixtures.py with NumPy (not by our writers), expected values computed there
//! by NumPy and exact Python integers (the outside reference).

mod common;

use common::{python, root, tagsieve};
use serde_json::Value;
use std::path::Path;

fn run_inspect(expected: &Value) -> (i32, Value) {
    let mut cmd = tagsieve();
    cmd.current_dir(root()).args(["--json", "--quiet", "inspect"]);
    for a in expected["args"].as_array().unwrap() {
        cmd.arg(a.as_str().unwrap());
    }
    if let Some(l) = expected["layout"].as_str() {
        cmd.args(["--layout", l]);
    }
    let out = cmd.output().unwrap();
    let json = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)));
    (out.status.code().unwrap(), json)
}

/// Integers must match exactly; rates (floats) to 1e-12 relative.
fn same(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Number(x), Value::Number(y)) if x.is_f64() || y.is_f64() => {
            let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
            (x - y).abs() <= 1e-12 * x.abs().max(y.abs())
        }
        _ => a == b,
    }
}

fn check_fixture(name: &str) {
    let path = root().join("fixtures").join(format!("{name}.expected.json"));
    let expected: Value = serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
    let (code, got) = run_inspect(&expected);
    assert_eq!(code as i64, expected["exit_code"].as_i64().unwrap(), "{name}: exit code");
    let (want_ch, got_ch) = (expected["channels"].as_array().unwrap(), got["channels"].as_array().unwrap());
    assert_eq!(want_ch.len(), got_ch.len(), "{name}: channel count");
    for (w, g) in want_ch.iter().zip(got_ch) {
        for (k, v) in w.as_object().unwrap() {
            assert!(same(v, &g[k]), "{name}: channel {}: {k}: expected {v}, inspect said {}", w["channel"], g[k]);
        }
    }
    for (k, v) in expected["totals"].as_object().unwrap() {
        assert!(same(v, &got["totals"][k]), "{name}: totals.{k}: expected {v}, inspect said {}", got["totals"][k]);
    }
}

#[test]
fn per_channel_arrays_fixture() {
    check_fixture("arrays");
}

#[test]
fn records_with_fractional_tick_and_32_bit_wrap_fixture() {
    check_fixture("records_wrap32");
}

#[test]
fn big_endian_records_through_compact_spec_fixture() {
    check_fixture("records_be64");
}

/// The three worked examples of docs/formats.md, written by tools/make_fixtures.py from
/// the documented layouts alone.
#[test]
fn packed_64_bit_words_with_a_channel_map_fixture() {
    check_fixture("packed64");
}

#[test]
fn words_with_overflow_records_and_edge_flags_fixture() {
    check_fixture("edge32");
}

#[test]
fn records_with_a_marker_kind_and_small_reorderings_fixture() {
    check_fixture("marker16");
}

#[test]
fn container_written_by_numpy_fixture() {
    check_fixture("link_small");
}

#[test]
fn unsorted_array_is_counted_and_exits_2() {
    check_fixture("unsorted");
}

/// The committed fixtures are exactly what the generator writes (nothing edited by hand).
#[test]
fn fixtures_are_reproducible_from_the_generator() {
    let d = tempfile::tempdir().unwrap();
    let st = python().arg(root().join("tools/make_fixtures.py")).arg(d.path()).status().unwrap();
    assert!(st.success());
    for e in std::fs::read_dir(d.path()).unwrap() {
        let p = e.unwrap().path();
        let name = p.file_name().unwrap();
        let committed = root().join("fixtures").join(name);
        assert!(std::fs::read(&p).unwrap() == std::fs::read(&committed).unwrap(), "{} differs from the generator's output", committed.display());
        assert!(std::fs::metadata(Path::new(&committed)).unwrap().len() <= 100_000, "fixture over 100 kB");
    }
}
