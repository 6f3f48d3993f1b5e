//! The Python tools against files written through layout.rs: tools/independent_count.py must
//! agree with coincidence counts computed here by brute force (every pair tested against the
//! rule 2·|Δ| ≤ w) and must flag a file whose count is off by one; a file from the real
//! `tagsieve count` must pass it with those same counts; tools/read_tables.py must print the
//! tables with their units.

mod common;

use std::path::{Path, PathBuf};
use tagsieve::engine::tables::*;
use tagsieve::output::layout::run_document;
use tagsieve::output::provenance::Provenance;
use tagsieve::output::{write_document, AttrValue, Format};

const WINDOW_PS: u64 = 801; // odd on purpose: |Δ| ≤ 400 counts, 401 does not
const DELAYS_PS: [(u32, i64); 3] = [(1, 0), (2, 1500), (3, -700)];

/// Sorted tags with a shared "photon pair" every 37 steps and filler in between;
/// offsets put pairs exactly on and just past the window edge.
fn channel_tags(ch: u32) -> Vec<u64> {
    let (_, delay) = DELAYS_PS[(ch - 1) as usize];
    let mut state = 0x9E37_79B9_7F4A_7C15u64 ^ u64::from(ch);
    let mut t = Vec::new();
    for k in 0..3000u64 {
        state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
        let base = 1_000_000 + k * 10_000;
        if k % 37 == 0 {
            let edge = [0i64, 400, -400, 401, -401][(k / 37 % 5) as usize];
            let jitter = if ch == 1 { 0 } else { edge };
            t.push((base as i64 + delay + jitter) as u64);
        } else {
            t.push(base + (state >> 40) % 9_000);
        }
    }
    t.sort_unstable();
    t
}

/// Every (a, b) tested against 2·|Δ| ≤ w with Δ = (b − d_B) − (a − d_A).
fn brute_force(ta: &[u64], tb: &[u64], d_a: i64, d_b: i64, window_ps: u64) -> (u64, u64) {
    let (mut count, mut heralded) = (0u64, 0u64);
    for &a in ta {
        let n = tb.iter().filter(|&&b| 2 * ((b as i64 - d_b) - (a as i64 - d_a)).unsigned_abs() <= window_ps).count() as u64;
        count += n;
        heralded += u64::from(n > 0);
    }
    (count, heralded)
}

fn pair_row(a: u32, b: u32, tags: &[Vec<u64>]) -> CoincidenceRow {
    let (d_a, d_b) = (DELAYS_PS[(a - 1) as usize].1, DELAYS_PS[(b - 1) as usize].1);
    let (coincidences, heralded) = brute_force(&tags[(a - 1) as usize], &tags[(b - 1) as usize], d_a, d_b, WINDOW_PS);
    let zero = Estimate { value: 0.0, sigma: 0.0 };
    CoincidenceRow {
        a,
        b,
        rel_delay_ps: d_b - d_a,
        window_ps: WINDOW_PS,
        coincidences,
        heralded,
        acc_analytic: zero,
        acc_measured: zero,
        acc_offset_counts: vec![],
        acc_offsets_ps: vec![],
        net: zero,
        car: f64::NAN,
        acc_agreement_sigma: f64::NAN,
    }
}

struct Fixture {
    _dir: tempfile::TempDir,
    tag_files: Vec<(u32, PathBuf)>,
    block: BlockTables,
    dir: PathBuf,
}

fn fixture() -> Fixture {
    let dir = tempfile::tempdir().unwrap();
    let tags: Vec<Vec<u64>> = (1..=3).map(channel_tags).collect();
    let mut tag_files = Vec::new();
    for (i, t) in tags.iter().enumerate() {
        let p = dir.path().join(format!("ch{}.u64", i + 1));
        std::fs::write(&p, t.iter().flat_map(|x| x.to_le_bytes()).collect::<Vec<u8>>()).unwrap();
        tag_files.push((i as u32 + 1, p));
    }
    let singles = tags
        .iter()
        .enumerate()
        .map(|(i, t)| SinglesRow { channel: i as u32 + 1, name: format!("ch{}", i + 1), events: t.len() as u64, first_ps: t[0], last_ps: *t.last().unwrap(), live_time_ps: 1, rate_hz: 0.0 })
        .collect();
    let block = BlockTables {
        label: "run".into(),
        span: None,
        singles,
        delays_ps: DELAYS_PS.to_vec(),
        window_ps: Some(WINDOW_PS),
        coincidences: vec![pair_row(1, 2, &tags), pair_row(1, 3, &tags), pair_row(2, 3, &tags)],
        scans: vec![],
        sweeps: vec![],
    };
    let d = dir.path().to_path_buf();
    Fixture { _dir: dir, tag_files, block, dir: d }
}

fn write(block: &BlockTables, path: &Path) {
    let prov = Provenance::new(vec!["test".into()]).param("window_ps", AttrValue::U64(WINDOW_PS));
    write_document(&run_document(std::slice::from_ref(block), &prov), Some(path), Format::Hdf5, false).unwrap();
}

fn independent_count(fx: &Fixture, h5: &Path) -> std::process::Output {
    let mut cmd = common::python();
    cmd.arg(common::root().join("tools/independent_count.py")).arg(h5).arg("--window-ps").arg(WINDOW_PS.to_string());
    for (ch, p) in &fx.tag_files {
        cmd.arg("--tags").arg(format!("{ch}={}", p.display()));
    }
    for (ch, d) in DELAYS_PS {
        cmd.arg("--delay").arg(format!("{ch}={d}"));
    }
    cmd.output().unwrap()
}

#[test]
fn independent_count_agrees_with_brute_force_counts() {
    let fx = fixture();
    // The edge offsets must matter, or the test could not tell |Δ| ≤ 400 from |Δ| < 400.
    let tags: Vec<Vec<u64>> = (1..=3).map(channel_tags).collect();
    let narrower = brute_force(&tags[0], &tags[1], 0, 1500, WINDOW_PS - 2).0;
    assert!(fx.block.coincidences[0].coincidences > narrower, "{} vs {narrower}", fx.block.coincidences[0].coincidences);
    let h5 = fx.dir.join("good.h5");
    write(&fx.block, &h5);
    let out = independent_count(&fx, &h5);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", String::from_utf8_lossy(&out.stderr));
    assert!(stdout.contains("every checked value agrees"), "{stdout}");
}

#[test]
fn independent_count_reports_an_off_by_one_count() {
    let fx = fixture();
    let mut block = fx.block.clone();
    block.coincidences[1].coincidences += 1;
    block.singles[2].last_ps -= 1;
    let h5 = fx.dir.join("bad.h5");
    write(&block, &h5);
    let out = independent_count(&fx, &h5);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{stdout}{}", String::from_utf8_lossy(&out.stderr));
    assert!(stdout.contains("pair 1-3 coincidences"), "{stdout}");
    assert!(stdout.contains("singles channel 3 last_ps"), "{stdout}");
    assert!(stdout.contains("2 difference(s)"), "{stdout}");
}

#[test]
fn read_tables_prints_blocks_with_units_and_provenance() {
    let fx = fixture();
    let h5 = fx.dir.join("good.h5");
    write(&fx.block, &h5);
    let out = common::python().arg(common::root().join("tools/read_tables.py")).arg(&h5).output().unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{stdout}{}", String::from_utf8_lossy(&out.stderr));
    for want in ["block run (window 801 ps", "events [counts]", "rate_hz [Hz]", "coincidences [counts]", "window_ps = 801", "command: test"] {
        assert!(stdout.contains(want), "missing {want:?} in\n{stdout}");
    }
}

#[test]
fn tagsieve_count_agrees_with_the_independent_recount() {
    let fx = fixture();
    let h5 = fx.dir.join("count.h5");
    let mut cmd = common::tagsieve();
    cmd.arg("--quiet").arg("count").arg("--window-ps").arg(WINDOW_PS.to_string()).arg("-o").arg(&h5);
    for (ch, p) in &fx.tag_files {
        cmd.arg(format!("{ch}={}", p.display()));
    }
    for (ch, d) in DELAYS_PS {
        cmd.arg("--delay").arg(format!("{ch}={d}"));
    }
    let out = cmd.output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let out = independent_count(&fx, &h5);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", String::from_utf8_lossy(&out.stderr));
    // Every pair of the brute-force fixture was checked.
    for r in &fx.block.coincidences {
        assert!(stdout.contains(&format!("pair {}-{}: {} coincidences, {} heralded", r.a, r.b, r.coincidences, r.heralded)), "{stdout}");
    }
}

fn count_to_stdout(fx: &Fixture, format: &str) -> std::process::Output {
    let mut cmd = common::tagsieve();
    cmd.args(["--quiet", "count", "--window-ps", &WINDOW_PS.to_string(), "-o", "-", "--format", format]);
    for (ch, p) in &fx.tag_files {
        cmd.arg(format!("{ch}={}", p.display()));
    }
    cmd.output().unwrap()
}

#[test]
fn count_streams_csv_and_json_to_stdout_but_not_hdf5() {
    let fx = fixture();
    let csv = count_to_stdout(&fx, "csv");
    assert!(csv.status.success(), "{}", String::from_utf8_lossy(&csv.stderr));
    let text = String::from_utf8(csv.stdout).unwrap();
    assert!(text.starts_with("# group /\n"), "stdout must hold only the CSV: {text}");
    assert!(text.contains("# table /blocks/block/coincidences\n"), "{text}");
    assert!(text.contains("a [],b [],rel_delay_ps [ps],window_ps [ps],coincidences [counts]"), "{text}");
    let json = count_to_stdout(&fx, "json");
    assert!(json.status.success(), "{}", String::from_utf8_lossy(&json.stderr));
    let v: serde_json::Value = serde_json::from_slice(&json.stdout).unwrap();
    let window = &v["groups"]["blocks"]["groups"]["block"]["attrs"]["window_ps"];
    assert_eq!(window.as_u64(), Some(WINDOW_PS));
    let h5 = count_to_stdout(&fx, "hdf5");
    assert_eq!(h5.status.code(), Some(2), "{}", String::from_utf8_lossy(&h5.stderr));
    assert!(h5.stdout.is_empty());
}
