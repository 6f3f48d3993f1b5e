//! End-to-end checks of the analysis layer against published formulas, textbook values
//! and SciPy. Synthetic counts come from a small PRNG defined here (fixed seeds).

mod common;
use common::SplitMix64;

use std::f64::consts::{FRAC_PI_2, PI, SQRT_2};
use tagsieve::analysis::bell3::{self, Convention};
use tagsieve::analysis::chsh::{self, SettingCounts};
use tagsieve::analysis::stats;
use tagsieve::analysis::visibility::{fit_visibility, AnglePoint};
use tagsieve::engine::tables::Estimate;


/// The standard CHSH angles in degrees (CHSH, PRL 23, 880 (1969)): a, a', b, b'.
const A: f64 = 0.0;
const A2: f64 = 45.0;
const B: f64 = 22.5;
const B2: f64 = 67.5;

fn settings() -> [(&'static str, &'static str, f64, f64); 4] {
    [("a", "b", A, B), ("a", "b'", A, B2), ("a'", "b", A2, B), ("a'", "b'", A2, B2)]
}

fn block(la: &str, lb: &str, alpha: f64, beta: f64, counts: [u64; 4]) -> SettingCounts {
    SettingCounts {
        label_a: la.into(),
        label_b: lb.into(),
        angle_a_deg: alpha,
        angle_b_deg: beta,
        counts,
        accidentals: None,
        live_time_s: None,
    }
}

/// P(x, y | α, β) = (1 + x·y·V·cos 2(α − β))/4 for (|HH⟩+|VV⟩)/√2 with visibility V,
/// cells ++, +−, −+, −−.
fn quantum_probs(alpha_deg: f64, beta_deg: f64, v: f64) -> [f64; 4] {
    let e = v * (2.0 * (alpha_deg - beta_deg).to_radians()).cos();
    [(1.0 + e) / 4.0, (1.0 - e) / 4.0, (1.0 - e) / 4.0, (1.0 + e) / 4.0]
}

fn quantum_blocks(rng: &mut SplitMix64, n: u64, v: f64) -> Vec<SettingCounts> {
    settings()
        .iter()
        .map(|&(la, lb, al, be)| block(la, lb, al, be, rng.multinomial4(n, quantum_probs(al, be, v))))
        .collect()
}

#[test]
fn quantum_counts_give_s_near_two_root_two_v() {
    // Expected S = 2√2·V at the standard angles: CHSH, Phys. Rev. Lett. 23, 880 (1969);
    // 2√2 is the quantum bound, Cirel'son, Lett. Math. Phys. 4, 93 (1980).
    let v = 0.95;
    let mut rng = SplitMix64(0x5EED_0001);
    let r = chsh::evaluate(&quantum_blocks(&mut rng, 20_000, v)).unwrap();
    let p = r.raw.primary();
    let expected = 2.0 * SQRT_2 * v;
    assert!((p.s - expected).abs() < 3.0 * p.sigma, "S = {} ± {}, expected {expected}", p.s, p.sigma);
    assert!(p.sigma > 0.005 && p.sigma < 0.02, "σ_S = {}", p.sigma);
    assert_eq!(r.raw.max_abs, chsh::PRIMARY_MINUS_TERM, "the primary convention is the maximal one here");
    assert!(p.violation_sigma > 30.0 && p.p_value < 1e-100);
    // Each E within 4σ of V·cos 2(α − β) (same source).
    for pc in &r.pairs {
        let e = v * (2.0 * (pc.angle_a_deg - pc.angle_b_deg).to_radians()).cos();
        assert!((pc.raw.e - e).abs() < 4.0 * pc.raw.sigma, "{}{}: {} vs {e}", pc.label_a, pc.label_b, pc.raw.e);
    }
}

#[test]
fn accidental_correction_restores_the_signal_value() {
    // A flat background of b counts per cell adds to every combination; subtracting it
    // recovers E = V·cos 2(α − β) (same sources as above); the raw S is pulled towards 0.
    let (v, bg) = (0.98, 800.0);
    let mut rng = SplitMix64(0x5EED_0002);
    let blocks: Vec<SettingCounts> = quantum_blocks(&mut rng, 20_000, v)
        .into_iter()
        .map(|mut b| {
            for c in b.counts.iter_mut() {
                *c += rng.poisson(bg);
            }
            b.accidentals = Some([Estimate { value: bg, sigma: 5.0 }; 4]);
            b
        })
        .collect();
    let r = chsh::evaluate(&blocks).unwrap();
    let cor = r.corrected.as_ref().expect("accidentals were given").primary();
    let expected = 2.0 * SQRT_2 * v;
    assert!((cor.s - expected).abs() < 3.0 * cor.sigma, "corrected S = {} ± {}", cor.s, cor.sigma);
    let raw = r.raw.primary();
    // Raw: E scaled by 20000/(20000 + 4·800).
    let raw_expected = expected * 20_000.0 / 23_200.0;
    assert!((raw.s - raw_expected).abs() < 3.0 * raw.sigma, "raw S = {} ± {}", raw.s, raw.sigma);
    assert!(cor.sigma > raw.sigma, "subtraction must not shrink σ");
}

#[test]
fn one_detector_per_side_rates() {
    // One detector per side: each combination is its own run with its own live time; the
    // rate in run (x, y) is R·P(x, y | α, β) with P from the formula above (CHSH 1969 /
    // Cirel'son 1980 set-up), so E from rates must still give S = 2√2·V within 3σ,
    // while E from the raw counts is biased by the unequal live times.
    let (v, rate_hz) = (0.9, 4000.0);
    let live_s = [2.0, 5.0, 3.0, 1.5];
    let mut rng = SplitMix64(0x5EED_0007);
    let blocks: Vec<SettingCounts> = settings()
        .iter()
        .map(|&(la, lb, al, be)| {
            let p = quantum_probs(al, be, v);
            let mut b = block(la, lb, al, be, std::array::from_fn(|i| rng.poisson(rate_hz * p[i] * live_s[i])));
            b.live_time_s = Some(live_s);
            b
        })
        .collect();
    let r = chsh::evaluate(&blocks).unwrap();
    assert!(r.from_rates);
    let p = r.raw.primary();
    assert!((p.s - 2.0 * SQRT_2 * v).abs() < 3.0 * p.sigma, "S = {} ± {}", p.s, p.sigma);
    let plain: Vec<SettingCounts> = blocks
        .iter()
        .cloned()
        .map(|mut b| {
            b.live_time_s = None;
            b
        })
        .collect();
    let biased = chsh::evaluate(&plain).unwrap().raw.primary().s;
    assert!((biased - 2.0 * SQRT_2 * v).abs() > 10.0 * p.sigma, "counts alone should be biased: {biased}");
    // Mixed input (live times on some pairs only) is refused.
    let mut mixed = blocks.clone();
    mixed[0].live_time_s = None;
    assert!(chsh::evaluate(&mixed).is_err());
}

#[test]
fn sigma_s_agrees_with_poisson_resampling() {
    // Monte-Carlo check of the analytic σ_S (common practice, no source): resample every
    // count as Poisson(observed) 2000 times; the spread of S must match within 10%.
    let mut rng = SplitMix64(0x5EED_0003);
    let blocks = quantum_blocks(&mut rng, 1_500, 0.9);
    let r = chsh::evaluate(&blocks).unwrap();
    let sigma = r.raw.primary().sigma;
    let replicas = 2000;
    let mut s_values = Vec::with_capacity(replicas);
    for _ in 0..replicas {
        let resampled: Vec<SettingCounts> = blocks
            .iter()
            .map(|b| {
                let mut c = b.clone();
                c.counts = b.counts.map(|n| rng.poisson(n as f64));
                c
            })
            .collect();
        s_values.push(chsh::evaluate(&resampled).unwrap().raw.primary().s);
    }
    let mean = s_values.iter().sum::<f64>() / replicas as f64;
    let sd = (s_values.iter().map(|s| (s - mean).powi(2)).sum::<f64>() / (replicas as f64 - 1.0)).sqrt();
    assert!((sd / sigma - 1.0).abs() < 0.10, "Monte-Carlo σ_S = {sd}, analytic {sigma}");
}

/// Deterministic shared-polarization model: both photons carry polarization λ uniform on
/// [0, π); each analyzer answers +1 when λ is within 45° of its axis. Its correlation is
/// the triangle E = 1 − 4|α − β|/π for |α − β| ≤ π/2 (from memory; a standard local model).
fn lhv_counts(rng: &mut SplitMix64, n: u64, alpha_deg: f64, beta_deg: f64) -> [u64; 4] {
    let mut c = [0u64; 4];
    for _ in 0..n {
        let lambda = rng.uniform() * PI;
        let x = (2.0 * (lambda - alpha_deg.to_radians())).cos() >= 0.0;
        let y = (2.0 * (lambda - beta_deg.to_radians())).cos() >= 0.0;
        c[match (x, y) {
            (true, true) => 0,
            (true, false) => 1,
            (false, true) => 2,
            (false, false) => 3,
        }] += 1;
    }
    c
}

fn lhv_blocks(rng: &mut SplitMix64, n: u64) -> Vec<SettingCounts> {
    settings().iter().map(|&(la, lb, al, be)| block(la, lb, al, be, lhv_counts(rng, n, al, be))).collect()
}

#[test]
fn local_model_does_not_violate() {
    // |S| ≤ 2 for every local model (CHSH, Phys. Rev. Lett. 23, 880 (1969)); the triangle
    // model reaches exactly 2 at the standard angles.
    let mut rng = SplitMix64(0x5EED_0004);
    let r = chsh::evaluate(&lhv_blocks(&mut rng, 20_000)).unwrap();
    for v in &r.raw.variants {
        assert!(v.s.abs() <= 2.0 + 3.0 * v.sigma, "variant {}: S = {} ± {}", v.minus_term, v.s, v.sigma);
    }
    assert!((r.raw.max().s.abs() - 2.0).abs() < 3.0 * r.raw.max().sigma, "the triangle saturates |S| = 2");
    for pc in &r.pairs {
        let d = (pc.angle_a_deg - pc.angle_b_deg).to_radians().abs();
        let d = if d > FRAC_PI_2 { PI - d } else { d };
        let e = 1.0 - 4.0 * d / PI;
        assert!(
            (pc.raw.e - e).abs() < 4.0 * pc.raw.sigma,
            "{}{}: {} vs triangle {e}",
            pc.label_a,
            pc.label_b,
            pc.raw.e
        );
    }
}

#[test]
fn one_sided_p_value_at_three_sigma() {
    // One-sided normal tail at 3σ: 1.3499e-3 (from memory, standard normal tables).
    // E = (0.6, −0.6, 0.6, 0.6) gives S = 2.4; σ_E = 0.2/3 each gives σ_S = 0.4/3 → 3σ.
    let e = [0.6, -0.6, 0.6, 0.6].map(|value| Estimate { value, sigma: 0.2 / 3.0 });
    let set = chsh::chsh_set(e);
    let p = set.primary();
    assert!((p.s - 2.4).abs() < 1e-12 && (p.violation_sigma - 3.0).abs() < 1e-12);
    assert!((p.p_value - 1.3499e-3).abs() < 1e-7, "p = {}", p.p_value);
    // Other variants: |S| = 1.2 for each, 6σ *below* the bound: p close to 1.
    assert!(set.variants[0].p_value > 0.999_999);
}

#[test]
fn three_setting_form_violated_by_singlet() {
    // Singlet E = −cos θ with settings 60° apart: |−½ − ½| = 1 > 1 + E(b,c) = ½
    // (J. S. Bell, Physics 1, 195 (1964); textbook example, common practice).
    let e = |deg: f64| Estimate { value: -(deg.to_radians()).cos(), sigma: 0.0 };
    let r = bell3::evaluate(e(60.0), e(120.0), e(60.0), Convention::AntiCorrelated);
    assert!((r.lhs - 1.0).abs() < 1e-12 && (r.rhs - 0.5).abs() < 1e-12 && r.violated());
}

#[test]
fn three_setting_form_from_polarization_blocks() {
    // (|HH⟩+|VV⟩)/√2: E = cos 2(α − β); analyzers 30° apart are the 60° spin case above.
    // Applied to −E (Convention::Correlated): violation by ½ at V = 1.
    let mut rng = SplitMix64(0x5EED_0005);
    let angles = [(0.0, 30.0), (0.0, 60.0), (30.0, 60.0)];
    let blocks: Vec<SettingCounts> = angles
        .iter()
        .map(|&(x, y)| block("a", "b", x, y, rng.multinomial4(10_000, quantum_probs(x, y, 1.0))))
        .collect();
    let r = bell3::evaluate_blocks(&blocks, [0.0, 30.0, 60.0], Convention::Correlated, false).unwrap();
    assert!((r.margin.value - 0.5).abs() < 3.0 * r.margin.sigma, "{r:?}");
    assert!(r.violation_sigma > 20.0);
    // The deterministic local model respects the form (Bell 1964) within 3σ.
    let blocks: Vec<SettingCounts> =
        angles.iter().map(|&(x, y)| block("a", "b", x, y, lhv_counts(&mut rng, 10_000, x, y))).collect();
    let r = bell3::evaluate_blocks(&blocks, [0.0, 30.0, 60.0], Convention::Correlated, false).unwrap();
    assert!(r.margin.value <= 3.0 * r.margin.sigma, "{r:?}");
    assert!(bell3::evaluate_blocks(&blocks, [0.0, 45.0, 60.0], Convention::Correlated, false).is_err());
}

#[test]
fn visibility_fit_is_exact_on_noiseless_counts() {
    // N(θ) = A·(1 + V·cos 2(θ − θ0)) with A = 1000, V = 0.9, θ0 = 30° is integral at
    // multiples of 30° (cos of multiples of 60° is ±½ or ±1): a noiseless data set.
    let pts: Vec<AnglePoint> = (0..6)
        .map(|k| {
            let th = 30.0 * k as f64;
            let n = 1000.0 * (1.0 + 0.9 * (2.0 * (th - 30.0_f64).to_radians()).cos());
            AnglePoint { angle_deg: th, counts: n.round() as u64 }
        })
        .collect();
    assert_eq!(pts.iter().map(|p| p.counts).collect::<Vec<_>>(), vec![1450, 1900, 1450, 550, 100, 550]);
    let f = fit_visibility("noiseless", &pts).unwrap();
    assert!((f.visibility.value - 0.9).abs() < 1e-9, "{f:?}");
    assert!((f.phase_deg.value - 30.0).abs() < 1e-9);
    assert!((f.amplitude.value - 1000.0).abs() < 1e-9);
    assert!(f.chi2 < 1e-12 && f.dof == 3);
}

#[test]
fn visibility_fit_recovers_parameters_and_sigmas() {
    // Poisson-sampled counts: estimates within 3σ; over 300 replicas the pulls
    // (estimate − truth)/σ have unit spread within 15% (common practice, no source).
    let (a, v, th0) = (4000.0, 0.93, 12.0);
    let mut rng = SplitMix64(0x5EED_0006);
    let mut pulls_v = Vec::new();
    let mut pulls_t = Vec::new();
    for rep in 0..300 {
        let pts: Vec<AnglePoint> = (0..12)
            .map(|k| {
                let th = 15.0 * k as f64;
                let mean = a * (1.0 + v * (2.0 * (th - th0).to_radians()).cos());
                AnglePoint { angle_deg: th, counts: rng.poisson(mean) }
            })
            .collect();
        let f = fit_visibility("H/V", &pts).unwrap();
        if rep == 0 {
            assert!((f.visibility.value - v).abs() < 3.0 * f.visibility.sigma, "{f:?}");
            assert!((f.phase_deg.value - th0).abs() < 3.0 * f.phase_deg.sigma, "{f:?}");
            assert!((f.amplitude.value - a).abs() < 3.0 * f.amplitude.sigma, "{f:?}");
            assert!(f.reduced_chi2 < 3.0 && f.dof == 9);
        }
        pulls_v.push((f.visibility.value - v) / f.visibility.sigma);
        pulls_t.push((f.phase_deg.value - th0) / f.phase_deg.sigma);
    }
    for (name, p) in [("V", &pulls_v), ("θ0", &pulls_t)] {
        let m = p.iter().sum::<f64>() / p.len() as f64;
        let sd = (p.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (p.len() as f64 - 1.0)).sqrt();
        assert!(m.abs() < 0.25 && (sd - 1.0).abs() < 0.15, "{name} pulls: mean {m}, sd {sd}");
    }
}

#[test]
fn garwood_interval_matches_scipy() {
    // Outside reference: scipy.stats.gamma.ppf (Garwood: lo = Γ⁻¹(α/2; n), hi = Γ⁻¹(1−α/2; n+1)),
    // agreement to 1e-9 relative.
    let ns = [0u64, 1, 2, 5, 10, 37, 100, 1000, 12345, 1_000_000];
    let confs = [0.6827, 0.95, 0.999];
    let script = format!(
        "from scipy.stats import gamma\nfor c in {confs:?}:\n    a = 1 - c\n    for n in {ns:?}:\n        lo = 0.0 if n == 0 else gamma.ppf(a / 2, n)\n        print(repr(float(lo)), repr(float(gamma.ppf(1 - a / 2, n + 1))))\n"
    );
    let out = common::python().arg("-c").arg(&script).output().expect("python runs");
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    let mut lines = text.lines();
    for c in confs {
        for n in ns {
            let vals: Vec<f64> = lines.next().unwrap().split_whitespace().map(|x| x.parse().unwrap()).collect();
            let i = stats::garwood_interval(n, c).unwrap();
            let close = |x: f64, y: f64| (x - y).abs() <= 1e-9 * y.abs().max(1e-300) || (x == 0.0 && y == 0.0);
            assert!(close(i.lo, vals[0]) && close(i.hi, vals[1]), "n = {n}, c = {c}: {i:?} vs SciPy {vals:?}");
        }
    }
}
