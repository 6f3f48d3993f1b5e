//! Every plot kind writes a valid PNG (PNG signature and IHDR per the PNG specification,
//! W3C/ISO 15948) and a well-formed SVG carrying its title; outputs are atomic.
//! Set TAGSIEVE_KEEP_PLOTS=DIR to keep the images for a look.

use std::path::{Path, PathBuf};
use tagsieve::analysis::chsh::{self, SettingCounts};
use tagsieve::analysis::visibility::{fit_visibility, AnglePoint};
use tagsieve::engine::tables::{CoincidenceRow, Estimate, PeakFit, ScanResult, SweepTable};
use tagsieve::output::plot;

/// A delay histogram: Gaussian peak (σ = 60 ps) at +120 ps over a flat 40-count background.
fn scan() -> ScanResult {
    let (half_range_ps, bin_ps) = (2000u64, 20u64);
    let n = (2 * half_range_ps / bin_ps) as usize;
    let counts = (0..n)
        .map(|i| {
            let centre = -(half_range_ps as f64) + (i as f64 + 0.5) * bin_ps as f64;
            (40.0 + 5000.0 * (-(centre - 120.0).powi(2) / (2.0 * 60.0f64.powi(2))).exp()).round() as u64
        })
        .collect();
    let peak = PeakFit {
        delay_ps: 120.0,
        delay_sigma_ps: 0.8,
        fwhm_ps: 2.3548 * 60.0,
        height: 5000.0,
        background: 40.0,
        net_counts: 5000.0 * 60.0 * (2.0 * std::f64::consts::PI).sqrt() / bin_ps as f64,
    };
    ScanResult { a: 1, b: 3, rel_delay_ps: 0, half_range_ps, bin_ps, counts, peak: Some(peak) }
}

fn sweep() -> SweepTable {
    let rows = (1..=30u64)
        .map(|k| {
            let w = 40 * k;
            let signal = 60_000.0 * (1.0 - (-(w as f64 / 200.0).powi(2)).exp());
            let acc = 0.9 * w as f64;
            let c = (signal + acc).round() as u64;
            CoincidenceRow {
                a: 1,
                b: 3,
                rel_delay_ps: 120,
                window_ps: w,
                coincidences: c,
                heralded: c,
                acc_analytic: Estimate { value: acc, sigma: acc.sqrt() * 0.1 },
                acc_measured: Estimate { value: acc, sigma: acc.sqrt() },
                acc_offset_counts: vec![],
                acc_offsets_ps: vec![],
                net: Estimate { value: c as f64 - acc, sigma: (c as f64).sqrt() },
                car: c as f64 / acc,
                acc_agreement_sigma: 0.0,
            }
        })
        .collect();
    SweepTable {
        a: 1,
        b: 3,
        rel_delay_ps: 120,
        rows,
        recommended_window_ps: 400,
        criterion: "max-net-significance".into(),
    }
}

fn report() -> chsh::ChshReport {
    // Expected counts at the standard angles for V = 0.92 (E = V·cos 2(α − β)), 10⁴ per pair.
    let pairs = [("a", "b", 0.0, 22.5), ("a", "b'", 0.0, 67.5), ("a'", "b", 45.0, 22.5), ("a'", "b'", 45.0, 67.5)];
    let blocks: Vec<SettingCounts> = pairs
        .iter()
        .map(|&(la, lb, al, be)| {
            let e = 0.92 * (2.0f64 * (al - be)).to_radians().cos();
            let same = (2500.0 * (1.0 + e)).round() as u64;
            let diff = (2500.0 * (1.0 - e)).round() as u64;
            SettingCounts {
                label_a: la.into(),
                label_b: lb.into(),
                angle_a_deg: al,
                angle_b_deg: be,
                counts: [same + 30, diff + 30, diff + 30, same + 30],
                accidentals: Some([Estimate { value: 30.0, sigma: 2.0 }; 4]),
                live_time_s: None,
            }
        })
        .collect();
    chsh::evaluate(&blocks).unwrap()
}

fn angle_points() -> Vec<AnglePoint> {
    (0..=12)
        .map(|k| {
            let th = 15.0 * k as f64;
            let n = 3000.0 * (1.0 + 0.95 * (2.0 * (th - 10.0f64).to_radians()).cos());
            // A deterministic ±√N wobble so χ² is not zero.
            let wobble = if k % 2 == 0 { 1.0 } else { -1.0 } * n.sqrt();
            AnglePoint { angle_deg: th, counts: (n + wobble).max(0.0).round() as u64 }
        })
        .collect()
}

/// Width and height from a PNG's IHDR chunk (bytes 16..24 after the 8-byte signature
/// and the chunk's length and type), or a failure message.
fn png_size(bytes: &[u8]) -> (u32, u32) {
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n", "PNG signature");
    assert_eq!(&bytes[12..16], b"IHDR", "first chunk is IHDR");
    let w = u32::from_be_bytes(bytes[16..20].try_into().unwrap());
    let h = u32::from_be_bytes(bytes[20..24].try_into().unwrap());
    assert_eq!(&bytes[bytes.len() - 8..bytes.len() - 4], b"IEND", "last chunk is IEND");
    (w, h)
}

fn check_png(p: &Path) {
    let (w, h) = png_size(&std::fs::read(p).unwrap());
    assert!(w >= 600 && h >= 400, "{}: {w}×{h}", p.display());
}

fn check_svg(p: &Path, title: &str) {
    let s = std::fs::read_to_string(p).unwrap();
    assert!(s.contains("<svg") && s.trim_end().ends_with("</svg>"), "{}: not an SVG document", p.display());
    assert_eq!(s.matches("<text").count(), s.matches("</text>").count(), "unbalanced <text>");
    assert!(s.contains(title), "{}: title {title:?} missing", p.display());
}

/// Where to write: a temporary directory, or TAGSIEVE_KEEP_PLOTS/`name` when set
/// (one folder per test: tests run in parallel and each checks its folder for temporaries).
fn out_dir(name: &str) -> (Option<tempfile::TempDir>, PathBuf) {
    match std::env::var_os("TAGSIEVE_KEEP_PLOTS") {
        Some(d) => {
            let d = PathBuf::from(d).join(name);
            std::fs::create_dir_all(&d).unwrap();
            (None, d)
        }
        None => {
            let t = tempfile::tempdir().unwrap();
            let p = t.path().to_path_buf();
            (Some(t), p)
        }
    }
}

fn no_partials(dir: &Path) {
    for e in std::fs::read_dir(dir).unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().into_owned();
        assert!(!name.ends_with(".partial"), "leftover temporary {name}");
    }
}

/// Draw `name`.png and `name`.svg with `draw`, then check both and that no temporary is left.
fn check_both(name: &str, title: &str, draw: impl Fn(&Path)) {
    let (_t, d) = out_dir(name);
    let (png, svg) = (d.join(format!("{name}.png")), d.join(format!("{name}.svg")));
    draw(&png);
    draw(&svg);
    check_png(&png);
    check_svg(&svg, title);
    no_partials(&d);
}

#[test]
fn scan_plots() {
    let s = scan();
    check_both("scan", "Delay scan, channels 1 and 3", |p| plot::plot_scan(&s, Some(400), false, p, true).unwrap());
    check_both("scan_log", "Delay scan, channels 1 and 3", |p| plot::plot_scan(&s, None, true, p, true).unwrap());
}

#[test]
fn sweep_plots() {
    check_both("sweep", "Window sweep, channels 1 and 3", |p| plot::plot_sweep(&sweep(), p, true).unwrap());
}

#[test]
fn correlation_plots() {
    let r = report();
    check_both("chsh", "CHSH correlations: S = ", |p| plot::plot_correlations(&r, Some(plot::ModelLine { visibility: 0.92, source: "simulated" }), p, true).unwrap());
    check_both("chsh_plain", "CHSH correlations: S = ", |p| plot::plot_correlations(&r, None, p, true).unwrap());
}

#[test]
fn visibility_plots() {
    let pts = angle_points();
    let f = fit_visibility("H/V basis", &pts).unwrap();
    check_both("vis", "Visibility fit: H/V basis", |p| plot::plot_visibility(&f, &pts, p, true).unwrap());
}

#[test]
fn bad_destinations_are_usage_errors() {
    let t = tempfile::tempdir().unwrap();
    let e = plot::plot_sweep(&sweep(), &t.path().join("sweep.jpeg"), false).unwrap_err();
    assert_eq!(e.exit_code(), 2, "{e}");
    let p = t.path().join("sweep.png");
    plot::plot_sweep(&sweep(), &p, false).unwrap();
    let e = plot::plot_sweep(&sweep(), &p, false).unwrap_err();
    assert!(matches!(e, tagsieve::Error::OutputExists(_)), "{e}");
    let mut empty = scan();
    empty.counts.clear();
    assert_eq!(plot::plot_scan(&empty, None, false, &t.path().join("x.png"), false).unwrap_err().exit_code(), 2);
    assert_eq!(std::fs::read_dir(t.path()).unwrap().count(), 1, "only sweep.png remains");
}
