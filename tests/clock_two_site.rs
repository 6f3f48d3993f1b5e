//! Two recorders, two clocks (issue 17): the simulator's two-site runs, the clock fit from no
//! prior, and counting with the fitted map, each against a reference outside the fit.

mod common;

use common::tagsieve;
use std::path::Path;

fn read_u64(p: &Path) -> Vec<u64> {
    std::fs::read(p).unwrap().chunks_exact(8).map(|c| u64::from_le_bytes(c.try_into().unwrap())).collect()
}

/// `simulate --second-site` re-stamps only the listed channels, writes the true map, and is
/// deterministic (same seed, same bytes). The first-site channels equal a one-recorder run
/// of the same seed, and the second-site tags sit at t·(1+ε) + offset of the one-recorder
/// tags to within the wander (the defining formula of the issue; wander ≤ 1 µs over 1 s at
/// σ_y(1 s) = 1e-10 is far above what a random walk of that size reaches: common practice,
/// no source).
#[test]
fn two_site_simulation_restamps_only_the_second_site() {
    let d = tempfile::tempdir().unwrap();
    let sim = |dir: &str, two: bool| {
        let mut c = tagsieve();
        c.args(["simulate", "-q", "--format", "arrays", "--duration-s", "1", "--seed", "5", "--series", "22.5", "-o"]);
        c.arg(d.path().join(dir));
        if two {
            c.args(["--second-site", "3,4", "--clock-ppm", "-23.5", "--clock-offset-s", "0.61"]);
        }
        assert!(c.status().unwrap().success());
    };
    sim("one", false);
    sim("two", true);
    sim("again", true);
    let f = |dir: &str, name: &str| d.path().join(dir).join(name);
    assert_eq!(read_u64(&f("one", "ab0_ch1.u64")), read_u64(&f("two", "ab0_ch1.u64")));
    assert_eq!(std::fs::read(f("two", "ab0_ch3.u64")).unwrap(), std::fs::read(f("again", "ab0_ch3.u64")).unwrap());
    assert_eq!(std::fs::read(f("two", "ab0.clock-true.toml")).unwrap(), std::fs::read(f("again", "ab0.clock-true.toml")).unwrap());
    let (one, two) = (read_u64(&f("one", "ab0_ch3.u64")), read_u64(&f("two", "ab0_ch3.u64")));
    assert_eq!(one.len(), two.len());
    for (t, s) in one.iter().zip(&two) {
        let want = *t as f64 * (1.0 - 23.5e-6) + 0.61e12;
        assert!((*s as f64 - want).abs() < 1e6, "{t} -> {s}, expected about {want}");
    }
    let text = std::fs::read_to_string(f("two", "ab0.clock-true.toml")).unwrap();
    assert!(text.contains("site_channels = [3, 4]") && text.contains("[[knots]]"));
}

mod fit {
    use tagsieve::analysis::clock_fit::{fit_clock, FitConfig, SiteTags};
    use tagsieve::tags::clock::ClockMap;
    use tagsieve::simulate::clocks::{restamp_second_site, ClockStep, SiteClock};
    use super::common;
    use tagsieve::simulate::{scenario_detectors, simulate_block, DetectorModel, Setting, SourceModel};
    use tagsieve::ChannelTags;

    /// The field deployment of shared/scenario.md: Rowan's detectors (3, 4) at efficiency
    /// 0.08 / 0.075 behind 11.4 km of fibre (57 µs more delay).
    pub fn field_detectors() -> Vec<DetectorModel> {
        let mut d = scenario_detectors();
        d[2].efficiency = 0.08;
        d[3].efficiency = 0.075;
        d[2].delay_ps += 57_000_000;
        d[3].delay_ps += 57_000_000;
        d
    }

    pub struct Run {
        pub two_clocks: Vec<ChannelTags<'static>>,
        pub truth: ClockMap,
        pub detectors: Vec<DetectorModel>,
    }

    pub fn run(duration_s: f64, clock: &SiteClock, seed: u64) -> Run {
        let detectors = field_detectors();
        let dur = (duration_s * 1e12) as u64;
        let set = Setting { alpha_deg: 0.0, beta_deg: 22.5 };
        let one_clock = simulate_block(&SourceModel::scenario(), &detectors, set, dur, seed).unwrap();
        let mut two_clocks = one_clock;
        let truth = restamp_second_site(&mut two_clocks, &[3, 4], clock, dur).unwrap();
        Run { two_clocks, truth, detectors }
    }

    pub fn sites(r: &Run) -> (SiteTags, SiteTags) {
        let part = |chs: &[u32]| {
            let v: Vec<(&[u64], i64)> = r
                .two_clocks
                .iter()
                .filter(|c| chs.contains(&c.channel))
                .map(|c| (c.times_ps.as_ref(), r.detectors.iter().find(|d| d.channel == c.channel).unwrap().delay_ps as i64))
                .collect();
            SiteTags::merge(&v)
        };
        (part(&[1, 2]), part(&[3, 4]))
    }

    /// Map error (fit − truth) sampled every 1 ms over the fitted span, outside lost spans.
    pub fn map_errors(fit: &ClockMap, truth: &ClockMap) -> Vec<f64> {
        let (lo, hi) = (fit.knots[0].site_ps, fit.knots.last().unwrap().site_ps);
        let (mut p, mut q) = (0, 0);
        let mut out = Vec::new();
        let mut t = lo;
        while t <= hi {
            if !fit.lost.iter().any(|s| s.start_ps <= t && t < s.end_ps) {
                if let (Some(a), Some(b)) = (fit.map_ps(t, &mut p), truth.map_ps(t, &mut q)) {
                    out.push((a - b) as f64);
                }
            }
            t += 1_000_000_000;
        }
        out
    }

    pub fn rms(v: &[f64]) -> f64 {
        (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt()
    }

    /// The coarse grid's frequency step (ppm): the peak may sit in the true cell or a neighbour.
    fn cfg_step() -> f64 {
        FitConfig::default().ppm_step
    }

    fn clock(ppm: f64, offset_s: f64, adev_1s: f64, step: Option<ClockStep>) -> SiteClock {
        SiteClock { ppm, start_offset_ps: offset_s * 1e12, adev_1s, step, seed: 11 }
    }

    /// Pair rate of the field deployment: 250 000 pairs/s × mean Larch efficiency 0.175 ×
    /// mean Rowan efficiency 0.0775 ≈ 3 390 /s (shared/scenario.md; the issue's "about 3 400").
    const PAIR_RATE_HZ: f64 = 250_000.0 * 0.175 * 0.0775;
    /// Pair jitter: the mean of σ_A² + σ_B² over the four detector pairs (45/50 ps at Larch,
    /// 40/55 ps at Rowan): independent Gaussian jitters add in quadrature (common practice).
    fn pair_jitter_ps() -> f64 {
        ((45f64.powi(2) + 50f64.powi(2)) / 2.0 + (40f64.powi(2) + 55f64.powi(2)) / 2.0).sqrt()
    }

    /// 60 s at the field deployment's rates, ε = −37.3 ppm and offset +0.73 s (inside ±50 ppm
    /// and ±1 s, searched with no prior), wander σ_y(1 s) = 1e-10. The issue's figures: map
    /// error RMS ≤ 5 ps, nowhere above 25 ps, against the simulator's true map.
    #[test]
    fn offset_and_frequency_from_no_prior_and_map_error() {
        let (ppm, off_s) = (-37.3, 0.73);
        let r = run(60.0, &clock(ppm, off_s, 1e-10, None), 21);
        let (a, b) = sites(&r);
        let (m, c) = fit_clock(&a, &b, vec![3, 4], &FitConfig::default()).unwrap();
        assert!((c.ppm - ppm).abs() <= cfg_step() + 1e-9, "coarse ε {} ppm, true {ppm}", c.ppm);
        // the coarse line and the true line agree at the stretch's centre to within 2 bins
        // plus the smear of one frequency step over half the stretch
        let tc = c.stretch_start_ps as f64 + c.stretch_ps as f64 / 2.0;
        let (fit_at, true_at) = (c.offset_ps + tc * (1.0 + c.ppm * 1e-6), off_s * 1e12 + tc * (1.0 + ppm * 1e-6));
        assert!((fit_at - true_at).abs() <= 2.0 * c.bin_ps as f64 + cfg_step() * 1e-6 * c.stretch_ps as f64 / 2.0, "coarse offset {fit_at} vs {true_at}");
        assert!(m.steps.is_empty() && m.lost.is_empty(), "steps {:?} lost {:?}", m.steps, m.lost);
        let e = map_errors(&m, &r.truth);
        let mx = e.iter().fold(0.0f64, |a, b| a.max(b.abs()));
        eprintln!("60 s, ε {ppm} ppm, σ_y 1e-10: {} knots, map error RMS {:.2} ps, max {mx} ps over {} points", m.knots.len(), rms(&e), e.len());
        assert!(e.len() > 55_000, "the map covers the run: {} ms", e.len());
        assert!(rms(&e) <= 5.0 && mx <= 25.0, "RMS {} max {mx}", rms(&e));
    }

    /// Wander σ_y(1 s) = 1e-9: RMS within 1.5× the optimal tracker's steady-state error.
    /// Derivation (from memory): phase x with ẋ = y, ẏ = w, E[w²] = q (random-walk frequency,
    /// σ_y²(τ) = qτ/3, so q = 3σ_y(1 s)²/s), observed as z = x + v with white noise of density
    /// r = σ_jitter²/R_pairs. The steady-state Riccati equation 0 = AP + PAᵀ + Q − PHᵀHP/r with
    /// A = [[0,1],[0,0]], Q = diag(0, q), H = [1, 0] gives P₁₂ = √(qr), P₂₂ = √2·q^{3/4}r^{1/4},
    /// P₁₁ = √2·q^{1/4}r^{3/4}: the phase error σ² = √2·q^{1/4}·r^{3/4} (Kalman–Bucy filter).
    #[test]
    fn map_error_with_strong_wander_is_near_the_optimal_tracker() {
        let adev = 1e-9;
        let r = run(60.0, &clock(10.0, -0.4, adev, None), 22);
        let (a, b) = sites(&r);
        let (m, _) = fit_clock(&a, &b, vec![3, 4], &FitConfig::default()).unwrap();
        let q = 3.0 * adev * adev; // 1/s
        let rr = (pair_jitter_ps() * 1e-12).powi(2) / PAIR_RATE_HZ; // s²·s
        let sigma_ps = (2f64.sqrt() * q.powf(0.25) * rr.powf(0.75)).sqrt() * 1e12;
        let e = map_errors(&m, &r.truth);
        eprintln!("σ_y 1e-9: map error RMS {:.2} ps, optimal tracker {sigma_ps:.2} ps; steps {:?}", rms(&e), m.steps);
        assert!(rms(&e) <= 1.5 * sigma_ps, "RMS {} vs 1.5 × {sigma_ps}", rms(&e));
        assert!(m.steps.is_empty());
    }

    /// A 3 µs forward step half-way: found within one segment (400 pairs at the model pair
    /// rate) with its size, and the map still within the issue's figures elsewhere.
    #[test]
    fn a_step_is_found_within_one_segment() {
        let c = clock(10.0, 0.4, 1e-10, Some(ClockStep { at_s: 30.0, size_ps: 3.0e6 }));
        let r = run(60.0, &c, 23);
        let (a, b) = sites(&r);
        let (m, _) = fit_clock(&a, &b, vec![3, 4], &FitConfig::default()).unwrap();
        assert_eq!(m.steps.len(), 1, "steps {:?}", m.steps);
        let true_site_ps = 30.0e12 * (1.0 + 10e-6) + 0.4e12;
        let segment_ps = 400.0 / PAIR_RATE_HZ * 1e12;
        let s = m.steps[0];
        eprintln!("step {s:?}; true at {true_site_ps} ps, segment {segment_ps} ps");
        assert!((s.at_site_ps as f64 - true_site_ps).abs() <= segment_ps, "step at {}", s.at_site_ps);
        assert!((s.size_ps - 3.0e6).abs() < 100.0, "size {}", s.size_ps);
        let e = map_errors(&m, &r.truth);
        assert!(rms(&e) <= 5.0, "RMS {}", rms(&e));
    }

    /// A second site fed by an independent source (another seed): the fit refuses, saying
    /// what it searched and the best peak's significance. The max of M Gaussian cells is
    /// about √(2 ln M) (common practice, no source), below the required threshold.
    #[test]
    fn independent_second_source_is_refused() {
        let c = clock(10.0, 0.4, 1e-10, None);
        let (r1, r2) = (run(6.0, &c, 31), run(6.0, &c, 32));
        let (a, _) = sites(&r1);
        let (_, b) = sites(&r2);
        let e = fit_clock(&a, &b, vec![3, 4], &FitConfig::default()).unwrap_err();
        let msg = e.to_string();
        eprintln!("{msg}");
        assert_eq!(e.exit_code(), 2);
        assert!(msg.contains("no significant correlation peak") && msg.contains("±1 s") && msg.contains("±50 ppm"), "{msg}");
        assert!(msg.contains("µs bins") && msg.contains("σ required"), "{msg}");
    }

    /// NumPy's FFT cross-correlation of the same streams, binned by NumPy from the raw times
    /// (first site: t − delay inside the stretch; second site: (t − delay)/(1 + ε) at the
    /// found ε), puts the peak in the same lag bin as the coarse search.
    #[test]
    fn numpy_cross_correlation_gives_the_same_coarse_bin() {
        let r = run(10.0, &clock(-12.0, 0.55, 1e-10, None), 41);
        let (a, b) = sites(&r);
        let cfg = FitConfig::default();
        let c = tagsieve::analysis::clock_fit::coarse_search(&a, &b, &cfg).unwrap();
        let d = tempfile::tempdir().unwrap();
        let dump = |name: &str, v: Vec<i64>| {
            let bytes: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
            std::fs::write(d.path().join(name), bytes).unwrap();
        };
        dump("a.i64", a.tags.iter().map(|t| t.0 - t.1).collect());
        dump("b.i64", b.tags.iter().map(|t| t.0 - t.1).collect());
        let script = r#"
import sys, numpy as np
d, s0, L, R, bw, ppm = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), float(sys.argv[4]), float(sys.argv[5]), float(sys.argv[6])
a = np.fromfile(d + '/a.i64', dtype='<i8'); b = np.fromfile(d + '/b.i64', dtype='<i8')
a = a[(a >= s0) & (a < s0 + L)].astype(float)
b = b.astype(float) / (1 + ppm * 1e-6)
origin = s0 - R
n = 1 << int(np.ceil(np.log2((L + 2 * R) / bw + 2)))
ha = np.bincount(np.floor((a - origin) / bw).astype(np.int64), minlength=n)[:n]
kb = np.floor((b - origin) / bw).astype(np.int64)
hb = np.bincount(kb[(kb >= 0) & (kb < n)], minlength=n)[:n]
c = np.fft.irfft(np.conj(np.fft.rfft(ha)) * np.fft.rfft(hb), n)
m = int(np.ceil(R / bw))
lags = np.arange(-m, m + 1)
print(lags[np.argmax(c[lags % n])])
"#;
        let out = common::python()
            .arg("-c")
            .arg(script)
            .arg(d.path())
            .args([c.stretch_start_ps.to_string(), c.stretch_ps.to_string(), format!("{}", cfg.offset_range_ps), format!("{}", c.bin_ps), format!("{}", c.ppm)])
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let lag: i64 = String::from_utf8_lossy(&out.stdout).trim().parse().unwrap();
        assert_eq!(lag, c.lag_bins, "NumPy lag {lag}, ours {}", c.lag_bins);
    }
}

/// The command end to end: a two-site run from `simulate`, fitted by `clock-fit` with the
/// run's true delays; the clock file is written and its map agrees with the simulator's true
/// map to within the issue's 25 ps. Then the same first site with the second site's channels
/// taken from an independent run (another seed): exit 2, the range and significance named,
/// no clock file.
#[test]
fn clock_fit_command_writes_a_map_or_refuses_clearly() {
    let d = tempfile::tempdir().unwrap();
    let sim = |dir: &str, seed: &str| {
        let mut c = tagsieve();
        c.args(["simulate", "-q", "--format", "arrays", "--duration-s", "8", "--series", "22.5", "--seed", seed]);
        c.args(["--detector", "3:efficiency=0.08,delay_ps=57041250", "--detector", "4:efficiency=0.075,delay_ps=57040600"]);
        c.args(["--second-site", "3,4", "--clock-ppm", "7.3", "--clock-offset-s", "0.4", "-o"]);
        c.arg(d.path().join(dir));
        assert!(c.status().unwrap().success());
    };
    sim("r", "1");
    sim("other", "2");
    let p = |dir: &str, f: &str| format!("{}", d.path().join(dir).join(f).display());
    let delays = ["--delay", "2=850", "--delay", "3=57041250", "--delay", "4=57040600"];
    let out_file = d.path().join("clock.toml");
    let out = tagsieve()
        .args(["clock-fit", "--second-site", "3,4"])
        .args(delays)
        .args([format!("1={}", p("r", "ab0_ch1.u64")), format!("2={}", p("r", "ab0_ch2.u64")), format!("3={}", p("r", "ab0_ch3.u64")), format!("4={}", p("r", "ab0_ch4.u64"))])
        .arg("-o")
        .arg(&out_file)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("coarse: offset") && text.contains("+7.3"), "{text}");
    let fit = tagsieve::tags::clock::ClockMap::load(&out_file).unwrap();
    let truth = tagsieve::tags::clock::ClockMap::load(&d.path().join("r").join("ab0.clock-true.toml")).unwrap();
    let e = fit::map_errors(&fit, &truth);
    assert!(e.len() > 7_000 && e.iter().all(|x| x.abs() <= 25.0), "{} points, max {}", e.len(), e.iter().fold(0.0f64, |a, b| a.max(b.abs())));

    let refused = d.path().join("none.toml");
    let out = tagsieve()
        .args(["clock-fit", "--second-site", "3,4"])
        .args(delays)
        .args([format!("1={}", p("r", "ab0_ch1.u64")), format!("2={}", p("r", "ab0_ch2.u64")), format!("3={}", p("other", "ab0_ch3.u64")), format!("4={}", p("other", "ab0_ch4.u64"))])
        .arg("-o")
        .arg(&refused)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("no significant correlation peak") && err.contains("±1 s") && err.contains("σ required"), "{err}");
    assert!(!refused.exists());
}

/// Counting with the fitted map: the same seed simulated on one clock and on two; at
/// w = 500 ps the two-clock run counted with the fitted map keeps ≥ 99.5 % of the one-clock
/// run's coincidences on every pair (the issue's figure), and the counts are bit-identical
/// on 1 and 2 worker threads (the project's exactness rule).
#[test]
fn counting_with_the_map_keeps_the_coincidences() {
    let d = tempfile::tempdir().unwrap();
    let sim = |dir: &str, two: bool| {
        let mut c = tagsieve();
        c.args(["simulate", "-q", "--format", "arrays", "--duration-s", "8", "--series", "22.5", "--seed", "3"]);
        c.args(["--detector", "3:efficiency=0.08,delay_ps=57041250", "--detector", "4:efficiency=0.075,delay_ps=57040600"]);
        if two {
            c.args(["--second-site", "3,4", "--clock-ppm", "7.3", "--clock-offset-s", "0.4"]);
        }
        c.arg("-o").arg(d.path().join(dir));
        assert!(c.status().unwrap().success());
    };
    sim("one", false);
    sim("two", true);
    let inputs = |dir: &str| -> Vec<String> { (1..=4).map(|ch| format!("{ch}={}", d.path().join(dir).join(format!("ab0_ch{ch}.u64")).display())).collect() };
    let delays = ["--delay", "2=850", "--delay", "3=57041250", "--delay", "4=57040600"];
    let clock = d.path().join("clock.toml");
    let fit = tagsieve().args(["clock-fit", "-q", "--second-site", "3,4"]).args(delays).args(inputs("two")).arg("-o").arg(&clock).output().unwrap();
    assert!(fit.status.success(), "{}", String::from_utf8_lossy(&fit.stderr));
    let count = |dir: &str, threads: &str, with_clock: bool| -> Vec<u64> {
        let mut c = tagsieve();
        c.args(["count", "--json", "-w", "500", "--no-offpeak", "--pairs", "1:3,1:4,2:3,2:4", "--threads", threads]).args(delays).args(inputs(dir));
        if with_clock {
            c.arg("--clock").arg(&clock);
        }
        let out = c.output().unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        common::doc_rows(&v, "/blocks/block/coincidences").iter().map(|r| r["coincidences"].as_u64().unwrap()).collect()
    };
    let one = count("one", "1", false);
    let mapped = count("two", "1", true);
    assert_eq!(mapped, count("two", "2", true), "1 and 2 threads");
    let without = count("two", "1", false);
    eprintln!("one clock {one:?}; two clocks with the map {mapped:?}; without {without:?}");
    for (o, m) in one.iter().zip(&mapped) {
        assert!(*o > 1000 && (*m as f64) >= 0.995 * *o as f64, "one clock {o}, mapped {m}");
    }
    assert!(without.iter().sum::<u64>() * 100 < one.iter().sum::<u64>(), "without the map the pairs are lost");
}
