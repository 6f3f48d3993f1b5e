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
///
/// Two monotone pointers bracket each a's partners: `lo` is the first b ≥ a+shift−half,
/// `hi` the first b > a+shift+half. Both only move forward, so the pass is O(|A| + |B|)
/// and touches each cache line once; the pair count is `hi − lo` without visiting pairs,
/// which keeps wide windows (10^10 pairs) as cheap as narrow ones.
pub fn count_window(a: &[u64], b: &[u64], shift_ps: i64, half_ps: u64) -> WindowCount {
    let Some(&first) = a.first() else { return WindowCount::default() };
    let h = half_ps as i64;
    let mut lo = lower_bound(b, first as i64 + shift_ps - h);
    let mut hi = lo;
    let (mut pairs, mut heralded) = (0u64, 0u64);
    let n = b.len();
    for &x in a {
        let left = x as i64 + shift_ps - h;
        let right = x as i64 + shift_ps + h;
        while lo < n && (b[lo] as i64) < left {
            lo += 1;
        }
        if hi < lo {
            hi = lo;
        }
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
    let n = b.len();
    for &x in a {
        let base = x as i64 + shift_ps; // Δ = b − base
        while lo < n && (b[lo] as i64) < base - span {
            lo += 1;
        }
        let mut j = lo;
        while j < n {
            let d = b[j] as i64 - base;
            if d >= span {
                break;
            }
            let bin = ((d + span) as u64 / bin_ps) as usize;
            if bin < hist.len() {
                hist[bin] += 1;
            }
            j += 1;
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

    #[test]
    fn small_window_count() {
        // a = 10: b in [10+2−3, 10+2+3] = [9, 15] → 9, 15; a = 100: [99, 105] → 100
        let a = [10u64, 100];
        let b = [8u64, 9, 15, 16, 100];
        let c = count_window(&a, &b, 2, 3);
        assert_eq!(c, WindowCount { pairs: 3, heralded: 2 });
    }
}
