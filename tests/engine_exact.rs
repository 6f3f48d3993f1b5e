//! The engine against brute-force references: every pair (a, b) checked with the rule
//! 2·|Δ| ≤ w directly, O(N·M), on random streams with equal timestamps, window 0,
//! negative delays, events exactly at ±w/2 and tiny parallel chunks (chunk edges).

use proptest::prelude::*;
use tagsieve::engine::lanes::{self, Isa};
use tagsieve::engine::{kernels, parallel, rule};

/// Sorted random stream with many equal timestamps (values drawn from a small range).
fn stream(max_len: usize, range: u64) -> impl Strategy<Value = Vec<u64>> {
    prop::collection::vec(0..range, 0..max_len).prop_map(|mut v| {
        v.sort_unstable();
        v
    })
}

fn brute_count(a: &[u64], b: &[u64], delta: i64, window: u64) -> (u64, u64) {
    let (mut pairs, mut heralded) = (0u64, 0u64);
    for &x in a {
        let k = b.iter().filter(|&&y| rule::coincides(y as i64 - x as i64 - delta, window)).count() as u64;
        pairs += k;
        heralded += (k > 0) as u64;
    }
    (pairs, heralded)
}

/// Every instruction set of the lanes this CPU can run (the portable one always).
fn isas() -> Vec<Isa> {
    [Isa::Portable, Isa::Avx2, Isa::Avx512].into_iter().filter(|&i| i <= lanes::detect()).collect()
}

/// Sorted stream long enough for the interleaved lanes (≥ 8 per lane), with bursts of
/// close and equal tags so the stride fills and the exact fallback runs.
fn long_stream() -> impl Strategy<Value = Vec<u64>> {
    prop::collection::vec((0u64..60, 0u64..4), 64..700).prop_map(|steps| {
        let mut t = 1000u64;
        steps.into_iter().map(|(gap, burst)| {
            t += if burst == 0 { 0 } else { gap * burst };
            t
        }).collect()
    })
}

/// Δ = b − a − delta of every pair with −span ≤ Δ < span, binned from −span.
fn brute_histogram(a: &[u64], b: &[u64], delta: i64, span: u64, bin: u64) -> Vec<u64> {
    let mut expect = vec![0u64; (2 * span).div_ceil(bin) as usize];
    for &x in a {
        for &y in b {
            let d = y as i64 - x as i64 - delta;
            if d >= -(span as i64) && d < span as i64 {
                expect[((d + span as i64) as u64 / bin) as usize] += 1;
            }
        }
    }
    expect
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]

    #[test]
    fn lane_kernels_match_brute_force_on_every_isa(
        a in long_stream(), b in long_stream(),
        shifts in prop::collection::vec(-300i64..300, 1..12), window in 0u64..90,
    ) {
        // Several shifts at once: near ones share a pointer (a group sorted by Lanes'
        // Group::bin), far ones get their own; long streams run the interleaved lanes.
        let half = rule::half_width_ps(window);
        for isa in isas() {
            let mut got = vec![kernels::WindowCount::default(); shifts.len()];
            kernels::count_windows_on(isa, &a, &b, &shifts, half, &mut got);
            for (&s, g) in shifts.iter().zip(&got) {
                prop_assert_eq!((g.pairs, g.heralded), brute_count(&a, &b, s, window), "{:?}, shift {}", isa, s);
            }
            let (span, bin) = (window + 1, 7);
            let mut h = vec![0u64; (2 * span).div_ceil(bin) as usize];
            kernels::histogram_on(isa, &a, &b, shifts[0], span, bin, &mut h);
            prop_assert_eq!(h, brute_histogram(&a, &b, shifts[0], span, bin), "{:?} histogram", isa);
        }
    }

    #[test]
    fn window_counts_match_brute_force(
        a in stream(60, 400), b in stream(60, 400),
        delta in -150i64..150, window in 0u64..120, chunk in 1usize..9,
    ) {
        let c = parallel::count_window_chunked(&a, &b, delta, rule::half_width_ps(window), chunk);
        prop_assert_eq!((c.pairs, c.heralded), brute_count(&a, &b, delta, window));
    }

    #[test]
    fn events_exactly_at_half_window_count(x in 0u64..1_000_000, h in 0u64..5000, delta in -20_000i64..20_000) {
        // b placed exactly at Δ = +h and Δ = −h and one ps outside each: 2 in, 2 out.
        let base = x as i64 + 100_000 + delta;
        let a = [x + 100_000];
        let mut b = vec![(base - h as i64 - 1) as u64, (base - h as i64) as u64, (base + h as i64) as u64, (base + h as i64 + 1) as u64];
        b.sort_unstable();
        let c = parallel::count_window(&a, &b, delta, h);
        // (for h = 0 the two inner b coincide at Δ = 0: still two pairs)
        prop_assert_eq!(c.pairs, 2);
        prop_assert_eq!(c.pairs, brute_count(&a, &b, delta, 2 * h).0);
    }

    #[test]
    fn histogram_matches_brute_force(
        a in stream(50, 300), b in stream(50, 300),
        delta in -100i64..100, span in 1u64..80, bin in 1u64..17, chunk in 1usize..9,
    ) {
        let h = parallel::histogram_chunked(&a, &b, delta, span, bin, chunk);
        prop_assert_eq!(h, brute_histogram(&a, &b, delta, span, bin));
    }

    #[test]
    fn profile_gives_every_window(
        a in stream(50, 300), b in stream(50, 300),
        delta in -100i64..100, max_window in 0u64..90, chunk in 1usize..9,
    ) {
        let max_half = rule::half_width_ps(max_window);
        let p = parallel::profile_chunked(&a, &b, delta, max_half, chunk);
        let n = max_half as usize + 1;
        for w in 0..=max_window {
            let h = rule::half_width_ps(w) as usize;
            let pairs: u64 = p[..=h].iter().sum();
            let heralded: u64 = p[n..=n + h].iter().sum();
            prop_assert_eq!((pairs, heralded), brute_count(&a, &b, delta, w), "window {}", w);
        }
    }
}

#[test]
fn large_timestamps_and_negative_shifts_do_not_overflow() {
    let t0 = tagsieve::tags::MAX_TIME_PS - 10_000;
    let a = [t0, t0 + 5000];
    let b = [t0 - 3000, t0 + 2000, t0 + 5001];
    let c = parallel::count_window(&a, &b, -3000, 0);
    assert_eq!(c.pairs, brute_count(&a, &b, -3000, 0).0);
    let c = parallel::count_window(&a, &b, 1, 1000);
    assert_eq!((c.pairs, c.heralded), brute_count(&a, &b, 1, 2000));
}
