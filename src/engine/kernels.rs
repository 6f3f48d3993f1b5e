//! Serial kernels over sorted slices: window counts, delay histograms and window profiles.
//! Every kernel handles the A events it is given and may look at any B events; the
//! parallel driver ([`super::parallel`]) hands each task a fixed chunk of A.

use super::lanes::{self, Group, STRIDE};
use super::search::lower_bound;
/// The kernels' result type, defined with the other plain tables.
pub use super::tables::WindowCount;

/// Count (a, b) with |b − a − shift| ≤ half for every a in `a`.
pub fn count_window(a: &[u64], b: &[u64], shift_ps: i64, half_ps: u64) -> WindowCount {
    let mut out = [WindowCount::default()];
    count_windows(a, b, &[shift_ps], half_ps, &mut out);
    out[0]
}

/// Windows closer than this many window widths (2⌊w/2⌋+1) to their neighbour share one
/// pointer: its step covers all of them, and the rare partners are sorted into windows.
const CLUSTER_GAP_WIDTHS: i64 = 2;
/// Most windows one shared pointer serves (their heralded flags fit one u64).
const CLUSTER_MAX: usize = 64;

/// Add to `out[k]` the pairs and heralded A events with `|b − a − shifts[k]| ≤ half`, for
/// every shift at once (the peak and the off-peak windows together).
///
/// Shifts are sorted and grouped: a group is a run of windows each within
/// `CLUSTER_GAP_WIDTHS` (2) widths of the next (the default off-peak windows lie side by
/// side), served by one pointer into B, so ten off-peak windows cost what one does. Each
/// group keeps a monotone pointer, the first b ≥ a + (its leftmost edge), so the pass is
/// O(|A| + |B|) per group; the steps run on interleaved lanes ([`super::lanes`]).
pub fn count_windows(a: &[u64], b: &[u64], shifts_ps: &[i64], half_ps: u64, out: &mut [WindowCount]) {
    count_windows_on(lanes::isa(), a, b, shifts_ps, half_ps, out)
}

/// [`count_windows`] with the lanes' instruction set chosen (tests compare them).
pub fn count_windows_on(isa: lanes::Isa, a: &[u64], b: &[u64], shifts_ps: &[i64], half_ps: u64, out: &mut [WindowCount]) {
    assert_eq!(shifts_ps.len(), out.len(), "one result slot per shift");
    if a.is_empty() || shifts_ps.is_empty() {
        return;
    }
    let h = half_ps as i64;
    let mut groups: Vec<Group> = groups(shifts_ps, h)
        .into_iter()
        .map(|ks| {
            let shifts: Vec<i64> = ks.iter().map(|&k| shifts_ps[k]).collect();
            Group::windows(shifts, ks, h)
        })
        .collect();
    let reach = groups.iter().map(|g| g.right).max().unwrap_or(0);
    let n_fast = fast_prefix(a, b, reach);
    lanes::count_groups_on(isa, &a[..n_fast], b, &mut groups);
    for g in &groups {
        for (&k, &c) in g.slots.iter().zip(&g.sums) {
            out[k] = out[k] + c;
        }
    }
    // The last few A events, whose pointers may run into B's end: plain bounds-checked loop.
    if n_fast < a.len() {
        let tail = &a[n_fast..];
        for (&s, slot) in shifts_ps.iter().zip(out.iter_mut()) {
            *slot = *slot + count_scalar(tail, b, s, h, lower_bound(b, tail[0] as i64 + s - h));
        }
    }
}

/// Indices of `shifts` grouped as [`count_windows`] describes, each group in ascending order.
fn groups(shifts: &[i64], h: i64) -> Vec<Vec<usize>> {
    let mut order: Vec<usize> = (0..shifts.len()).collect();
    order.sort_by_key(|&k| shifts[k]);
    let gap = CLUSTER_GAP_WIDTHS.saturating_mul(2 * h + 1);
    let mut out: Vec<Vec<usize>> = Vec::new();
    for k in order {
        match out.last_mut() {
            Some(g) if g.len() < CLUSTER_MAX && shifts[k] - shifts[g[g.len() - 1]] <= gap => g.push(k),
            _ => out.push(vec![k]),
        }
    }
    out
}

/// How many leading A events the stride step may serve: those whose pointers, bounds of
/// values ≤ a + `reach`, stay ≤ |B| − STRIDE, i.e. a + reach < b[|B| − STRIDE].
fn fast_prefix(a: &[u64], b: &[u64], reach: i64) -> usize {
    if b.len() <= STRIDE {
        return 0;
    }
    let limit = b[b.len() - STRIDE] as i64;
    a.partition_point(|&x| x as i64 + reach < limit)
}

/// The plain two-pointer loop, from `start` (≤ the first a's lower bound) in B.
fn count_scalar(a: &[u64], b: &[u64], shift_ps: i64, h: i64, start: usize) -> WindowCount {
    let (mut lo, mut hi) = (start, start);
    let (mut pairs, mut heralded) = (0u64, 0u64);
    let n = b.len();
    for &x in a {
        let left = x as i64 + shift_ps - h;
        let right = x as i64 + shift_ps + h;
        while lo < n && (b[lo] as i64) < left {
            lo += 1;
        }
        hi = hi.max(lo);
        while hi < n && (b[hi] as i64) <= right {
            hi += 1;
        }
        let k = (hi - lo) as u64;
        pairs += k;
        heralded += (k > 0) as u64;
    }
    WindowCount { pairs, heralded }
}

/// Add to `hist` the Δ = b − a − shift of every pair with −half ≤ Δ < half, in bins of
/// `bin_ps` starting at −half (bin i covers [−half + i·bin, −half + (i+1)·bin)).
pub fn histogram(a: &[u64], b: &[u64], shift_ps: i64, half_range_ps: u64, bin_ps: u64, hist: &mut [u64]) {
    histogram_on(lanes::isa(), a, b, shift_ps, half_range_ps, bin_ps, hist)
}

/// [`histogram`] with the lanes' instruction set chosen (tests compare them).
pub fn histogram_on(isa: lanes::Isa, a: &[u64], b: &[u64], shift_ps: i64, half_range_ps: u64, bin_ps: u64, hist: &mut [u64]) {
    let half = half_range_ps as i64;
    let n_fast = fast_prefix(a, b, shift_ps + half);
    let mut g = [Group::histogram(shift_ps, half, bin_ps, hist.len())];
    lanes::count_groups_on(isa, &a[..n_fast], b, &mut g);
    for (h, c) in hist.iter_mut().zip(&g[0].hist.as_ref().expect("a histogram group").counts) {
        *h += c;
    }
    let Some(&first) = a.get(n_fast) else { return };
    let mut lo = lower_bound(b, first as i64 + shift_ps - half);
    for &x in &a[n_fast..] {
        let base = x as i64 + shift_ps;
        while lo < b.len() && (b[lo] as i64) < base - half {
            lo += 1;
        }
        add_pairs(&b[lo..], base, half, bin_ps, hist);
    }
}

/// Bin the Δ = b − base of the leading `b` with Δ < half (all have Δ ≥ −half).
#[inline(always)]
fn add_pairs(b: &[u64], base: i64, half: i64, bin_ps: u64, hist: &mut [u64]) {
    for &v in b {
        let d = v as i64 - base;
        if d >= half {
            break;
        }
        let bin = ((d + half) as u64 / bin_ps) as usize;
        if bin < hist.len() {
            hist[bin] += 1;
        }
    }
}

/// Window profile around a centre, for every window up to `max_half` at once.
/// With P = max_half + 1: `acc[m]` += pairs with |Δ − c| = m, and `acc[P + m]` += A events
/// whose nearest partner has |Δ − c| = m (m ≤ max_half), where Δ − c = b − a − shift.
/// Prefix sums give, for every w with ⌊w/2⌋ ≤ max_half, the pair and heralded counts
/// exactly, from one pass.
pub fn profile(a: &[u64], b: &[u64], shift_ps: i64, max_half_ps: u64, acc: &mut [u64]) {
    let Some(&first) = a.first() else { return };
    let h = max_half_ps as i64;
    let p = max_half_ps as usize + 1;
    let mut lo = lower_bound(b, first as i64 + shift_ps - h);
    let n = b.len();
    for &x in a {
        let base = x as i64 + shift_ps;
        while lo < n && (b[lo] as i64) < base - h {
            lo += 1;
        }
        let mut j = lo;
        let mut nearest = usize::MAX;
        while j < n {
            let d = b[j] as i64 - base;
            if d > h {
                break;
            }
            let m = d.unsigned_abs() as usize;
            acc[m] += 1;
            nearest = nearest.min(m);
            j += 1;
        }
        if nearest != usize::MAX {
            acc[p + nearest] += 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Sorted pseudo-random tags with clusters and ties, from a splitmix-style hash.
    fn tags(n: usize, seed: u64, mean_gap: u64) -> Vec<u64> {
        let mut t = 0u64;
        (0..n as u64)
            .map(|i| {
                let z = (i ^ seed).wrapping_mul(0x9E37_79B9_7F4A_7C15).rotate_left(29).wrapping_mul(0xBF58_476D_1CE4_E5B9);
                t += (z >> 40) % (2 * mean_gap);
                t
            })
            .collect()
    }

    #[test]
    fn several_windows_in_one_pass_match_the_rule() {
        // Checked against the rule 2·|Δ| ≤ w applied to every pair (rule::coincides), over
        // windows narrow and wide against the spacing, so the stride step, its fallbacks
        // and the tail loop all run.
        let a = tags(3000, 1, 40);
        let b = tags(3300, 2, 36);
        for half in [0u64, 3, 20, 90, 700] {
            let shifts = [-9000i64, -150, 0, 7, 150, 2000];
            let mut got = vec![WindowCount::default(); shifts.len()];
            count_windows(&a, &b, &shifts, half, &mut got);
            for (&s, g) in shifts.iter().zip(&got) {
                let mut want = WindowCount::default();
                for &x in &a {
                    let k = b.iter().filter(|&&y| crate::engine::rule::coincides(y as i64 - x as i64 - s, 2 * half)).count() as u64;
                    want.pairs += k;
                    want.heralded += (k > 0) as u64;
                }
                assert_eq!(*g, want, "shift {s}, half {half}");
            }
        }
    }

    #[test]
    fn small_window_count() {
        // a = 10: b in [10+2−3, 10+2+3] = [9, 15] → 9, 15; a = 100: [99, 105] → 100
        let a = [10u64, 100];
        let b = [8u64, 9, 15, 16, 100];
        let c = count_window(&a, &b, 2, 3);
        assert_eq!(c, WindowCount { pairs: 3, heralded: 2 });
    }
}
