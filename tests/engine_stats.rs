//! Engine statistics against outside formulas, and thread-count independence.

use tagsieve::engine::{self, accidentals, sweep, CountConfig, Criterion, Delays, ScanConfig};
use tagsieve::ChannelTags;

mod common;
use common::SplitMix64;


/// A Poisson process of `rate_hz` over `duration_s`, in integer ps.
fn poisson(rng: &mut SplitMix64, rate_hz: f64, duration_s: f64) -> Vec<u64> {
    let mean_gap_ps = 1e12 / rate_hz;
    let end = duration_s * 1e12;
    let mut t = 0.0;
    let mut v = Vec::new();
    loop {
        t += -rng.uniform_open().ln() * mean_gap_ps;
        if t >= end {
            return v;
        }
        v.push(t as u64);
    }
}

#[test]
fn accidentals_of_independent_streams_follow_the_standard_formula() {
    // Accidental rate of two independent random streams: R_acc = R_A·R_B·τ with τ the
    // resolving width (Eckart & Shonka, Phys. Rev. 53, 752 (1938), from memory). With
    // integer-ps tags the window accepts 2⌊w/2⌋+1 values of Δ, so τ = 2⌊w/2⌋+1 ps.
    let (ra, rb, t_s, w_ps) = (200e3, 300e3, 2.0, 5000u64);
    let mut rng = SplitMix64(7);
    let a = poisson(&mut rng, ra, t_s);
    let b = poisson(&mut rng, rb, t_s);
    let tags = vec![ChannelTags::owned(1, "a", a), ChannelTags::owned(2, "b", b)];
    let cfg = CountConfig {
        pairs: vec![(1, 2)],
        delays: Delays::default(),
        window_ps: w_ps,
        offsets_ps: accidentals::default_offsets_ps(w_ps),
        slice_ps: 100_000_000_000,
    };
    let block = engine::count_block("indep", &tags, &cfg).unwrap();
    let row = &block.coincidences[0];
    let expect = ra * rb * (2 * (w_ps / 2) + 1) as f64 * 1e-12 * t_s;
    // σ of each estimate around the formula: the measured mean carries its Poisson σ; the
    // analytic one carries its own σ plus the singles' fluctuation (relative √(1/nA+1/nB)).
    let rel_singles = (1.0 / (ra * t_s) + 1.0 / (rb * t_s)).sqrt();
    let sa = (row.acc_analytic.sigma.powi(2) + (expect * rel_singles).powi(2)).sqrt();
    assert!((row.acc_analytic.value - expect).abs() < 3.0 * sa, "analytic {:?} vs {expect}", row.acc_analytic);
    assert!((row.acc_measured.value - expect).abs() < 3.0 * row.acc_measured.sigma, "measured {:?} vs {expect}", row.acc_measured);
    // With no correlation, the peak window itself is one more accidental window.
    assert!((row.coincidences as f64 - expect).abs() < 3.0 * expect.sqrt(), "peak {} vs {expect}", row.coincidences);
    assert!(row.acc_agreement_sigma.abs() < 3.0);
}

#[test]
fn analytic_accidentals_follow_drifting_rates() {
    // First half at low rate, second at high: one slice over the whole block overestimates
    // (⟨nA⟩⟨nB⟩ ≠ ⟨nA·nB⟩); slices of 0.1 s follow the drift and agree with the off-peak mean.
    let mut rng = SplitMix64(11);
    let mut a = poisson(&mut rng, 50e3, 1.0);
    a.extend(poisson(&mut rng, 450e3, 1.0).into_iter().map(|t| t + 1_000_000_000_000));
    let mut b = poisson(&mut rng, 50e3, 1.0);
    b.extend(poisson(&mut rng, 450e3, 1.0).into_iter().map(|t| t + 1_000_000_000_000));
    let tags = vec![ChannelTags::owned(1, "a", a), ChannelTags::owned(2, "b", b)];
    let mut cfg = CountConfig {
        pairs: vec![],
        delays: Delays::default(),
        window_ps: 4000,
        offsets_ps: accidentals::default_offsets_ps(4000),
        slice_ps: 100_000_000_000,
    };
    let sliced = engine::count_block("drift", &tags, &cfg).unwrap().coincidences[0].clone();
    cfg.slice_ps = 10_000_000_000_000;
    let whole = engine::count_block("drift", &tags, &cfg).unwrap().coincidences[0].clone();
    assert!(sliced.acc_agreement_sigma.abs() < 3.0, "{sliced:?}");
    // Expected bias of one slice: (⟨r⟩² vs ⟨r²⟩) = 250²/(0.5·(50²+450²)) ≈ 0.61 of the truth.
    assert!(whole.acc_analytic.value < 0.7 * sliced.acc_analytic.value);
}

#[test]
fn results_are_identical_for_1_2_and_16_threads() {
    let mut rng = SplitMix64(3);
    // Correlated pairs plus background, long enough for many parallel chunks.
    let mut a = poisson(&mut rng, 400e3, 1.0);
    let mut b = Vec::new();
    for &t in &a {
        if rng.uniform_open() < 0.3 {
            b.push(t + 41_250 + rng.next_u64() % 200);
        }
    }
    b.extend(poisson(&mut rng, 300e3, 1.0));
    b.sort_unstable();
    a.sort_unstable();
    let tags = vec![ChannelTags::owned(1, "a", a), ChannelTags::owned(3, "b", b)];
    let mut delays = Delays::default();
    delays.by_channel.insert(3, 41_300);
    let cfg = CountConfig { pairs: vec![], delays: delays.clone(), window_ps: 1000, offsets_ps: accidentals::default_offsets_ps(1000), slice_ps: 50_000_000_000 };
    let run = || {
        let block = engine::count_block("x", &tags, &cfg).unwrap();
        let sweep = engine::sweep_block(&tags, &cfg, &[100, 200, 500, 1000, 2000], &sweep::OffPeak::PerWindow, Criterion::MaxNetSignificance).unwrap();
        let scan = engine::scan_block(&tags, &ScanConfig { pairs: vec![], delays: Delays::default(), half_range_ps: 100_000, bin_ps: 50 }).unwrap();
        (block, sweep, scan)
    };
    let results: Vec<_> = [1usize, 2, 16]
        .iter()
        .map(|&n| rayon::ThreadPoolBuilder::new().num_threads(n).build().unwrap().install(run))
        .collect();
    assert!(results[0].0.coincidences[0].coincidences > 100_000);
    // Debug text: equal strings mean equal bits (and NaN compares equal to itself).
    let text: Vec<String> = results.iter().map(|r| format!("{r:?}")).collect();
    assert_eq!(text[0], text[1]);
    assert_eq!(text[0], text[2]);
    // The sweep's row at 1000 ps equals the direct count at 1000 ps.
    let row = results[0].1[0].rows.iter().find(|r| r.window_ps == 1000).unwrap();
    assert_eq!(row, &results[0].0.coincidences[0]);
}
