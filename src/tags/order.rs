//! The ordering predicates readers and engine both apply to a channel's tags: ascending
//! (equal neighbours allowed) and below [`MAX_TIME_PS`], vectorised where the CPU allows.

use super::MAX_TIME_PS;

/// Whether `w` is ascending (equal values allowed) and below [`MAX_TIME_PS`]: the strict
/// readers' check as one yes/no, for the engine's fused pass (which, on a no, has the
/// reader locate the failure).
pub fn ascending_below_limit(w: &[u64]) -> bool {
    !descends(w) && w.last().is_none_or(|&t| t < MAX_TIME_PS)
}

/// Whether any value of `w` is below the one before it, vectorised where the CPU allows
/// (x86-64's baseline has no 64-bit vector compare; AVX2 has a signed one, AVX-512 an
/// unsigned one into mask registers: a third fewer cycles per GB than AVX2 here). The
/// choice follows [`crate::sys::cpu::isa`], so `TAGSIEVE_ISA` lowers it as in the engine.
pub fn descends(w: &[u64]) -> bool {
    #[inline(always)]
    fn plain(w: &[u64]) -> bool {
        let n = w.len().saturating_sub(1);
        w[1..].iter().zip(&w[..n]).fold(false, |acc, (x, y)| acc | (x < y))
    }
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn avx2(w: &[u64]) -> bool {
        plain(w)
    }
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f")]
    unsafe fn avx512(w: &[u64]) -> bool {
        use std::arch::x86_64::*;
        // Steps i → i+1 for i in 0..n, 32 at a time in four 8-wide unsigned compares of
        // w[i..i+8] with w[i+1..i+9] (unaligned loads), their masks OR-ed; the rest plainly.
        let n = w.len() - 1;
        let p = w.as_ptr();
        let mut any = 0u8;
        let mut i = 0;
        while i + 32 <= n {
            let m = |j: usize| {
                let x = _mm512_loadu_si512(p.add(i + j) as *const __m512i);
                let y = _mm512_loadu_si512(p.add(i + j + 1) as *const __m512i);
                _mm512_cmplt_epu64_mask(y, x)
            };
            any |= m(0) | m(8) | m(16) | m(24);
            i += 32;
        }
        any != 0 || plain(&w[i..])
    }
    if w.len() < 2 {
        return false;
    }
    match crate::sys::cpu::isa() {
        // SAFETY: `isa()` reports AVX-512F only when the CPU has it.
        #[cfg(target_arch = "x86_64")]
        crate::sys::cpu::Isa::Avx512 => unsafe { avx512(w) },
        // SAFETY: `isa()` reports AVX2 only when the CPU has it.
        #[cfg(target_arch = "x86_64")]
        crate::sys::cpu::Isa::Avx2 => unsafe { avx2(w) },
        _ => plain(w),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vector_descent_test_equals_the_plain_comparison() {
        // Against the definition (any w[i+1] < w[i]), on ascending runs of every length up
        // to 100 with one descent placed at each step in turn, with equal neighbours and
        // with values above 2^63 (where a signed compare would be wrong).
        let naive = |w: &[u64]| w.windows(2).any(|p| p[1] < p[0]);
        for len in 0..100usize {
            let base: Vec<u64> = (0..len as u64).map(|i| (1 << 63) - 50 + i / 2 * 3).collect();
            assert_eq!(descends(&base), naive(&base), "len {len}");
            assert!(!descends(&base));
            for i in 1..len {
                let mut w = base.clone();
                w[i] = w[i - 1] - 1;
                assert_eq!(descends(&w), naive(&w), "len {len}, descent at {i}");
                assert!(descends(&w));
            }
        }
    }
}
