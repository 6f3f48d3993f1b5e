//! The one coincidence rule, in integer picoseconds.
//!
//! Each channel X has a delay d_X (how late its signals arrive). For events a on A and
//! b on B, Δ = (b − d_B) − (a − d_A) = b − a − δ with δ = d_B − d_A. They coincide in a
//! window of w ps when 2·|Δ| ≤ w, i.e. |Δ| ≤ ⌊w/2⌋ (Δ is an integer). Every such pair
//! counts once. With ps-resolution tags, a window accepts 2⌊w/2⌋ + 1 distinct Δ values:
//! that is the width used for accidental estimates ([`effective_width_ps`]).

use crate::{Error, Result};

/// Largest |delay|, window, span or offset: 2^60 ps (about 13 days), so sums cannot overflow i64.
pub const MAX_SPAN_PS: u64 = 1 << 60;

/// Half-width h = ⌊w/2⌋ of a window of `window_ps`.
#[inline]
pub fn half_width_ps(window_ps: u64) -> u64 {
    window_ps / 2
}

/// Number of distinct integer Δ values a window accepts: 2⌊w/2⌋ + 1.
#[inline]
pub fn effective_width_ps(window_ps: u64) -> u64 {
    2 * half_width_ps(window_ps) + 1
}

/// Whether Δ falls in the window: 2·|Δ| ≤ w (the rule itself, for references and tests).
#[inline]
pub fn coincides(delta_ps: i64, window_ps: u64) -> bool {
    2 * (delta_ps.unsigned_abs() as u128) <= window_ps as u128
}

/// Reject a window that is 0 or absurdly large.
pub fn check_window(window_ps: u64, what: &str) -> Result<()> {
    if window_ps == 0 {
        return Err(Error::Usage(format!("{what}: a window of 0 ps accepts only Δ = 0; give a window > 0 ps")));
    }
    if window_ps > MAX_SPAN_PS {
        return Err(Error::Usage(format!("{what}: window {window_ps} ps exceeds the limit of {MAX_SPAN_PS} ps")));
    }
    Ok(())
}

/// Reject a delay or offset whose magnitude could overflow the integer arithmetic.
pub fn check_shift(shift_ps: i64, what: &str) -> Result<()> {
    if shift_ps.unsigned_abs() > MAX_SPAN_PS {
        return Err(Error::Usage(format!("{what}: |{shift_ps}| ps exceeds the limit of {MAX_SPAN_PS} ps")));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rule_edges() {
        // w = 1000: |Δ| ≤ 500 accepted, 501 rejected; w = 1001 the same (⌊1001/2⌋ = 500).
        assert!(coincides(500, 1000) && coincides(-500, 1000) && !coincides(501, 1000));
        assert!(coincides(500, 1001) && !coincides(-501, 1001));
        assert!(coincides(0, 0) && !coincides(1, 0) && coincides(1, 2));
        assert_eq!(effective_width_ps(1000), 1001);
        assert_eq!(effective_width_ps(1001), 1001);
    }
}
