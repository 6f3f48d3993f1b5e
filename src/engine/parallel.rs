//! Time slicing for rayon. A is cut into fixed chunks of [`CHUNK_EVENTS`] events (the cut
//! never depends on the thread count); each task handles the pairs whose A event lies
//! in its chunk and finds its B range by binary search, so events near chunk edges are
//! handled exactly. Results are integer sums, hence identical for any thread count.

use super::kernels::{self, WindowCount};
use rayon::prelude::*;

/// A events per task. Large enough to amortise the binary search, small enough to balance.
pub const CHUNK_EVENTS: usize = 1 << 16;

/// Pairs and heralded events with |b − a − shift| ≤ half.
pub fn count_window(a: &[u64], b: &[u64], shift_ps: i64, half_ps: u64) -> WindowCount {
    count_window_chunked(a, b, shift_ps, half_ps, CHUNK_EVENTS)
}

/// [`count_window`] with a chosen chunk length (tests use tiny chunks to hit chunk edges).
pub fn count_window_chunked(a: &[u64], b: &[u64], shift_ps: i64, half_ps: u64, chunk_events: usize) -> WindowCount {
    count_windows_chunked(a, b, &[shift_ps], half_ps, chunk_events)[0]
}

/// [`count_window`] at several shifts (peak and off-peak windows) in one pass over A and B.
pub fn count_windows(a: &[u64], b: &[u64], shifts_ps: &[i64], half_ps: u64) -> Vec<WindowCount> {
    count_windows_chunked(a, b, shifts_ps, half_ps, CHUNK_EVENTS)
}

/// [`count_windows`] with a chosen chunk length.
pub fn count_windows_chunked(a: &[u64], b: &[u64], shifts_ps: &[i64], half_ps: u64, chunk_events: usize) -> Vec<WindowCount> {
    let zero = || vec![WindowCount::default(); shifts_ps.len()];
    a.par_chunks(chunk_events.max(1))
        .fold(zero, |mut acc, chunk| {
            kernels::count_windows(chunk, b, shifts_ps, half_ps, &mut acc);
            acc
        })
        .reduce(zero, |x, y| x.into_iter().zip(y).map(|(p, q)| p + q).collect())
}

/// Delay histogram over [−span, span) in bins of `bin_ps`.
pub fn histogram(a: &[u64], b: &[u64], shift_ps: i64, span_ps: u64, bin_ps: u64) -> Vec<u64> {
    histogram_chunked(a, b, shift_ps, span_ps, bin_ps, CHUNK_EVENTS)
}

/// [`histogram`] with a chosen chunk length.
pub fn histogram_chunked(a: &[u64], b: &[u64], shift_ps: i64, span_ps: u64, bin_ps: u64, chunk_events: usize) -> Vec<u64> {
    let nbins = (2 * span_ps).div_ceil(bin_ps) as usize;
    sum_vectors(a, nbins, chunk_events, |chunk, acc| kernels::histogram(chunk, b, shift_ps, span_ps, bin_ps, acc))
}

/// Window profile (see [`kernels::profile`]): pairs and nearest-partner counts by |Δ − c|,
/// `2·(max_half + 1)` values.
pub fn profile(a: &[u64], b: &[u64], shift_ps: i64, max_half_ps: u64) -> Vec<u64> {
    profile_chunked(a, b, shift_ps, max_half_ps, CHUNK_EVENTS)
}

/// [`profile`] with a chosen chunk length.
pub fn profile_chunked(a: &[u64], b: &[u64], shift_ps: i64, max_half_ps: u64, chunk_events: usize) -> Vec<u64> {
    sum_vectors(a, 2 * (max_half_ps as usize + 1), chunk_events, |chunk, acc| kernels::profile(chunk, b, shift_ps, max_half_ps, acc))
}

/// Run `f` over every A chunk into per-task vectors of length `len` and add them up.
fn sum_vectors<F>(a: &[u64], len: usize, chunk_events: usize, f: F) -> Vec<u64>
where
    F: Fn(&[u64], &mut [u64]) + Sync,
{
    a.par_chunks(chunk_events.max(1))
        .fold(
            || vec![0u64; len],
            |mut acc, chunk| {
                f(chunk, &mut acc);
                acc
            },
        )
        .reduce(
            || vec![0u64; len],
            |mut x, y| {
                for (p, q) in x.iter_mut().zip(y) {
                    *p += q;
                }
                x
            },
        )
}
