//! The CHSH pipeline end to end through the binary: simulate a run, then `chsh` on its
//! manifest, checked against published bounds.

mod common;
use common::{doc_at, doc_rows, tagsieve};
use serde_json::Value;

fn simulate(dir: &std::path::Path, extra: &[&str]) {
    let out = tagsieve().args(["simulate", "--quiet", "-o"]).arg(dir).args(extra).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
}

fn chsh_json(manifest: &std::path::Path) -> Value {
    let out = tagsieve().args(["chsh", "--quiet", "--json", "-w", "600"]).arg(manifest).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).unwrap()
}

fn primary(v: &Value, kind: &str) -> (f64, f64) {
    let s = doc_rows(v, "/chsh/s_values").into_iter().find(|s| s["is_primary"] == 1 && s["kind"] == kind).unwrap();
    (s["s"].as_f64().unwrap(), s["s_sigma"].as_f64().unwrap())
}

#[test]
fn quantum_source_reaches_two_root_two_times_v() {
    // Quantum bound 2√2 (Cirel'son, Lett. Math. Phys. 4, 93 (1980)) reached at the standard
    // angles 0°, 45°, 22.5°, 67.5°; with visibility V the correlations scale by V, so
    // S = 2√2·V (CHSH, Phys. Rev. Lett. 23, 880 (1969)).
    let d = tempfile::tempdir().unwrap();
    let v = 0.9;
    simulate(d.path(), &["--visibility", "0.9", "--seed", "5", "--duration-s", "1"]);
    let j = chsh_json(&d.path().join("run.toml"));
    let (s, sigma) = primary(&j, "raw");
    let expect = 2.0 * 2f64.sqrt() * v;
    // Accidentals at 600 ps are ~10⁻⁴ of the coincidences, far below σ; test the corrected S.
    let (sc, sc_sigma) = primary(&j, "accidental-corrected");
    assert!((sc - expect).abs() < 3.0 * sc_sigma, "S corrected {sc} ± {sc_sigma} vs {expect}");
    assert!((s - expect).abs() < 3.0 * sigma + 0.01, "S raw {s} ± {sigma} vs {expect}");
    assert!(sigma > 0.005 && sigma < 0.05, "σ_S {sigma}");
}

#[test]
fn local_hidden_variable_source_stays_within_two() {
    // Any local model obeys |S| ≤ 2 (CHSH, Phys. Rev. Lett. 23, 880 (1969)).
    let d = tempfile::tempdir().unwrap();
    simulate(d.path(), &["--model", "lhv", "--seed", "9", "--duration-s", "1"]);
    let j = chsh_json(&d.path().join("run.toml"));
    for kind in ["raw", "accidental-corrected"] {
        for s in doc_rows(&j, "/chsh/s_values").iter().filter(|s| s["kind"] == kind) {
            let (v, sig) = (s["s"].as_f64().unwrap(), s["s_sigma"].as_f64().unwrap());
            assert!(v.abs() <= 2.0 + 3.0 * sig, "{kind} {}: {v} ± {sig}", s["formula"]);
        }
    }
}

#[test]
fn visibility_series_recovers_simulated_visibility() {
    // N(θ) ∝ 1 + V·cos 2(θ − θ0) for (|HH⟩+|VV⟩)/√2 (common practice, no source).
    let d = tempfile::tempdir().unwrap();
    simulate(d.path(), &["--visibility", "0.8", "--seed", "3", "--duration-s", "0.5", "--series", "0,20,40,60,80,100,120,140,160"]);
    let j = chsh_json(&d.path().join("run.toml"));
    assert!(doc_at(&j, "/chsh").is_null(), "a series has no CHSH settings");
    let fit = &doc_rows(&j, "/visibility/fits")[0];
    let (v, sig) = (fit["visibility"].as_f64().unwrap(), fit["visibility_sigma"].as_f64().unwrap());
    assert!((v - 0.8).abs() < 3.0 * sig, "V {v} ± {sig}");
    assert!(fit["theta0_deg"].as_f64().unwrap().abs() < 3.0 * fit["theta0_sigma_deg"].as_f64().unwrap() + 0.5);
}

#[test]
fn three_setting_form_is_violated_at_thirty_degree_steps() {
    // Bell's original form |E(a,b) − E(a,c)| ≤ 1 + E(b,c) (Physics 1, 195 (1964), from
    // memory), applied to −E for the correlated state (|HH⟩+|VV⟩)/√2 with E = V·cos 2(α−β):
    // at a = 0°, b = 30°, c = 60° the ideal values give |−½ − ½| = 1 > 1 − ½.
    let d = tempfile::tempdir().unwrap();
    simulate(d.path(), &["--angles", "0,30,30,60", "--seed", "13", "--duration-s", "1"]);
    let j = chsh_json(&d.path().join("run.toml"));
    let b = &doc_at(&j, "/bell3")["attrs"];
    let angles: Value = serde_json::from_str(b["angles_deg"].as_str().unwrap()).unwrap();
    assert_eq!(angles, serde_json::json!([0.0, 30.0, 60.0]), "{j}");
    let (lhs, rhs, sig) = (b["lhs"].as_f64().unwrap(), b["rhs"].as_f64().unwrap(), b["margin_sigma"].as_f64().unwrap());
    let v: f64 = 0.95;
    assert!((lhs - v).abs() < 4.0 * sig && (rhs - (1.0 - 0.5 * v)).abs() < 4.0 * sig, "lhs {lhs} rhs {rhs} σ {sig}");
    assert!(b["violation_sigma"].as_f64().unwrap() > 5.0, "{b}");
}

/// A refused window is named where it came from: a `window_ps` the test writes into the
/// manifest as its fifth line is reported at that line (a fact of the file written here),
/// not under the flag; the same value given as the flag is refused under the flag.
#[test]
fn a_refused_window_names_where_it_came_from() {
    let d = tempfile::tempdir().unwrap();
    simulate(d.path(), &["--seed", "2", "--duration-s", "0.05"]);
    let p = d.path().join("run.toml");
    let text = std::fs::read_to_string(&p).unwrap();
    let mut lines: Vec<&str> = text.lines().collect();
    assert!(lines[..4].iter().all(|l| !l.starts_with('[')), "the first four lines are top-level keys:\n{text}");
    lines.insert(4, "window_ps = 0");
    std::fs::write(&p, lines.join("\n") + "\n").unwrap();
    let out = tagsieve().args(["chsh", "-q"]).arg(&p).output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("run.toml: line 5: window_ps") && !err.contains("--window-ps"), "{err}");
    let flag = tagsieve().args(["chsh", "-q", "-w", "0"]).arg(&p).output().unwrap();
    assert_eq!(flag.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&flag.stderr).contains("--window-ps"), "{}", String::from_utf8_lossy(&flag.stderr));
}
