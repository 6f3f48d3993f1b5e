//! The delays file holds only delays that were found or given (issue: a channel the scan
//! did not find must never be written as 0), and every pass that reads it refuses a pair
//! whose channel has no delay. Also the input checks on delays, pairs and ps values.
//!
//! The expected delays are the simulator's configured ones, the invented Larch–Rowan table
//! in shared/scenario.md (channel 3: 41 250 ps, channel 4: 40 600 ps, both beyond a 30 ns
//! half-range); the peak criterion (≥ 5 σ of the median bin's Poisson σ and ≥ 10 counts)
//! is the one the help and docs state.

mod common;

use std::path::{Path, PathBuf};
use std::process::Output;

fn run(dir: &Path, args: &[&str]) -> Output {
    common::tagsieve().current_dir(dir).args(args).output().expect("run tagsieve")
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

#[track_caller]
fn ok(out: &Output) -> String {
    assert!(out.status.success(), "failed: {}", text(&out.stderr));
    text(&out.stdout)
}

#[track_caller]
fn refused(out: &Output, parts: &[&str]) -> String {
    let err = text(&out.stderr);
    assert!(!err.contains("panicked"), "panic: {err}");
    assert_eq!(out.status.code(), Some(2), "exit code; stderr: {err}");
    for p in parts {
        assert!(err.contains(p), "stderr lacks {p:?}: {err}");
    }
    err
}

/// A short simulated run with its delays left in the tags (the scan must find them).
fn simulated_run() -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    ok(&run(dir.path(), &["simulate", "-o", "run", "--duration-s", "0.3", "--seed", "11", "--omit-delays", "-q"]));
    let block = dir.path().join("run/ab.tsieve");
    assert!(block.exists());
    (dir, block)
}

fn delays_toml(dir: &Path, name: &str) -> toml::Table {
    toml::from_str(&std::fs::read_to_string(dir.join(name)).unwrap()).unwrap()
}

#[test]
fn a_channel_outside_the_span_is_left_out_and_said_even_when_quiet() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    let stdout = ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--half-range-ps", "30000", "-q"]));
    let file = delays_toml(d, "delays.toml");
    let found = file["delays_ps"].as_table().unwrap();
    // Channels 3 and 4 arrive ≥ 40.6 ns late: no peak within ±30 ns, so no delay at all;
    // channel 2 pairs only with them (1:2 are two outputs of one analyzer: no pairs).
    assert_eq!(found.keys().collect::<Vec<_>>(), vec!["1"], "{found:?}");
    let not_found = file["not_found"].as_table().unwrap();
    for c in ["2", "3", "4"] {
        let why = not_found[c].as_str().unwrap();
        assert!(why.contains("no peak within ±30000 ps") && why.contains("5 σ"), "{why}");
    }
    assert_eq!(file["obtained"]["1"].as_str(), Some("reference channel"));
    // --quiet does not hide them: they are results, on stdout.
    assert!(stdout.contains("no delay found") && stdout.contains("  3: no peak") && stdout.contains("  4: no peak"), "{stdout}");

    // The JSON lists them with the reason too, and leaves them out of the proposal.
    let out = ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--half-range-ps", "30000", "--json", "--delays-out", "d2.toml"]));
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    let found = common::doc_rows(&v, "/proposed_delays/found");
    assert!(found.iter().all(|r| r["channel"] != 3), "{found:?}");
    let not_found = common::doc_rows(&v, "/proposed_delays/not_found");
    let why = |c: u64| not_found.iter().find(|r| r["channel"] == c).unwrap()["reason"].as_str().unwrap().to_string();
    assert!(why(3).contains("no peak"));
    assert!(why(4).contains("no peak"));
}

#[test]
fn channels_in_no_pair_with_the_reference_get_their_reason() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    // 2:4 has a peak (the − outputs), but nothing links 2 or 4 to the reference 1 (1:2 are
    // two outputs of one analyzer: no pairs); 3 is in no scanned pair at all.
    let stdout = ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--pairs", "1:2,2:4", "-q"]));
    let file = delays_toml(d, "delays.toml");
    let found = file["delays_ps"].as_table().unwrap();
    assert_eq!(found.keys().collect::<Vec<_>>(), vec!["1"], "{found:?}");
    let nf = file["not_found"].as_table().unwrap();
    assert!(nf["2"].as_str().unwrap().contains("no pair with the reference 1"), "{nf:?}");
    assert!(nf["4"].as_str().unwrap().contains("no pair with the reference 1"), "{nf:?}");
    assert_eq!(nf["3"].as_str().unwrap(), "in no scanned pair");
    assert!(stdout.contains("  3: in no scanned pair"), "{stdout}");
}

#[test]
fn a_given_delay_is_kept_for_a_channel_the_scan_did_not_find() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--half-range-ps", "30000", "--delay", "3=41250", "-q"]));
    let file = delays_toml(d, "delays.toml");
    // With 3 shifted by its true delay, the scan finds it directly (and 2 through it).
    let found = file["delays_ps"].as_table().unwrap();
    assert!((found["2"].as_integer().unwrap() - 850).abs() <= 40, "{found:?}");
    assert!(file["obtained"]["3"].as_str().unwrap().starts_with("scan: peak of pair 1:3"));
    assert!((found["3"].as_integer().unwrap() - 41250).abs() <= 40, "{found:?}");
    // Channel 4 is still compared at delay 0: its peaks lie ≥ 40 ns out, beyond ±30 ns.
    assert!(file["not_found"]["4"].as_str().unwrap().contains("no peak"));
    // A given delay the scan cannot confirm (the peak pushed outside ±H) is written as given.
    ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--half-range-ps", "30000", "--pairs", "1:2,1:3", "--delay", "4=1300", "--force", "-q"]));
    let file = delays_toml(d, "delays.toml");
    assert_eq!(file["delays_ps"]["4"].as_integer(), Some(1300));
    assert!(file["obtained"]["4"].as_str().unwrap().starts_with("given with --delay"));
    assert!(file.get("not_found").and_then(|t| t.get("4")).is_none());
}

#[test]
fn count_sweep_and_chsh_refuse_a_channel_without_a_delay() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--half-range-ps", "30000", "-q"]));
    let parts = ["delays.toml", "no delay for channel 2 (no peak", "channel 3 (no peak", "channel 4 (no peak", "--delay 2=PS"];
    refused(&run(d, &["count", "run/ab.tsieve", "--delays", "delays.toml", "-w", "500", "-q"]), &parts);
    refused(&run(d, &["count", "run/ab.tsieve", "--delays", "delays.toml", "-w", "500", "--pairs", "1:3", "-q"]), &["no delay for channel 3"]);
    refused(&run(d, &["sweep", "run/ab.tsieve", "--delays", "delays.toml", "--pairs", "1:4", "-q"]), &["no delay for channel 4"]);
    refused(&run(d, &["chsh", "run/run.toml", "--delays", "delays.toml", "-w", "500", "-q"]), &["delays.toml", "no delay for channel 2"]);
    // No output was left behind by the refusals.
    assert!(!d.join("out.h5").exists());
    // Pairs whose channels all have delays count; flags complete the file.
    ok(&run(d, &["count", "run/ab.tsieve", "--delays", "delays.toml", "--delay", "2=850", "-w", "500", "--pairs", "1:2", "-q"]));
    let all = ["count", "run/ab.tsieve", "--delays", "delays.toml", "--delay", "2=850", "--delay", "3=41250", "--delay", "4=40600", "-w", "500", "-q"];
    ok(&run(d, &all));
    // Without any delays file, an unlisted channel keeps the documented default 0.
    ok(&run(d, &["count", "run/ab.tsieve", "-w", "500", "--pairs", "1:2", "-q"]));
}

#[test]
fn delays_out_is_not_replaced_without_force() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    std::fs::write(d.join("delays.toml"), "# mine\n").unwrap();
    refused(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "-q"]), &["delays.toml", "exists", "--force"]);
    assert_eq!(std::fs::read_to_string(d.join("delays.toml")).unwrap(), "# mine\n");
    ok(&run(d, &["scan", "run/ab.tsieve", "--reference", "1", "--force", "-q"]));
    assert!(delays_toml(d, "delays.toml").contains_key("delays_ps"));
}

#[test]
fn delay_for_a_missing_channel_and_bad_pairs_are_refused() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    refused(&run(d, &["count", "run/ab.tsieve", "-w", "500", "--delay", "9=5", "-q"]), &["--delay 9=5", "no input provides channel 9"]);
    refused(&run(d, &["scan", "run/ab.tsieve", "--delay", "9=5", "-q"]), &["no input provides channel 9"]);
    refused(&run(d, &["scan", "run/ab.tsieve", "--reference", "7", "-q"]), &["--reference 7", "no input provides channel 7"]);
    refused(&run(d, &["count", "run/ab.tsieve", "-w", "500", "--pairs", "1:2,1:2", "-q"]), &["pair 1:2 is given twice"]);
    refused(&run(d, &["count", "run/ab.tsieve", "-w", "500", "--pairs", "1:3,3:1", "-q"]), &["pair 1:3 is given twice"]);
    refused(&run(d, &["sweep", "run/ab.tsieve", "--pairs", "2:2", "-q"]), &["--pairs 2:2", "itself"]);
}

#[test]
fn negative_and_zero_ps_values_get_one_clear_message() {
    let (dir, _) = simulated_run();
    let d = dir.path();
    let want = "expected a whole number of ps > 0";
    let spaced = refused(&run(d, &["count", "run/ab.tsieve", "--window-ps", "-5"]), &[want, "-5"]);
    let joined = refused(&run(d, &["count", "run/ab.tsieve", "--window-ps=-5"]), &[want]);
    assert_eq!(spaced, joined);
    refused(&run(d, &["count", "run/ab.tsieve", "-w", "0"]), &[want]);
    refused(&run(d, &["scan", "run/ab.tsieve", "--half-range-ps", "-100"]), &[want]);
    refused(&run(d, &["scan", "run/ab.tsieve", "--bin-ps", "0"]), &[want]);
    refused(&run(d, &["sweep", "run/ab.tsieve", "--windows-ps", "100,-3"]), &[want]);
    refused(&run(d, &["chsh", "run/run.toml", "-w", "-1"]), &[want]);
}

#[test]
fn scan_help_states_the_peak_criterion() {
    let out = ok(&common::tagsieve().args(["scan", "--help"]).output().unwrap());
    assert!(out.contains("5 σ") && out.contains("10 counts"), "{out}");
}
