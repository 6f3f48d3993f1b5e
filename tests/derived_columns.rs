//! Every derived column of the count, sweep and chsh tables recomputed outside the project:
//! tools/recompute_derived.py (NumPy/SciPy/h5py, no project code) rebuilds the accidentals
//! (analytic and measured, with σ), their agreement, net, σ_net, CAR, E, σ_E, S, σ_S and p
//! from the file's own integer counts and from slice counts of the raw tags, and must agree
//! to 1e-12 relative. Units are asserted column by column in the same script.

mod common;
use common::SplitMix64;
use std::path::{Path, PathBuf};

/// Exponential gaps of mean `mean_gap_ps(t)` (a drifting rate) from 0 to `span_ps`.
fn drifting_poisson(rng: &mut SplitMix64, span_ps: f64, mean_gap_ps: impl Fn(f64) -> f64) -> Vec<u64> {
    let mut t = 0.0;
    let mut out = Vec::new();
    loop {
        t += -rng.uniform_open().ln() * mean_gap_ps(t);
        if t >= span_ps {
            return out;
        }
        out.push(t as u64);
    }
}

/// Three channels over 7.3 ms: channel 1 with a rate rising threefold (so the time slices
/// matter), channel 2 = a third of channel 1 shifted by 850 ps with ±200 ps spread plus its
/// own background, channel 3 independent.
fn write_tags(dir: &Path) -> Vec<(u32, PathBuf)> {
    let span = 7.3e9;
    let mut rng = SplitMix64(0x7A65_1234);
    let one = drifting_poisson(&mut rng, span, |t| 600_000.0 / (1.0 + 2.0 * t / span));
    let mut two = Vec::new();
    for &t in &one {
        if rng.uniform() < 1.0 / 3.0 {
            two.push(t + 650 + (rng.uniform() * 400.0) as u64);
        }
    }
    two.extend(drifting_poisson(&mut rng, span, |_| 900_000.0));
    two.sort_unstable();
    let three = drifting_poisson(&mut rng, span, |t| 400_000.0 + 0.1 * t);
    [(1, one), (2, two), (3, three)]
        .into_iter()
        .map(|(ch, v)| {
            let p = dir.join(format!("ch{ch}.u64"));
            std::fs::write(&p, v.iter().flat_map(|t| t.to_le_bytes()).collect::<Vec<u8>>()).unwrap();
            (ch, p)
        })
        .collect()
}

fn run_ok(cmd: &mut std::process::Command) {
    let out = cmd.output().unwrap();
    assert!(out.status.success(), "{:?}: {}", cmd, String::from_utf8_lossy(&out.stderr));
}

/// Run the outside recomputation; it prints what it checked or the differences.
fn recompute(h5: &Path, tags: &[(u32, PathBuf)], manifest: Option<&Path>) -> String {
    let mut py = common::python();
    py.arg(common::root().join("tools/recompute_derived.py")).arg(h5);
    for (ch, p) in tags {
        py.arg("--tags").arg(format!("{ch}={}", p.display()));
    }
    if let Some(m) = manifest {
        py.arg("--manifest").arg(m);
    }
    let out = py.output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert_eq!(out.status.code(), Some(0), "{text}{}", String::from_utf8_lossy(&out.stderr));
    text
}

fn inputs(tags: &[(u32, PathBuf)]) -> Vec<String> {
    tags.iter().map(|(ch, p)| format!("{ch}={}", p.display())).collect()
}

#[test]
fn count_table_derived_columns_match_numpy() {
    let d = tempfile::tempdir().unwrap();
    let tags = write_tags(d.path());
    // An odd and an even window (2⌊w/2⌋ + 1 differs from w only for even w), slices of
    // 1.7 ms so the last slice is shorter.
    for window in ["1001", "1000"] {
        let h5 = d.path().join(format!("count-{window}.h5"));
        run_ok(common::tagsieve().args(["--quiet", "count", "-w", window, "--slice-s", "0.0017", "--delay", "2=850", "-o"]).arg(&h5).args(inputs(&tags)));
        let text = recompute(&h5, &tags, None);
        assert!(text.contains("every derived value agrees: block"), "{text}");
    }
}

#[test]
fn sweep_table_derived_columns_match_numpy() {
    let d = tempfile::tempdir().unwrap();
    let tags = write_tags(d.path());
    let h5 = d.path().join("sweep.h5");
    run_ok(
        common::tagsieve()
            .args(["--quiet", "sweep", "--windows-ps", "100,555,1000,2001,4000", "--slice-s", "0.0017", "--delay", "2=850", "-o"])
            .arg(&h5)
            .args(inputs(&tags)),
    );
    let text = recompute(&h5, &tags, None);
    assert!(text.contains("every derived value agrees: block"), "{text}");
}

#[test]
fn chsh_derived_columns_match_numpy_for_both_setups() {
    // Four detectors (E from counts) and one detector per side (E from rates, live times).
    for setup in ["four", "one-per-side"] {
        let d = tempfile::tempdir().unwrap();
        let out = common::tagsieve()
            .args(["simulate", "--quiet", "--format", "arrays", "--seed", "31", "--duration-s", "0.05", "--setup", setup, "--out"])
            .arg(d.path())
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let manifest = d.path().join("run.toml");
        let h5 = d.path().join("chsh.h5");
        run_ok(common::tagsieve().args(["--quiet", "chsh", "-w", "600", "--slice-s", "0.013", "-o"]).arg(&h5).arg(&manifest));
        let text = recompute(&h5, &[], Some(&manifest));
        assert!(text.contains("chsh") && text.contains("block ab"), "{setup}: {text}");
    }
}
