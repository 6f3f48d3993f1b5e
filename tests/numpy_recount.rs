//! Downstream check on simulated data: NumPy and h5py (tools/independent_count.py, no
//! project code) recount every pair from the raw per-channel files and must agree exactly
//! with the HDF5 tables `tagsieve count` wrote.

mod common;

#[test]
fn simulated_run_counts_agree_exactly_with_numpy() {
    let d = tempfile::tempdir().unwrap();
    let out = common::tagsieve()
        .args(["simulate", "--quiet", "--format", "arrays", "--duration-s", "0.5", "--seed", "21", "-o"])
        .arg(d.path())
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    // simulate --format arrays writes block ab's channels as ab_ch<N>.u64.
    let files: Vec<(u32, std::path::PathBuf)> = (1..=4).map(|ch| (ch, d.path().join(format!("ab_ch{ch}.u64")))).collect();
    assert!(files.iter().all(|(_, p)| p.exists()));
    let delays = [(2, 850), (3, 41_250), (4, 40_600)];
    for window in ["300", "1000"] {
        let h5 = d.path().join(format!("ab-{window}.h5"));
        let mut cmd = common::tagsieve();
        cmd.args(["--quiet", "count", "-w", window, "-o"]).arg(&h5);
        let mut py = common::python();
        py.arg(common::root().join("tools/independent_count.py")).arg(&h5).args(["--window-ps", window]);
        for (ch, p) in &files {
            cmd.arg(format!("{ch}={}", p.display()));
            py.arg("--tags").arg(format!("{ch}={}", p.display()));
        }
        for (ch, ps) in delays {
            cmd.arg("--delay").arg(format!("{ch}={ps}"));
            py.arg("--delay").arg(format!("{ch}={ps}"));
        }
        let out = cmd.output().unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let out = py.output().unwrap();
        let text = String::from_utf8_lossy(&out.stdout);
        assert_eq!(out.status.code(), Some(0), "{text}{}", String::from_utf8_lossy(&out.stderr));
        assert_eq!(text.matches("pair ").count(), 6, "all six pairs recounted: {text}");
    }
}
