//! Big numbers: coincidence counts beyond 2^32 come out exact, through the CLI's JSON and
//! the u64 datasets of the HDF5 file, on the whole-file and the streaming pass; and the
//! engine source holds no 32-bit integer type that a count could pass through.
//! (A channel of more than 2^32 events is checked once, locally: tools/big_channel.sh.)

mod common;

use common::tagsieve;
use std::path::{Path, PathBuf};

/// Write ascending timestamps as a per-channel little-endian u64 file.
fn write_array(path: &Path, times_ps: impl Iterator<Item = u64>) {
    let bytes: Vec<u8> = times_ps.flat_map(u64::to_le_bytes).collect();
    std::fs::write(path, bytes).unwrap();
}

/// The (a, b) row of a `count --json` report: (coincidences, heralded, off-peak counts).
fn json_row(stdout: &[u8], a: u64, b: u64) -> (u64, u64, Vec<u64>) {
    let v: serde_json::Value = serde_json::from_slice(stdout).unwrap();
    let row = common::doc_rows(&v, "/blocks/block/coincidences").into_iter().find(|r| r["a"] == a && r["b"] == b).unwrap();
    let offs = common::doc_rows(&v, "/blocks/block/off_peak_windows")
        .iter()
        .filter(|r| r["a"] == a && r["b"] == b)
        .map(|r| r["counts"].as_u64().unwrap())
        .collect();
    (row["coincidences"].as_u64().unwrap(), row["heralded"].as_u64().unwrap(), offs)
}

/// The u64 columns `coincidences` and `heralded` of the first coincidence row, read back
/// from the HDF5 file as stored (no conversion by our reader).
fn h5_row(path: &Path) -> (u64, u64) {
    let f = hdf5::File::open(path).unwrap();
    let g = f.group("blocks/block/coincidences").unwrap();
    let col = |name: &str| {
        let ds = g.dataset(name).unwrap();
        assert_eq!(ds.dtype().unwrap().to_descriptor().unwrap(), hdf5::types::TypeDescriptor::Unsigned(hdf5::types::IntSize::U8), "{name} stored as u64");
        ds.read_raw::<u64>().unwrap()[0]
    };
    (col("coincidences"), col("heralded"))
}

fn run_count(args: &[&str]) -> Vec<u8> {
    let o = tagsieve().args(args).output().unwrap();
    assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
    o.stdout
}

struct Case {
    _dir: tempfile::TempDir,
    a: String,
    b: String,
    dir: PathBuf,
}

fn case(a: impl Iterator<Item = u64>, b: impl Iterator<Item = u64>) -> Case {
    let dir = tempfile::tempdir().unwrap();
    let (pa, pb) = (dir.path().join("a.u64"), dir.path().join("b.u64"));
    write_array(&pa, a);
    write_array(&pb, b);
    Case { a: format!("1={}", pa.display()), b: format!("2={}", pb.display()), dir: dir.path().to_path_buf(), _dir: dir }
}

/// Every pair coincides when all events lie within one window of each other: N_A·N_B pairs
/// (counting, no source needed). 10^5 × (10^5 + 1) ≈ 10^10 > 2^32.
#[test]
fn all_pairs_inside_one_window_count_n_a_times_n_b() {
    let (na, nb) = (100_000u64, 100_001u64);
    let c = case((0..na).map(|i| 10_000 + 2 * i), (0..nb).map(|j| 50_000 + j));
    let expected = na * nb;
    assert!(expected > 1 << 32);
    // w = 1 ms: half-width 0.5 ms ≫ the 0.2 µs the events span; off-peak windows 10 ms away.
    let common_args = ["--quiet", "--json", "count", "-w", "1000000000", "--acc-offsets-ps", "10000000000,-10000000000"];
    let h5 = c.dir.join("all.h5");
    let mut args = common_args.to_vec();
    args.extend([c.a.as_str(), c.b.as_str(), "--pairs", "1:2", "-o", h5.to_str().unwrap()]);
    let (pairs, heralded, offs) = json_row(&run_count(&args), 1, 2);
    assert_eq!((pairs, heralded, offs), (expected, na, vec![0, 0]));
    assert_eq!(h5_row(&h5), (expected, na));

    // The same events as one container, on the streaming pass.
    let sieve = c.dir.join("all.tsieve");
    let st = tagsieve().args(["--quiet", "import", &c.a, &c.b, "-o", sieve.to_str().unwrap()]).status().unwrap();
    assert!(st.success());
    let h5s = c.dir.join("stream.h5");
    let mut args = common_args.to_vec();
    args.extend([sieve.to_str().unwrap(), "--pass", "stream", "--pairs", "2:1", "-o", h5s.to_str().unwrap()]);
    let (pairs, heralded, _) = json_row(&run_count(&args), 2, 1);
    assert_eq!((pairs, heralded), (expected, nb));
    assert_eq!(h5_row(&h5s), (expected, nb));
}

/// Pairs (i, j) with |b_j − a_i − c| ≤ h for a_i = s_a·i, b_j = o_b + s_b·j: for each i the
/// partners form the run of j in [⌈(a_i + c − h − o_b)/s_b⌉, ⌊(a_i + c + h − o_b)/s_b⌋] cut to
/// [0, n_b) (arithmetic, no source needed). Returns (pairs, A events with a partner).
fn expected_counts(n_a: i128, s_a: i128, n_b: i128, o_b: i128, s_b: i128, c: i128, h: i128) -> (u64, u64) {
    let (mut pairs, mut heralded) = (0u64, 0u64);
    for i in 0..n_a {
        let a = s_a * i;
        let lo = (a + c - h - o_b + s_b - 1).div_euclid(s_b).max(0);
        let hi = (a + c + h - o_b).div_euclid(s_b).min(n_b - 1);
        if hi >= lo {
            pairs += (hi - lo + 1) as u64;
            heralded += 1;
        }
    }
    (pairs, heralded)
}

/// Partial overlap: two combs of different pitch, a window that holds part of B for most A
/// events and none for the last ones, a delay on B and an off-peak window that overlaps the
/// combs only in part.
#[test]
fn partial_overlap_matches_the_arithmetic_count() {
    let (n_a, s_a, n_b, o_b, s_b) = (200_000i128, 9i128, 150_000i128, 100_000i128, 7i128);
    let (delay_b, w, offset) = (-40_000i128, 800_001i128, 900_000i128);
    let h = w / 2; // the rule: |Δ| ≤ ⌊w/2⌋
    let c = case((0..n_a).map(|i| (s_a * i) as u64), (0..n_b).map(|j| (o_b + s_b * j) as u64));
    // Δ = (b − d_B) − a, so the centre in b − a is d_B (+ the offset for the off-peak window).
    let (pairs, heralded) = expected_counts(n_a, s_a, n_b, o_b, s_b, delay_b, h);
    let (off_pairs, _) = expected_counts(n_a, s_a, n_b, o_b, s_b, delay_b + offset, h);
    assert!(pairs > 1 << 32 && pairs < (n_a * n_b) as u64, "beyond 2^32 but not every pair: {pairs}");
    assert!(heralded < n_a as u64 && off_pairs > 0 && off_pairs < pairs);
    let h5 = c.dir.join("partial.h5");
    let (w_s, d_s, o_s) = (w.to_string(), format!("2={delay_b}"), offset.to_string());
    let args = ["--quiet", "--json", "count", &c.a, &c.b, "--pairs", "1:2", "-w", &w_s, "--delay", &d_s, "--acc-offsets-ps", &o_s, "-o", h5.to_str().unwrap()];
    let got = json_row(&run_count(&args), 1, 2);
    assert_eq!(got, (pairs, heralded, vec![off_pairs]));
    assert_eq!(h5_row(&h5), (pairs, heralded));
}

/// No u32/i32/u16/i16 in the engine: counts, indices and times there are u64/i64/usize.
#[test]
fn engine_source_has_no_32_bit_integers() {
    let dir = common::root().join("src/engine");
    for e in std::fs::read_dir(&dir).unwrap() {
        let p = e.unwrap().path();
        let text = std::fs::read_to_string(&p).unwrap();
        for (n, line) in text.lines().enumerate() {
            let code = line.split("//").next().unwrap_or("");
            for ty in ["u32", "i32", "u16", "i16"] {
                let hit = code.match_indices(ty).any(|(k, _)| {
                    let before = code[..k].chars().last().is_none_or(|ch| !ch.is_alphanumeric() && ch != '_');
                    let after = code[k + 3..].chars().next().is_none_or(|ch| !ch.is_alphanumeric() && ch != '_');
                    before && after
                });
                assert!(!hit, "{}:{}: 32-bit or narrower integer `{ty}`: {line}", p.display(), n + 1);
            }
        }
    }
}
