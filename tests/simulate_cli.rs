//! `tagsieve simulate` end to end: the files it writes are exactly those run.toml lists,
//! they read back through the readers as the library simulated them, in every format,
//! and bad options or existing outputs are refused with exit code 2.

mod common;

use std::collections::BTreeSet;
use std::path::Path;
use tagsieve::manifest::{Manifest, Setup};
use tagsieve::read::{self, layout::RecordLayout, ReadOptions};
use tagsieve::simulate::{block_seed, scenario_detectors, simulate_block, SourceModel};

fn simulate(dir: &Path, extra: &[&str]) -> std::process::Output {
    let mut c = common::tagsieve();
    c.args(["--quiet", "simulate", "-o"]).arg(dir).args(["--duration-s", "0.05", "--seed", "9"]).args(extra);
    c.output().unwrap()
}

/// The files a manifest's blocks name, as absolute paths.
fn listed_files(m: &Manifest) -> BTreeSet<std::path::PathBuf> {
    m.blocks
        .iter()
        .flat_map(|b| m.block_inputs(b))
        .map(|s| std::path::PathBuf::from(match s.split_once('=') {
            Some((ch, p)) if ch.parse::<u32>().is_ok() => p.to_string(),
            _ => s,
        }))
        .collect()
}

fn files_in(dir: &Path) -> BTreeSet<std::path::PathBuf> {
    std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().path()).filter(|p| !p.ends_with("run.toml")).collect()
}

/// Each block read back through the readers equals simulate_block at the block's seed.
fn assert_blocks_read_back(m: &Manifest) {
    let dets: Vec<_> = scenario_detectors().into_iter().filter(|d| m.role_of(d.channel).is_some()).collect();
    for (k, b) in m.blocks.iter().enumerate() {
        let layout = m.block_layout(b).map(|l| RecordLayout::from_arg(&l).unwrap());
        let sources = read::open_inputs(&m.block_inputs(b), layout.as_ref(), ReadOptions::mapped()).unwrap();
        let mut got = read::all_channels(&sources).unwrap();
        got.sort_by_key(|c| c.channel);
        let (alpha, beta) = m.block_angles_deg(b).unwrap();
        let setting = tagsieve::simulate::Setting { alpha_deg: alpha, beta_deg: beta };
        let want = simulate_block(&SourceModel::scenario(), &dets, setting, 50_000_000_000, block_seed(9, k as u64)).unwrap();
        assert_eq!(got.len(), want.len(), "block {}", b.name);
        for (g, w) in got.iter().zip(&want) {
            assert_eq!((g.channel, &*g.times_ps), (w.channel, &*w.times_ps), "block {} channel {}", b.name, w.channel);
        }
    }
}

#[test]
fn every_format_writes_what_the_manifest_lists_and_reads_back() {
    for format in ["container", "arrays", "records"] {
        let d = tempfile::tempdir().unwrap();
        let out = simulate(d.path(), &["--format", format]);
        assert!(out.status.success(), "{format}: {}", String::from_utf8_lossy(&out.stderr));
        let m = Manifest::load(&d.path().join("run.toml")).unwrap();
        assert_eq!(m.setup, Setup::FourDetectors);
        assert_eq!(m.blocks.len(), 4);
        assert_eq!(listed_files(&m), files_in(d.path()), "{format}");
        assert_blocks_read_back(&m);
    }
}

/// Per-channel arrays are 8 bytes per tag (little-endian u64): the JSON tag counts must
/// match the file sizes.
#[test]
fn json_summary_counts_match_the_array_files() {
    let d = tempfile::tempdir().unwrap();
    let mut c = common::tagsieve();
    c.args(["--json", "simulate", "--format", "arrays", "--duration-s", "0.05", "-o"]).arg(d.path());
    let out = c.output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let blocks = v["blocks"].as_array().unwrap();
    assert_eq!(blocks.len(), 4);
    for b in blocks {
        for f in b["files"].as_array().unwrap() {
            let f = Path::new(f.as_str().unwrap());
            let ch = f.file_stem().unwrap().to_str().unwrap().rsplit("_ch").next().unwrap();
            let n = b["tags_per_channel"][ch].as_u64().unwrap();
            assert!(n > 1000);
            assert_eq!(std::fs::metadata(f).unwrap().len(), 8 * n, "{}", f.display());
        }
    }
}

#[test]
fn one_per_side_writes_four_blocks_per_pair_with_plus_detectors_only() {
    let d = tempfile::tempdir().unwrap();
    let out = simulate(d.path(), &["--setup", "one-per-side", "--omit-delays", "--window-ps", "300"]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let m = Manifest::load(&d.path().join("run.toml")).unwrap();
    assert_eq!((m.setup, m.blocks.len(), m.setting_pairs().len()), (Setup::OnePerSide, 16, 4));
    assert_eq!(m.channels.iter().map(|c| c.number).collect::<Vec<_>>(), [1, 3]);
    assert!(m.channel_delays_ps().is_empty());
    assert_eq!(m.window_ps, Some(300));
    assert_eq!(listed_files(&m), files_in(d.path()));
    assert_blocks_read_back(&m);
}

#[test]
fn visibility_series_lists_one_block_per_angle() {
    let d = tempfile::tempdir().unwrap();
    let out = simulate(d.path(), &["--series", "0,30,60,90"]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let m = Manifest::load(&d.path().join("run.toml")).unwrap();
    let betas: Vec<f64> = m.setting_pairs().iter().map(|p| p.beta_deg).collect();
    assert_eq!(betas, [0.0, 30.0, 60.0, 90.0]);
}

#[test]
fn existing_output_is_refused_without_force() {
    let d = tempfile::tempdir().unwrap();
    assert!(simulate(d.path(), &[]).status.success());
    let before = std::fs::read(d.path().join("ab.tsieve")).unwrap();
    let again = simulate(d.path(), &["--pair-rate-hz", "1e5"]);
    assert_eq!(again.status.code(), Some(2));
    let err = String::from_utf8_lossy(&again.stderr);
    assert!(err.contains("--force"), "{err}");
    assert_eq!(std::fs::read(d.path().join("ab.tsieve")).unwrap(), before);
    assert!(simulate(d.path(), &["--force"]).status.success());
}

#[test]
fn bad_detector_override_is_a_usage_error() {
    let d = tempfile::tempdir().unwrap();
    for (spec, words) in [("7:efficiency=0.5", "no detector on channel 7"), ("1:colour=red", "unknown key"), ("2:efficiency=2", "efficiency")] {
        let out = simulate(d.path(), &["--detector", spec]);
        assert_eq!(out.status.code(), Some(2), "{spec}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(words), "{spec}: {err}");
    }
    assert!(files_in(d.path()).is_empty(), "nothing written on a usage error");
}

/// `--threads` changes nothing in the output (arrays: no time stamp in the files).
#[test]
fn thread_count_does_not_change_the_files() {
    let (d1, d2) = (tempfile::tempdir().unwrap(), tempfile::tempdir().unwrap());
    assert!(simulate(d1.path(), &["--format", "arrays", "--threads", "1", "--pair-rate-hz", "3e6"]).status.success());
    assert!(simulate(d2.path(), &["--format", "arrays", "--threads", "2", "--pair-rate-hz", "3e6"]).status.success());
    let files = files_in(d1.path());
    assert_eq!(files.len(), 16);
    for f in files {
        let other = d2.path().join(f.file_name().unwrap());
        assert_eq!(std::fs::read(&f).unwrap(), std::fs::read(other).unwrap(), "{}", f.display());
    }
}
