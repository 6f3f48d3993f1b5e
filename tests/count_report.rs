//! The human `count` report says what the JSON says: both accidental estimates with their
//! σ, their agreement, the heralded count and the net count (a consistency check of the two
//! output modes, not of the physics; the numbers themselves are checked in engine_stats.rs
//! and numpy_recount.rs).

mod common;
use common::tagsieve;
use serde_json::Value;

fn count(dir: &std::path::Path, json: bool) -> String {
    let mut c = tagsieve();
    c.args(["count", "--quiet", "--pairs", "1:3", "--delay", "3=41250", "-w", "1000"]);
    if json {
        c.arg("--json");
    }
    let out = c.arg(format!("1={}", dir.join("ab0_ch1.u64").display())).arg(format!("3={}", dir.join("ab0_ch3.u64").display())).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout).unwrap()
}

#[test]
fn human_report_carries_both_accidental_estimates() {
    let dir = tempfile::tempdir().unwrap();
    let sim = tagsieve()
        .args(["simulate", "--quiet", "--force", "--format", "arrays", "--series", "22.5", "--duration-s", "0.5", "--out"])
        .arg(dir.path())
        .output()
        .unwrap();
    assert!(sim.status.success(), "{}", String::from_utf8_lossy(&sim.stderr));
    let v: Value = serde_json::from_str(&count(dir.path(), true)).unwrap();
    let r = &v["blocks"][0]["coincidences"][0];
    let text = count(dir.path(), false);
    let f = |k: &str, s: &str| r[k][s].as_f64().unwrap();
    assert!(text.contains(&format!("coincidences  {}  (heralded A events {})", r["coincidences"], r["heralded"])), "{text}");
    assert!(text.contains(&format!("({} off-peak windows)", r["acc_offsets_ps"].as_array().unwrap().len())), "{text}");
    assert!(text.contains(&format!("differ by {:.1} σ", r["acc_agreement_sigma"].as_f64().unwrap().abs())), "{text}");
    for (label, key) in [("analytic ", "acc_analytic"), ("measured ", "acc_measured"), ("net           ", "net")] {
        let (value, sigma) = estimate_after(&text, label);
        for (got, want) in [(value, f(key, "value")), (sigma, f(key, "sigma"))] {
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
