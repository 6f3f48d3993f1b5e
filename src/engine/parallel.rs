//! Time slicing for rayon. A is cut into fixed chunks of [`CHUNK_EVENTS`] events (the cut
//! never depends on the thread count); each task handles the pairs whose A event lies
//! in its chunk and finds its B range by binary search, so events near chunk edges are
//! handled exactly. Results are integer sums, hence identical for any thread count.
//!
//! Each task hands its kernel only the part of B its chunk can reach, and can check the
//! order of what it reads on the way (the `*_checked` functions): tags opened with the
//! order check deferred ([`crate::ChannelTags::order_checked`] false) are then read once,
//! checked and counted while in cache, instead of once to check and again to count.

use super::kernels;
use super::search::{lower_bound, upper_bound};
use super::tables::WindowCount;
use super::lanes::STRIDE;
use crate::tags::ascending_below_limit;
use rayon::prelude::*;

/// A events per task. Large enough to amortise the binary search, small enough to balance.
pub const CHUNK_EVENTS: usize = 1 << 16;

/// Which of a pair's two inputs the pass must check for order on the way.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Unchecked {
    pub a: bool,
    pub b: bool,
}

/// Which input a checked pass found going backwards or reaching 2^62 ps.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Disorder {
    A,
    B,
}

/// The driver of every pass: `f(chunk, b_part, acc)` for each fixed chunk of A, where
/// `b_part` is the part of B the chunk reaches (b − a within `reach`, inclusive, plus
/// [`STRIDE`] elements so the stride loops need no tail), results merged with `merge`.
///
/// With `unchecked`, each task first checks its chunk of A (with the next chunk's first
/// event) and its share of B: from its own start index s_k (0 for the first chunk) to
/// past both the end of its `b_part` and the next chunk's start s_{k+1} (to |B| for the
/// last chunk), after checking s_k ≤ s_{k+1}. Those shares overlap by one element and
/// together cover B, so every adjacent pair of A and of B is compared once; a task
/// counts only over data it has checked, so the kernels never see unsorted input.
#[allow(clippy::too_many_arguments)] // private driver: the two inputs, their reach and check, the chunking, and fold/merge
fn over_chunks<R, F, M>(a: &[u64], b: &[u64], reach: (i64, i64), unchecked: Unchecked, chunk_events: usize, init: impl Fn() -> R + Sync + Send, f: F, merge: M) -> Result<R, Disorder>
where
    R: Send,
    F: Fn(&[u64], &[u64], &mut R) + Sync + Send,
    M: Fn(R, R) -> R + Sync + Send,
{
    let n = chunk_events.max(1);
    if a.is_empty() {
        if unchecked.b && !ascending(b) {
            return Err(Disorder::B);
        }
        return Ok(init());
    }
    let last = (a.len() - 1) / n;
    a.par_chunks(n)
        .enumerate()
        .try_fold(&init, |mut acc, (k, chunk)| {
            let end_a = k * n + chunk.len();
            if unchecked.a && !ascending_below_limit(&a[k * n..(end_a + 1).min(a.len())]) {
                return Err(Disorder::A);
            }
            let s = lower_bound(b, chunk[0] as i64 + reach.0);
            let e = (upper_bound(b, chunk[chunk.len() - 1] as i64 + reach.1) + STRIDE).min(b.len()).max(s);
            if unchecked.b {
                let from = if k == 0 { 0 } else { s };
                let to = if k == last {
                    b.len()
                } else {
                    let s_next = lower_bound(b, a[end_a] as i64 + reach.0);
                    if s_next < s {
                        return Err(Disorder::B);
                    }
                    e.max(s_next + 1).min(b.len())
                };
                if !ascending_below_limit(&b[from..to]) {
                    return Err(Disorder::B);
                }
            }
            f(chunk, &b[s..e], &mut acc);
            Ok(acc)
        })
        .try_reduce(&init, |x, y| Ok(merge(x, y)))
}

/// Whether `v` is ascending and below 2^62 ps, in pieces on the rayon pool.
pub fn ascending(v: &[u64]) -> bool {
    const PIECE: usize = 1 << 20;
    (0..v.len().div_ceil(PIECE)).into_par_iter().all(|k| ascending_below_limit(&v[k * PIECE..((k + 1) * PIECE + 1).min(v.len())]))
}

fn unchecked_ok<R>(r: Result<R, Disorder>) -> R {
    match r {
        Ok(r) => r,
        Err(_) => unreachable!("a pass without order checks cannot find disorder"),
    }
}

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
    unchecked_ok(count_windows_checked(a, b, shifts_ps, half_ps, Unchecked::default(), chunk_events))
}

/// [`count_windows_chunked`], checking the order of the inputs marked in `unchecked` on the way.
pub fn count_windows_checked(a: &[u64], b: &[u64], shifts_ps: &[i64], half_ps: u64, unchecked: Unchecked, chunk_events: usize) -> Result<Vec<WindowCount>, Disorder> {
    let zero = || vec![WindowCount::default(); shifts_ps.len()];
    let h = half_ps as i64;
    let reach = (shifts_ps.iter().min().map_or(0, |s| s - h), shifts_ps.iter().max().map_or(0, |s| s + h));
    over_chunks(a, b, reach, unchecked, chunk_events, zero, |chunk, b, acc| kernels::count_windows(chunk, b, shifts_ps, half_ps, acc), |x, y| {
        x.into_iter().zip(y).map(|(p, q)| p + q).collect()
    })
}

/// Delay histogram over [−half_range, half_range) in bins of `bin_ps`.
pub fn histogram(a: &[u64], b: &[u64], shift_ps: i64, half_range_ps: u64, bin_ps: u64) -> Vec<u64> {
    histogram_chunked(a, b, shift_ps, half_range_ps, bin_ps, CHUNK_EVENTS)
}

/// [`histogram`] with a chosen chunk length.
pub fn histogram_chunked(a: &[u64], b: &[u64], shift_ps: i64, half_range_ps: u64, bin_ps: u64, chunk_events: usize) -> Vec<u64> {
    unchecked_ok(histogram_checked(a, b, shift_ps, half_range_ps, bin_ps, Unchecked::default(), chunk_events))
}

/// [`histogram_chunked`], checking the order of the inputs marked in `unchecked` on the way.
pub fn histogram_checked(a: &[u64], b: &[u64], shift_ps: i64, half_range_ps: u64, bin_ps: u64, unchecked: Unchecked, chunk_events: usize) -> Result<Vec<u64>, Disorder> {
    let nbins = (2 * half_range_ps).div_ceil(bin_ps) as usize;
    let reach = (shift_ps - half_range_ps as i64, shift_ps + half_range_ps as i64);
    sum_vectors(a, b, reach, unchecked, nbins, chunk_events, |chunk, b, acc| kernels::histogram(chunk, b, shift_ps, half_range_ps, bin_ps, acc))
}

/// Window profile (see [`kernels::profile`]): pairs and nearest-partner counts by |Δ − c|,
/// `2·(max_half + 1)` values.
pub fn profile(a: &[u64], b: &[u64], shift_ps: i64, max_half_ps: u64) -> Vec<u64> {
    profile_chunked(a, b, shift_ps, max_half_ps, CHUNK_EVENTS)
}

/// [`profile`] with a chosen chunk length.
pub fn profile_chunked(a: &[u64], b: &[u64], shift_ps: i64, max_half_ps: u64, chunk_events: usize) -> Vec<u64> {
    unchecked_ok(profile_checked(a, b, shift_ps, max_half_ps, Unchecked::default(), chunk_events))
}

/// [`profile_chunked`], checking the order of the inputs marked in `unchecked` on the way.
pub fn profile_checked(a: &[u64], b: &[u64], shift_ps: i64, max_half_ps: u64, unchecked: Unchecked, chunk_events: usize) -> Result<Vec<u64>, Disorder> {
    let reach = (shift_ps - max_half_ps as i64, shift_ps + max_half_ps as i64);
    sum_vectors(a, b, reach, unchecked, 2 * (max_half_ps as usize + 1), chunk_events, |chunk, b, acc| kernels::profile(chunk, b, shift_ps, max_half_ps, acc))
}

/// Run `f` over every A chunk (and the part of B it reaches) into per-task vectors of
/// length `len` and add them up.
fn sum_vectors<F>(a: &[u64], b: &[u64], reach: (i64, i64), unchecked: Unchecked, len: usize, chunk_events: usize, f: F) -> Result<Vec<u64>, Disorder>
where
    F: Fn(&[u64], &[u64], &mut [u64]) + Sync + Send,
{
    over_chunks(a, b, reach, unchecked, chunk_events, || vec![0u64; len], |chunk, b, acc| f(chunk, b, acc), |mut x, y| {
        for (p, q) in x.iter_mut().zip(y) {
            *p += q;
        }
        x
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tags::MAX_TIME_PS;

    /// SplitMix64 (Steele, Lea, Flood, OOPSLA 2014): test data from a generator of the
    /// tests' own, so the engine's tests need nothing from the layers above it.
    struct Rng(u64);

    impl Rng {
        fn new(seed: u64) -> Self {
            Rng(seed)
        }
        fn next_u64(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }
    }

    /// Sorted A in bursts (so B holds long stretches no A chunk reaches) and sorted B
    /// spread over the whole span, with equal values in both.
    fn streams(seed: u64) -> (Vec<u64>, Vec<u64>) {
        let mut rng = Rng::new(seed);
        let mut a = Vec::new();
        let mut t = 1_000u64;
        for burst in 0..6 {
            for _ in 0..40 {
                t += rng.next_u64() % 300;
                a.push(t);
            }
            t += 20_000 + burst * 3_000;
        }
        let mut b: Vec<u64> = (0..400).map(|_| rng.next_u64() % (t + 5_000)).collect();
        b.extend_from_slice(&a[10..20]);
        b.sort_unstable();
        (a, b)
    }

    #[test]
    fn checked_passes_on_ordered_input_equal_the_plain_ones() {
        let (a, b) = streams(7);
        let shifts = [0i64, -2_500, 2_500, 9_000];
        for chunk in [1, 3, 7, 64, 1 << 16] {
            for unchecked in [Unchecked { a: true, b: true }, Unchecked { a: true, b: false }, Unchecked { a: false, b: true }] {
                assert_eq!(count_windows_checked(&a, &b, &shifts, 400, unchecked, chunk), Ok(count_windows_chunked(&a, &b, &shifts, 400, 1 << 20)), "chunk {chunk}");
                assert_eq!(histogram_checked(&a, &b, 300, 5_000, 50, unchecked, chunk), Ok(histogram_chunked(&a, &b, 300, 5_000, 50, 1 << 20)));
                assert_eq!(profile_checked(&a, &b, -100, 700, unchecked, chunk), Ok(profile_chunked(&a, &b, -100, 700, 1 << 20)));
            }
        }
    }

    #[test]
    fn a_descent_anywhere_in_either_input_is_found() {
        // Every position of A and of B in turn gets a value below its predecessor (or, at
        // index 0, its successor is lowered); the pass must report that input, for chunk
        // lengths that put the descent at, before and after chunk edges and in stretches
        // of B that no chunk's window reaches.
        let (a, b) = streams(11);
        let broken = |v: &[u64], i: usize| {
            let mut w = v.to_vec();
            if i == 0 {
                w[1] = w[0].saturating_sub(1);
                if w[1] == w[0] {
                    w[0] += 1;
                }
            } else {
                w[i] = w[i - 1].saturating_sub(1);
            }
            w
        };
        for chunk in [1, 5, 64] {
            for i in 0..a.len() {
                let bad = broken(&a, i);
                assert_eq!(count_windows_checked(&bad, &b, &[0], 400, Unchecked { a: true, b: true }, chunk), Err(Disorder::A), "A index {i}, chunk {chunk}");
            }
            for i in 0..b.len() {
                let bad = broken(&b, i);
                if bad.windows(2).all(|w| w[0] <= w[1]) {
                    continue; // equal neighbours: the change kept the order
                }
                assert_eq!(count_windows_checked(&a, &bad, &[0], 400, Unchecked { a: true, b: true }, chunk), Err(Disorder::B), "B index {i}, chunk {chunk}");
                assert_eq!(histogram_checked(&a, &bad, 0, 2_000, 100, Unchecked { a: false, b: true }, chunk), Err(Disorder::B), "B index {i}, chunk {chunk}");
            }
        }
    }

    #[test]
    fn the_limit_and_empty_sides_are_checked() {
        let (a, mut b) = streams(3);
        let plain = count_windows_checked(&a, &b, &[0], 400, Unchecked { a: true, b: true }, 8);
        assert!(plain.is_ok());
        b.push(MAX_TIME_PS);
        assert_eq!(count_windows_checked(&a, &b, &[0], 400, Unchecked { a: true, b: true }, 8), Err(Disorder::B));
        assert_eq!(count_windows_checked(&a, &b, &[0], 400, Unchecked { a: true, b: false }, 8), plain);
        // No A events: B is still checked, on its own.
        assert_eq!(count_windows_checked(&[], &[5, 3], &[0], 400, Unchecked { a: true, b: true }, 8), Err(Disorder::B));
        assert_eq!(count_windows_checked(&[], &[3, 5], &[0], 400, Unchecked { a: true, b: true }, 8), Ok(vec![WindowCount::default()]));
        assert!(!ascending(&[1, MAX_TIME_PS]) && ascending(&[1, MAX_TIME_PS - 1]) && ascending(&[]));
    }
}
