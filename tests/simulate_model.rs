//! The simulator against its physics: singles and coincidence rates from the model's
//! parameters, E(α, β) = V·cos 2(α − β), the LHV bound |S| ≤ 2, jitter width and dead-time loss.

mod simulate_common;

use simulate_common::*;
use tagsieve::manifest::{Port, Setup};
use tagsieve::simulate::{
    block_seed, plan::chsh_labels, plan_blocks, scenario_detectors, simulate_block, Correlation, SourceModel,
};

const PS_PER_S: f64 = 1e12;

fn source(pair_rate_hz: f64, visibility: f64, correlation: Correlation) -> SourceModel {
    SourceModel { pair_rate_hz, visibility, correlation }
}

/// |observed − expected| ≤ 3σ for a Poisson count with mean `expected`.
fn assert_poisson(observed: u64, expected: f64, what: &str) {
    let z = (observed as f64 - expected) / expected.sqrt();
    assert!(z.abs() <= 3.0, "{what}: observed {observed}, expected {expected:.1} (z = {z:.2})");
}

/// Singles = pair_rate · η · 1/2 (each outcome has marginal 1/2 for a maximally entangled
/// state: common practice, no source) + dark rate; dead time 0 so nothing is lost.
#[test]
fn singles_rates_match_the_model() {
    let mut dets = scenario_detectors();
    for d in &mut dets {
        d.dead_time_ps = 0;
    }
    let src = SourceModel::scenario();
    let duration_s = 2.0;
    let tags = simulate_block(&src, &dets, deg(0.0, 22.5), (duration_s * PS_PER_S) as u64, 11).unwrap();
    for d in &dets {
        let expected = (src.pair_rate_hz * d.efficiency * 0.5 + d.dark_rate_hz) * duration_s;
        assert_poisson(tags_of(&tags, d.channel).len() as u64, expected, &d.name);
    }
}

/// At zero jitter every detected pair lands at exactly the cable-delay difference:
/// N(x,y) = R·T·η_A·η_B·P(x,y), P(x,y) = (1 + x·y·V·cos 2(α−β))/4 for (|HH⟩+|VV⟩)/√2
/// (common practice, no source), with the scenario's unequal efficiencies.
#[test]
fn zero_jitter_coincidence_rates_match_the_model() {
    let mut dets = ideal_detectors(0.0);
    for (d, eta) in dets.iter_mut().zip([0.18, 0.17, 0.20, 0.19]) {
        d.efficiency = eta;
    }
    let (r, v, t_s) = (1.0e6, 0.95, 1.0);
    let (alpha, beta) = (10.0f64, 40.0f64);
    let tags = simulate_block(&source(r, v, Correlation::Quantum), &dets, deg(alpha, beta), (t_s * PS_PER_S) as u64, 5).unwrap();
    let n = outcome_counts(&dets, &tags);
    for (ia, pa) in [Port::Plus, Port::Minus].into_iter().enumerate() {
        for (ib, pb) in [Port::Plus, Port::Minus].into_iter().enumerate() {
            let (ea, eb) = (dets[ia].efficiency, dets[2 + ib].efficiency);
            let xy = (pa.sign() * pb.sign()) as f64;
            let p = (1.0 + xy * v * (2.0 * (alpha - beta).to_radians()).cos()) / 4.0;
            assert_poisson(n[ia][ib], r * t_s * ea * eb * p, &format!("N({pa:?},{pb:?})"));
        }
    }
}

/// E(α,β) = V·cos 2(α−β) for (|HH⟩+|VV⟩)/√2 with visibility V (common practice, no source),
/// at the CHSH angles and two more; and S = 2√2·V at the CHSH angles (Clauser, Horne,
/// Shimony & Holt, Phys. Rev. Lett. 23, 880, 1969; Tsirelson's bound 2√2).
#[test]
fn quantum_correlations_follow_v_cos_2_delta() {
    let (src, dets) = (source(1.0e6, 0.95, Correlation::Quantum), ideal_detectors(0.5));
    let one = |a: f64, b: f64, seed| correlation(outcome_counts(&dets, &simulate_block(&src, &dets, deg(a, b), 500_000_000_000, seed).unwrap()));
    for (i, (a, b)) in [(0.0f64, 0.0f64), (0.0, 30.0), (10.0, 100.0)].into_iter().enumerate() {
        let (e, s) = one(a, b, i as u64);
        let expected = 0.95 * (2.0 * (a - b).to_radians()).cos();
        assert!((e - expected).abs() <= 3.0 * s, "E({a},{b}) = {e} ± {s}, expected {expected}");
    }
    let (s_val, s_sigma) = chsh(&src, &dets, 100);
    let expected = 2.0 * 2f64.sqrt() * 0.95;
    assert!((s_val - expected).abs() <= 3.0 * s_sigma, "S = {s_val} ± {s_sigma}, expected {expected}");
}

/// S = E(a,b) − E(a,b') + E(a',b) + E(a',b') at the scenario's CHSH angles, with σ_S from
/// the four independent E errors in quadrature.
fn chsh(src: &SourceModel, dets: &[tagsieve::simulate::DetectorModel], seed: u64) -> (f64, f64) {
    let (alice, bob) = chsh_labels(0.0, 45.0, 22.5, 67.5);
    let plans = plan_blocks(Setup::FourDetectors, &alice, &bob);
    let (mut s, mut var) = (0.0, 0.0);
    for (k, p) in plans.iter().enumerate() {
        let tags = simulate_block(src, dets, p.setting, 500_000_000_000, block_seed(seed, k as u64)).unwrap();
        let (e, sigma) = correlation(outcome_counts(dets, &tags));
        s += if p.alice == "a" && p.bob == "b'" { -e } else { e };
        var += sigma * sigma;
    }
    (s, var.sqrt())
}

/// A local-hidden-variable model obeys |S| ≤ 2 (CHSH, Phys. Rev. Lett. 23, 880, 1969);
/// this one reaches the bound, E = 1 − 4|Δ|/180° giving S = 2 at these angles (common practice, no source).
#[test]
fn local_hidden_variables_obey_the_chsh_bound() {
    let (src, dets) = (source(1.0e6, 1.0, Correlation::LocalHiddenVariable), ideal_detectors(0.5));
    let (s, sigma) = chsh(&src, &dets, 7);
    assert!(s.abs() <= 2.0 + 3.0 * sigma, "LHV S = {s} ± {sigma}");
    assert!((s - 2.0).abs() <= 3.0 * sigma, "this LHV model should sit at the bound: S = {s} ± {sigma}");
}

/// One detector per side: the four blocks at α, α+90°, β, β+90° give N(x,y) through the +
/// detectors, so E from them matches V·cos 2(α−β) (common practice, no source).
#[test]
fn one_detector_per_side_recovers_the_correlation() {
    let src = source(1.0e6, 0.9, Correlation::Quantum);
    let dets: Vec<_> = ideal_detectors(0.5).into_iter().filter(|d| d.port == Port::Plus).collect();
    let (alice, bob) = (vec![tagsieve::simulate::SettingLabel::new("a", 0.0)], vec![tagsieve::simulate::SettingLabel::new("b", 30.0)]);
    let mut n = [[0u64; 2]; 2];
    for (k, p) in plan_blocks(Setup::OnePerSide, &alice, &bob).iter().enumerate() {
        let tags = simulate_block(&src, &dets, p.setting, 500_000_000_000, block_seed(3, k as u64)).unwrap();
        let o = p.outcomes.unwrap();
        n[o.alice as usize][o.bob as usize] = outcome_counts(&dets, &tags)[0][0];
    }
    let (e, s) = correlation(n);
    let expected = 0.9 * (60.0f64).to_radians().cos();
    assert!((e - expected).abs() <= 3.0 * s, "E = {e} ± {s}, expected {expected}");
}

/// Visibility series: Larch fixed at 0°, Rowan at 0° and 90°: (N_max − N_min)/(N_max + N_min) = V
/// (fringe visibility, common practice, no source).
#[test]
fn visibility_series_shows_the_configured_visibility() {
    let (src, dets) = (source(1.0e6, 0.8, Correlation::Quantum), ideal_detectors(0.5));
    let n_at = |beta: f64| outcome_counts(&dets, &simulate_block(&src, &dets, deg(0.0, beta), 500_000_000_000, beta as u64).unwrap())[0][0] as f64;
    let (max, min) = (n_at(0.0), n_at(90.0));
    let v = (max - min) / (max + min);
    // σ_V from Poisson errors on both counts, propagated: common practice, no source
    let sigma = 2.0 * (max * min * (max + min)).sqrt() / (max + min).powi(2);
    assert!((v - 0.8).abs() <= 3.0 * sigma, "V = {v} ± {sigma}");
}

/// The coincidence-peak width: Δ = (t_B − d_B) − (t_A − d_A) has σ = √(σ_A² + σ_B²) for
/// independent Gaussian jitters (common practice, no source).
#[test]
fn jitter_widens_the_peak_as_expected() {
    let mut dets = ideal_detectors(0.5);
    dets[0].jitter_sigma_ps = 45.0;
    dets[2].jitter_sigma_ps = 40.0;
    let tags = simulate_block(&source(2.0e5, 1.0, Correlation::Quantum), &dets, deg(0.0, 0.0), 1_000_000_000_000, 9).unwrap();
    let (a, b) = (tags_of(&tags, 1), tags_of(&tags, 3));
    // nearest-neighbour differences within ±1 ns: pairs are ~5 µs apart, so no mix-ups
    let mut deltas = Vec::new();
    let mut j = 0;
    for &ta in a {
        let centre = ta as i64 + dets[2].delay_ps as i64;
        while j < b.len() && (b[j] as i64) < centre - 1000 {
            j += 1;
        }
        if j < b.len() && (b[j] as i64 - centre).abs() <= 1000 {
            deltas.push((b[j] as i64 - centre) as f64);
        }
    }
    let n = deltas.len() as f64;
    let mean = deltas.iter().sum::<f64>() / n;
    let sd = (deltas.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let expected = (45.0f64.powi(2) + 40.0f64.powi(2)).sqrt();
    // standard error of a Gaussian sample's standard deviation ≈ σ/√(2n) (common practice, no source)
    assert!((sd - expected).abs() <= 3.0 * expected / (2.0 * n).sqrt() + 0.3, "σ = {sd}, expected {expected}");
}

/// Non-paralyzable dead time τ on a Poisson stream of rate n keeps m = n/(1 + nτ)
/// (G. F. Knoll, Radiation Detection and Measurement, 4th ed., Wiley 2010, ch. 4; from memory).
#[test]
fn dead_time_loss_follows_the_non_paralyzable_formula() {
    let mut dets = ideal_detectors(0.0);
    dets.truncate(1);
    dets[0].dark_rate_hz = 1.0e6;
    dets[0].dead_time_ps = 500_000;
    let t_s = 0.5;
    let tags = simulate_block(&source(0.0, 1.0, Correlation::Quantum), &dets, deg(0.0, 0.0), (t_s * PS_PER_S) as u64, 2).unwrap();
    let expected = 1.0e6 / (1.0 + 1.0e6 * 500e-9) * t_s;
    // the kept count is less variable than Poisson; 3 Poisson σ is a loose, safe bound
    assert_poisson(tags[0].len() as u64, expected, "kept tags");
}
