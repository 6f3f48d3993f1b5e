//! The human `count` report says what the JSON says: both accidental estimates with their
//! σ, their agreement, the heralded count and the net count (a consistency check of the two
//! output modes, not of the physics; the numbers themselves are checked in engine_stats.rs
//! and numpy_recount.rs).

mod common;
use common::{doc_at, doc_rows, tagsieve};
use serde_json::Value;

fn count(dir: &std::path::Path, json: bool) -> String {
    count_with(dir, json, &[])
}

fn count_with(dir: &std::path::Path, json: bool, extra: &[&str]) -> String {
    let mut c = tagsieve();
    c.args(["count", "--quiet", "--pairs", "1:3", "--delay", "3=41250", "-w", "1000"]).args(extra);
    if json {
        c.arg("--json");
    }
    let out = c.arg(format!("1={}", dir.join("ab0_ch1.u64").display())).arg(format!("3={}", dir.join("ab0_ch3.u64").display())).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout).unwrap()
}

fn simulated() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let sim = tagsieve()
        .args(["simulate", "--quiet", "--force", "--format", "arrays", "--series", "22.5", "--duration-s", "0.5", "-o"])
        .arg(dir.path())
        .output()
        .unwrap();
    assert!(sim.status.success(), "{}", String::from_utf8_lossy(&sim.stderr));
    dir
}

#[test]
fn without_off_peak_windows_the_counts_stay_and_no_measured_estimate_is_made() {
    // --no-offpeak drops only the off-peak windows: coincidences, heralded count and the
    // analytic estimate equal the default run's; the measured estimate is absent (null).
    let dir = simulated();
    let full: Value = serde_json::from_str(&count(dir.path(), true)).unwrap();
    let bare: Value = serde_json::from_str(&count_with(dir.path(), true, &["--no-offpeak"])).unwrap();
    let (f, b) = (&doc_rows(&full, "/blocks/block/coincidences")[0], &doc_rows(&bare, "/blocks/block/coincidences")[0]);
    for k in ["coincidences", "heralded", "acc_analytic", "acc_analytic_sigma", "net", "net_sigma"] {
        assert_eq!(f[k], b[k], "{k}");
    }
    // The default run counts ten off-peak windows for its one pair; the bare run none, so
    // its Document has no off_peak_windows table (a table with no rows is not written).
    assert!(doc_rows(&full, "/blocks/block/off_peak_windows").len() == 10 && doc_at(&bare, "/blocks/block/off_peak_windows").is_null());
    assert!(b["acc_measured"].is_null() && b["acc_measured_sigma"].is_null(), "{b}");
    let text = count_with(dir.path(), false, &["--no-offpeak"]);
    assert!(text.contains("measured: none (no off-peak windows counted)"), "{text}");
    let both = tagsieve().args(["count", "--no-offpeak", "--acc-offsets-ps", "2000000", "1=x"]).output().unwrap();
    assert_eq!(both.status.code(), Some(2), "--no-offpeak with --acc-offsets-ps must be refused");
}

#[test]
fn human_report_carries_both_accidental_estimates() {
    let dir = simulated();
    let v: Value = serde_json::from_str(&count(dir.path(), true)).unwrap();
    let r = &doc_rows(&v, "/blocks/block/coincidences")[0];
    let text = count(dir.path(), false);
    let f = |k: &str, s: &str| r[format!("{k}{s}").as_str()].as_f64().unwrap();
    let grouped = |v: &serde_json::Value| tagsieve::units::fmt_count(v.as_u64().expect("a count"));
    assert!(text.contains(&format!("coincidences  {}  (heralded A events {})", grouped(&r["coincidences"]), grouped(&r["heralded"]))), "{text}");
    assert!(text.contains(&format!("({} off-peak windows)", doc_rows(&v, "/blocks/block/off_peak_windows").len())), "{text}");
    assert!(text.contains(&format!("differ by {:.1} σ", r["acc_agreement_sigma"].as_f64().unwrap().abs())), "{text}");
    for (label, key) in [("analytic ", "acc_analytic"), ("measured ", "acc_measured"), ("net           ", "net")] {
        let (value, sigma) = estimate_after(&text, label);
        for (got, want) in [(value, f(key, "")), (sigma, f(key, "_sigma"))] {
            // Printed with at least four significant digits (one decimal from 1000 up).
            assert!((got - want).abs() <= 1e-3 * want.abs().max(1.0), "{label}: printed {got}, JSON {want}\n{text}");
        }
    }
}

/// The `value ± sigma` printed right after `label`.
fn estimate_after(text: &str, label: &str) -> (f64, f64) {
    let rest = &text[text.find(label).unwrap_or_else(|| panic!("no {label:?} in\n{text}")) + label.len()..];
    let mut words = rest.split_whitespace();
    let value = words.next().unwrap().parse().unwrap();
    assert_eq!(words.next(), Some("±"), "{rest}");
    (value, words.next().unwrap().parse().unwrap())
}
