//! Accidental coincidences, two ways: (i) analytic, Σ_k n_A,k·n_B,k·W/T_k over time slices
//! of configurable length (so drifting rates are handled), W = 2⌊w/2⌋+1 ps; (ii) measured,
//! the mean count in K windows of the same width at offsets far from the peak.

use super::search::{lower_bound, upper_bound};
use super::tables::{BlockSpan, Estimate};

/// Centre of the nearest default off-peak window, ps from the peak: 2 µs, clear of the
/// peak's jitter tails, of detector dead time (tens of ns) and of most afterpulsing, which
/// for silicon SPADs falls off within ~1 µs of a detection (common practice, no source).
pub const DEFAULT_OFFSET_PS: i64 = 2_000_000;
/// Default off-peak windows on each side of the peak.
pub const DEFAULT_OFFSET_WINDOWS: i64 = 5;

/// Default off-peak offsets for windows of `window_ps`: K = 10 windows, five on each side,
/// side by side (centres one effective width W = 2⌊w/2⌋+1 apart, so they tile a stretch of
/// flat background without overlapping), the nearest centred at ±max(2 µs, 2W). Side by
/// side, each side's five windows share one pointer in the counting pass
/// ([`super::kernels::count_windows`]): the measured accidentals cost about two windows'
/// work, not ten.
pub fn default_offsets_ps(window_ps: u64) -> Vec<i64> {
    let width = super::rule::effective_width_ps(window_ps) as i64;
    let first = DEFAULT_OFFSET_PS.max(2 * width);
    (0..DEFAULT_OFFSET_WINDOWS).flat_map(|k| [-(first + k * width), first + k * width]).collect()
}

/// Σ_k n_A,k n_B,k / T_k and its Poisson variance factor, for one slicing.
/// Multiply by W (value) and W² (variance) to get the estimate for a window.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SliceProducts {
    /// Σ_k n_A,k n_B,k / T_k, in 1/ps.
    pub rate_product_per_ps: f64,
    /// Σ_k (n_A,k² n_B,k + n_A,k n_B,k²) / T_k², in 1/ps².
    pub variance_per_ps2: f64,
    pub slices: u64,
}

impl SliceProducts {
    /// The analytic estimate for a window of `window_ps`.
    pub fn estimate(&self, window_ps: u64) -> Estimate {
        let w = super::rule::effective_width_ps(window_ps) as f64;
        Estimate { value: self.rate_product_per_ps * w, sigma: self.variance_per_ps2.sqrt() * w }
    }
}

/// Events per time slice: the block span cut into pieces of `slice_ps` from its start
/// (the last may be shorter). Every channel uses the same slicing.
pub fn slice_counts(v: &[u64], span: BlockSpan, slice_ps: u64) -> Vec<u64> {
    let slice_ps = slice_ps.max(1);
    let n = span.duration_ps().div_ceil(slice_ps);
    (0..n)
        .map(|k| {
            let s = span.start_ps + k * slice_ps;
            let e = (s + slice_ps).min(span.end_ps);
            count_in(v, s as i64, e as i64)
        })
        .collect()
}

/// Form Σ n_A,k n_B,k / T_k (and its variance factor) from per-slice counts.
pub fn products(na: &[u64], nb: &[u64], span: BlockSpan, slice_ps: u64) -> SliceProducts {
    let slice_ps = slice_ps.max(1);
    let (mut prod, mut var) = (0.0f64, 0.0f64);
    for (k, (&x, &y)) in na.iter().zip(nb).enumerate() {
        let s = span.start_ps + k as u64 * slice_ps;
        let t = ((s + slice_ps).min(span.end_ps) - s) as f64;
        let (x, y) = (x as f64, y as f64);
        prod += x * y / t;
        var += (x * x * y + x * y * y) / (t * t);
    }
    SliceProducts { rate_product_per_ps: prod, variance_per_ps2: var, slices: na.len() as u64 }
}

/// Events with start ≤ t < end.
fn count_in(v: &[u64], start: i64, end: i64) -> u64 {
    (lower_bound(v, end).saturating_sub(lower_bound(v, start))) as u64
}

/// Events with t ≤ x (exposed for tests of the slicing).
pub fn count_upto(v: &[u64], x: i64) -> u64 {
    upper_bound(v, x) as u64
}

/// Upper end of the one-sided 84.13 % (1σ) Poisson confidence interval for zero observed
/// events: −ln(1 − 0.8413) = 1.841 (Gehrels, Astrophys. J. 303, 336 (1986), Table 1).
pub const ZERO_COUNT_UPPER_1SIGMA: f64 = 1.841;

/// Mean of K off-peak window counts with Poisson σ of the mean: sqrt(ΣN)/K. When no
/// window holds a pair (ΣN = 0), sqrt(0) would claim the mean is exactly 0; σ is then
/// the 1σ upper limit [`ZERO_COUNT_UPPER_1SIGMA`]/K, so that the agreement with the
/// analytic estimate stays meaningful on short runs.
pub fn measured_estimate(counts: &[u64]) -> Estimate {
    if counts.is_empty() {
        return Estimate { value: f64::NAN, sigma: f64::NAN };
    }
    let k = counts.len() as f64;
    let total: u64 = counts.iter().sum();
    let sigma = if total == 0 { ZERO_COUNT_UPPER_1SIGMA } else { (total as f64).sqrt() };
    Estimate { value: total as f64 / k, sigma: sigma / k }
}

/// (x − y)/sqrt(σx² + σy²); 0 when both are exact and equal.
pub fn agreement_sigma(x: Estimate, y: Estimate) -> f64 {
    let s = (x.sigma * x.sigma + y.sigma * y.sigma).sqrt();
    if s == 0.0 {
        if x.value == y.value { 0.0 } else { f64::INFINITY }
    } else {
        (x.value - y.value) / s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn measured_estimate_is_the_mean_with_poisson_sigma_and_an_upper_limit_at_zero() {
        // ΣN = 400 over K = 10: 40 ± sqrt(400)/10 = 2.
        let e = measured_estimate(&[38, 42, 40, 39, 41, 40, 40, 41, 39, 40]);
        assert_eq!((e.value, e.sigma), (40.0, 2.0));
        // No pair in any window: 0 with the one-sided 84.13 % upper limit, 1.841/K
        // (Gehrels, ApJ 303, 336 (1986), Table 1; exact: −ln(0.1587) = 1.8408).
        let z = measured_estimate(&[0; 10]);
        assert_eq!(z.value, 0.0);
        assert!((z.sigma - 0.1841).abs() < 1e-12, "{}", z.sigma);
        assert!((-(1.0f64 - 0.841_344_746).ln() - ZERO_COUNT_UPPER_1SIGMA).abs() < 1e-3);
        // so an analytic 0.30 ± 0.004 is 1.6 σ away, not 75 σ.
        let a = agreement_sigma(Estimate { value: 0.30, sigma: 0.004 }, z);
        assert!(a > 1.0 && a < 2.0, "{a}");
        assert!(measured_estimate(&[]).value.is_nan());
    }

    #[test]
    fn uniform_slices_sum_like_one_slice() {
        // Evenly spread events: per-slice products add up to nA·nB/T (rates constant).
        let a: Vec<u64> = (0..1000).map(|i| i * 1000).collect();
        let b: Vec<u64> = (0..500).map(|i| i * 2000 + 7).collect();
        let span = BlockSpan { start_ps: 0, end_ps: 1_000_000 };
        let one = products(&slice_counts(&a, span, 1_000_000), &slice_counts(&b, span, 1_000_000), span, 1_000_000);
        let ten = products(&slice_counts(&a, span, 100_000), &slice_counts(&b, span, 100_000), span, 100_000);
        assert_eq!(one.slices, 1);
        assert_eq!(ten.slices, 10);
        let expect = 1000.0 * 500.0 / 1e6;
        assert!((one.rate_product_per_ps - expect).abs() < 1e-12);
        assert!((ten.rate_product_per_ps - expect).abs() < 1e-9);
    }
}
