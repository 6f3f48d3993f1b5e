//! `inspect --json` cross-checked by tools/crosscheck_inspect.py, which reads the same
//! per-channel arrays with NumPy (the outside reference) and recomputes every statistic.

mod common;

use tagsieve::read::channel_array::write_channel_array;

/// Tags from a small integer PRNG (splitmix64) with deliberate duplicates, steps
/// backwards, a lone event and values near the 2^62 ps limit.
fn channel(seed: u64, n: usize) -> Vec<u64> {
    let mut rng = common::SplitMix64(seed);
    let mut next = move || rng.next_u64();
    let mut t = next() % 1_000_000;
    (0..n)
        .map(|_| {
            let r = next();
            t = match r % 100 {
                0 => t,                                   // duplicate
                1 => t.saturating_sub(r % 5000),          // step backwards
                _ => t + 1 + (r >> 40) % 200_000,
            };
            t
        })
        .collect()
}

fn crosscheck(arrays: &[(u32, Vec<u64>)]) {
    let d = tempfile::tempdir().unwrap();
    let mut cmd = common::python();
    cmd.arg(common::root().join("tools/crosscheck_inspect.py")).arg(env!("CARGO_BIN_EXE_tagsieve"));
    for (ch, t) in arrays {
        let p = d.path().join(format!("ch{ch}.u64"));
        write_channel_array(&p, t).unwrap();
        cmd.arg(format!("{ch}={}", p.display()));
    }
    let out = cmd.output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "crosscheck failed:\n{text}{}", String::from_utf8_lossy(&out.stderr));
    assert!(text.contains("0 mismatches"), "{text}");
}

#[test]
fn inspect_matches_numpy_on_messy_arrays() {
    crosscheck(&[(1, channel(1, 50_000)), (2, channel(2, 30_000)), (7, vec![42])]);
}

#[test]
fn inspect_matches_numpy_on_clean_arrays_near_the_limit() {
    let near: Vec<u64> = (0..1000u64).map(|i| (1u64 << 62) - 1_000_000 + i * 997).collect();
    let clean: Vec<u64> = (0..20_000u64).map(|i| i * i / 7).collect();
    crosscheck(&[(3, near), (4, clean)]);
}
