//! Serial kernels over sorted slices: window counts, delay histograms and window profiles.
//! Every kernel handles the A events it is given and may look at any B events; the
//! parallel driver ([`super::parallel`]) hands each task a fixed chunk of A.

/// Index of the first element of `b` that is ≥ `x` (x may be negative).
#[inline]
pub fn lower_bound(b: &[u64], x: i64) -> usize {
    if x <= 0 {
        return 0;
    }
    b.partition_point(|&v| v < x as u64)
}

/// Index of the first element of `b` that is > `x`.
#[inline]
pub fn upper_bound(b: &[u64], x: i64) -> usize {
    if x < 0 {
        return 0;
    }
    b.partition_point(|&v| v <= x as u64)
}

/// Counts of one window position: pairs and heralded A events.
#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
pub struct WindowCount {
    pub pairs: u64,
    pub heralded: u64,
}

impl std::ops::Add for WindowCount {
    type Output = WindowCount;
    fn add(self, o: WindowCount) -> WindowCount {
        WindowCount { pairs: self.pairs + o.pairs, heralded: self.heralded + o.heralded }
    }
}

/// Count (a, b) with |b − a − shift| ≤ half for every a in `a`.
pub fn count_window(a: &[u64], b: &[u64], shift_ps: i64, half_ps: u64) -> WindowCount {
    let mut out = [WindowCount::default()];
    count_windows(a, b, &[shift_ps], half_ps, &mut out);
    out[0]
}

/// B elements the branch-free pointer step compares at once (see [`Pointers::step`]).
const STRIDE: usize = 4;
/// A events per block when counting several windows (8 KiB: stays in L1 across windows).
const BLOCK_EVENTS: usize = 1024;
/// Windows whose pointers one loop carries together (more would not stay in registers).
const GROUP: usize = 2;

/// Add to `out[k]` the pairs and heralded A events with |b − a − shifts[k]| ≤ half, for
/// every shift at once in one pass over `a` (the peak and the off-peak windows together).
///
/// Each window keeps two monotone pointers into B: `lo`, the first b ≥ a+shift−half, and
/// `hi`, at most the first b > a+shift+half. Both only move forward, so the pass is
/// O(|A| + |B|) per window, and the pair count comes without visiting pairs one by one in
/// wide windows. The windows sit side by side in the inner loop: their pointer chains are
/// independent, so the CPU overlaps them, and A and B are read from memory once however
/// many windows there are.
pub fn count_windows(a: &[u64], b: &[u64], shifts_ps: &[i64], half_ps: u64, out: &mut [WindowCount]) {
    assert_eq!(shifts_ps.len(), out.len(), "one result slot per shift");
    let Some(&first) = a.first() else { return };
    let h = half_ps as i64;
    let mut ptrs: Vec<Pointers> = shifts_ps
        .iter()
        .map(|&s| {
            let lo = lower_bound(b, first as i64 + s - h);
            Pointers { lo, hi: lo }
        })
        .collect();
    let n_fast = fast_prefix(a, b, shifts_ps.iter().max().copied().unwrap_or(0) + h);
    // Small blocks of A, and within a block the windows in groups of up to GROUP: one
    // loop carries a group's pointers side by side, so their independent load chains
    // overlap in the CPU, while the block (and its stretch of B) comes from memory once
    // and from cache for the other groups.
    for block in a[..n_fast].chunks(BLOCK_EVENTS) {
        let mut k = 0;
        while k < shifts_ps.len() {
            let g = (shifts_ps.len() - k).min(GROUP);
            let (sh, pt, sl) = (&shifts_ps[k..k + g], &mut ptrs[k..k + g], &mut out[k..k + g]);
            match g {
                2 => run_two(block, b, sh, h, pt, sl),
                _ => run_group::<1>(block, b, sh, h, pt, sl),
            }
            k += g;
        }
    }
    // The last few A events, whose pointers may run into B's end: plain bounds-checked loop.
    for ((&s, p), slot) in shifts_ps.iter().zip(ptrs.iter()).zip(out.iter_mut()) {
        let c = count_scalar(&a[n_fast..], b, s, h, p.lo);
        slot.pairs += c.pairs;
        slot.heralded += c.heralded;
    }
}

/// Count a block of A events (all within the stride-safe prefix) for N windows at once,
/// their pointers and sums in locals (registers) for the length of the block.
fn run_group<const N: usize>(a: &[u64], b: &[u64], shifts_ps: &[i64], h: i64, ptrs: &mut [Pointers], out: &mut [WindowCount]) {
    let left: [i64; N] = std::array::from_fn(|k| shifts_ps[k] - h);
    let right: [i64; N] = std::array::from_fn(|k| shifts_ps[k] + h);
    let mut q: [Pointers; N] = std::array::from_fn(|k| ptrs[k]);
    let mut sums = [WindowCount::default(); N];
    for &x in a {
        for k in 0..N {
            let n = q[k].step(b, x as i64 + left[k], x as i64 + right[k]);
            sums[k].pairs += n;
            sums[k].heralded += (n > 0) as u64;
        }
    }
    for k in 0..N {
        ptrs[k] = q[k];
        out[k] = out[k] + sums[k];
    }
}

/// [`run_group`] for two windows, written out so both pointer pairs stay in registers.
fn run_two(a: &[u64], b: &[u64], shifts_ps: &[i64], h: i64, ptrs: &mut [Pointers], out: &mut [WindowCount]) {
    let (l0, r0, l1, r1) = (shifts_ps[0] - h, shifts_ps[0] + h, shifts_ps[1] - h, shifts_ps[1] + h);
    let (mut p0, mut p1) = (ptrs[0], ptrs[1]);
    let (mut s0, mut s1) = (WindowCount::default(), WindowCount::default());
    for &x in a {
        let x = x as i64;
        let n0 = p0.step(b, x + l0, x + r0);
        let n1 = p1.step(b, x + l1, x + r1);
        s0.pairs += n0;
        s0.heralded += (n0 > 0) as u64;
        s1.pairs += n1;
        s1.heralded += (n1 > 0) as u64;
    }
    (ptrs[0], ptrs[1]) = (p0, p1);
    out[0] = out[0] + s0;
    out[1] = out[1] + s1;
}

/// One window's place in B: `lo` = first b ≥ left of the last A event; `hi` ≤ the first
/// b > right (kept exact only when the slow path needs it).
#[derive(Clone, Copy)]
struct Pointers {
    lo: usize,
    hi: usize,
}

impl Pointers {
    /// Move to the window [left, right] of the next A event; return its partner count.
    ///
    /// The hot step. Between two A events `lo` moves by about |B|/|A| ≈ 1 element, but by
    /// 0, 1 or 2 at random, so a `while` loop would mispredict on most events. Instead the
    /// next STRIDE elements are loaded once (the loads do not depend on each other) and
    /// two branch-free counts taken: `below` (< left) is how far `lo` moves, `upto` (≤ right)
    /// − `below` the partners, as B is sorted. Only when either count fills the stride,
    /// rare for a window narrow against the tag spacing, does the exact loop run, with a
    /// `hi` that never moves back, so the pass stays O(|A| + |B|) for wide windows too.
    /// The caller guarantees lo + STRIDE ≤ |B| (see [`fast_prefix`]).
    #[inline(always)]
    fn step(&mut self, b: &[u64], left: i64, right: i64) -> u64 {
        let ahead = &b[self.lo..self.lo + STRIDE];
        let below: usize = ahead.iter().map(|&v| ((v as i64) < left) as usize).sum();
        let upto: usize = ahead.iter().map(|&v| ((v as i64) <= right) as usize).sum();
        if below < STRIDE && upto < STRIDE {
            self.lo += below;
            return (upto - below) as u64;
        }
        let mut lo = self.lo + below;
        while lo < b.len() && (b[lo] as i64) < left {
            lo += 1;
        }
        let mut hi = self.hi.max(lo);
        while hi < b.len() && (b[hi] as i64) <= right {
            hi += 1;
        }
        (self.lo, self.hi) = (lo, hi);
        (hi - lo) as u64
    }
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

/// Add to `hist` the Δ = b − a − shift of every pair with −span ≤ Δ < span, in bins of
/// `bin_ps` starting at −span (bin i covers [−span + i·bin, −span + (i+1)·bin)).
pub fn histogram(a: &[u64], b: &[u64], shift_ps: i64, span_ps: u64, bin_ps: u64, hist: &mut [u64]) {
    let Some(&first) = a.first() else { return };
    let span = span_ps as i64;
    let mut lo = lower_bound(b, first as i64 + shift_ps - span);
    let n_fast = fast_prefix(a, b, shift_ps + span);
    for &x in &a[..n_fast] {
        // Same stride step as the count (see [`Pointers::step`]): `lo` moves by `below`,
        // and the pairs in the stride are b[lo + below .. lo + upto]; a full stride of
        // either kind falls back to the plain loops.
        let base = x as i64 + shift_ps; // Δ = b − base
        let ahead = &b[lo..lo + STRIDE];
        let below: usize = ahead.iter().map(|&v| ((v as i64) < base - span) as usize).sum();
        let upto: usize = ahead.iter().map(|&v| ((v as i64) < base + span) as usize).sum();
        if below == STRIDE {
            lo += below;
            while lo < b.len() && (b[lo] as i64) < base - span {
                lo += 1;
            }
            add_pairs(&b[lo..], base, span, bin_ps, hist);
            continue;
        }
        lo += below;
        let in_stride = if upto == STRIDE { b.len() - lo } else { upto - below };
        add_pairs(&b[lo..lo + in_stride], base, span, bin_ps, hist);
    }
    for &x in &a[n_fast..] {
        let base = x as i64 + shift_ps;
        while lo < b.len() && (b[lo] as i64) < base - span {
            lo += 1;
        }
        add_pairs(&b[lo..], base, span, bin_ps, hist);
    }
}

/// Bin the Δ = b − base of the leading `b` with Δ < span (all have Δ ≥ −span).
#[inline(always)]
fn add_pairs(b: &[u64], base: i64, span: i64, bin_ps: u64, hist: &mut [u64]) {
    for &v in b {
        let d = v as i64 - base;
        if d >= span {
            break;
        }
        let bin = ((d + span) as u64 / bin_ps) as usize;
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

    #[test]
    fn bounds_handle_negative_queries() {
        let b = [0u64, 5, 5, 9];
        assert_eq!(lower_bound(&b, -3), 0);
        assert_eq!(upper_bound(&b, -1), 0);
        assert_eq!(lower_bound(&b, 5), 1);
        assert_eq!(upper_bound(&b, 5), 3);
        assert_eq!(lower_bound(&b, 10), 4);
    }

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
