//! Binary searches over sorted tag slices: the first element at or after a (possibly
//! negative) time, the first after it, and a galloping variant for a search known to land
//! near a given start. Every kernel, lane and slicing pass finds its B range with these.

/// Index of the first element of `b` that is ≥ `x` (x may be negative).
#[inline]
pub fn lower_bound(b: &[u64], x: i64) -> usize {
    if x <= 0 {
        return 0;
    }
    b.partition_point(|&v| v < x as u64)
}

/// [`lower_bound`] when the answer is known to be ≥ `from`: gallops up from `from`
/// (1, 2, 4, … elements) and then bisects the last step, so a search that lands near
/// `from` touches only the few cache lines around it instead of a path from B's middle.
#[inline]
pub fn lower_bound_from(b: &[u64], from: usize, x: i64) -> usize {
    let from = from.min(b.len());
    if x <= 0 {
        return from;
    }
    let below = |i: usize| b[i] < x as u64;
    let (mut lo, mut step) = (from, 1usize);
    while lo + step <= b.len() && below(lo + step - 1) {
        lo += step;
        step *= 2;
    }
    let hi = (lo + step).min(b.len());
    lo + b[lo..hi].partition_point(|&v| v < x as u64)
}

/// Index of the first element of `b` that is > `x`.
#[inline]
pub fn upper_bound(b: &[u64], x: i64) -> usize {
    if x < 0 {
        return 0;
    }
    b.partition_point(|&v| v <= x as u64)
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
    fn galloping_lower_bound_equals_the_plain_one() {
        // Every query against every valid start (start ≤ the answer), ties included.
        let b = [3u64, 3, 5, 8, 8, 8, 13, 21, 34, 34, 55];
        for x in -2i64..60 {
            let want = lower_bound(&b, x);
            for from in 0..=want {
                assert_eq!(lower_bound_from(&b, from, x), want, "x {x}, from {from}");
            }
        }
        assert_eq!(lower_bound_from(&[], 0, 5), 0);
    }
}
