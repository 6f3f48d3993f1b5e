//! The delay scan on simulated pairs: it recovers the configured delay within one bin, and
//! the peak's FWHM matches two Gaussian jitters in quadrature.

use tagsieve::engine::{self, scan, ScanConfig};
use tagsieve::simulate::{self, Setting, SourceModel};

#[test]
fn scan_recovers_delays_and_jitter_width() {
    let detectors = simulate::scenario_detectors();
    let tags = simulate::simulate_block(&SourceModel::scenario(), &detectors, Setting { alpha_deg: 0.0, beta_deg: 0.0 }, 4_000_000_000_000, 17).unwrap();
    let bin_ps = 10;
    let cfg = ScanConfig { pairs: vec![(1, 3), (2, 4)], delays: Default::default(), half_range_ps: 60_000, bin_ps };
    let scans = engine::scan_block(&tags, &cfg).unwrap();
    for s in &scans {
        let (da, db) = (&detectors[s.a as usize - 1], &detectors[s.b as usize - 1]);
        let p = s.peak.expect("a coincidence peak");
        let expect_delta = db.delay_ps as f64 - da.delay_ps as f64;
        assert!((p.delay_ps - expect_delta).abs() <= bin_ps as f64, "pair {}:{} delay {} vs {}", s.a, s.b, p.delay_ps, expect_delta);
        // Δ of a pair is the difference of two independent Gaussian jitters: σ = √(σA² + σB²),
        // and a Gaussian's FWHM is 2√(2 ln 2)·σ (common practice, no source).
        let sigma = (da.jitter_sigma_ps.powi(2) + db.jitter_sigma_ps.powi(2)).sqrt();
        let fwhm = 2.0 * (2.0 * 2f64.ln()).sqrt() * sigma;
        assert!((p.fwhm_ps - fwhm).abs() < 0.10 * fwhm, "pair {}:{} FWHM {} vs {}", s.a, s.b, p.fwhm_ps, fwhm);
    }
    // The proposal places every channel, through the other analyzer output where needed.
    let all = engine::scan_block(&tags, &ScanConfig { pairs: vec![], ..cfg }).unwrap();
    let d = scan::propose_delays(&all, 1, &[1, 2, 3, 4]);
    assert!(d.not_found.is_empty(), "{:?}", d.not_found);
    for det in &detectors {
        let truth = det.delay_ps as i64 - detectors[0].delay_ps as i64;
        assert!((d.get(det.channel) - truth).abs() <= bin_ps as i64, "channel {}: {} vs {truth}", det.channel, d.get(det.channel));
    }
}
