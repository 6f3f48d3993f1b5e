//! Interleaved lanes: the hot loops of the window counts and the delay histogram.
//!
//! Every kernel walks A in time order while a pointer into B follows it (the first b at
//! or after the window's left edge). Each step's B load depends on where the previous
//! step left the pointer, so one walk is a chain of dependent loads and runs at the
//! latency of that chain, not at the machine's throughput. Here A is cut into [`LANES`]
//! contiguous lanes, each with its own pointer (found by binary search at the lane's first
//! event), and the loop takes one event of every lane in turn: the chains are independent,
//! so the CPU overlaps them. Counts are integer sums over disjoint sets of A events, so they
//! do not depend on how A is cut.
//!
//! One step compares the next [`STRIDE`] B elements with the event's window edges at once
//! (the private `Compare` trait): `below` (< left) is how far the pointer moves,
//! `upto` (≤ right) − `below` the partners, as B is sorted. The loops are compiled twice, for the baseline target and
//! with AVX2 and with AVX-512 (the compare becomes vector compares); [`isa`] picks at run time.

pub use crate::sys::cpu::{detect, isa, Isa};
use super::search::{lower_bound, lower_bound_from};
use super::tables::WindowCount;

/// Independent pointer chains one loop carries.
pub const LANES: usize = 8;
/// B elements one step compares at once. Between two A events the pointer moves by about
/// |B|/|A| ≈ 1 element, but by 4 or more often enough (a few % of events at equal rates)
/// that a stride of 4 would leave the fast path too often; 8 almost never.
pub const STRIDE: usize = 8;

/// The stride compare: of `w[..STRIDE]` (ascending), how many v have v − x < `left` and
/// v − x ≤ `right`. Comparing differences with the fixed edges lets the vector versions
/// broadcast x once and keep the edges in registers for the whole loop.
///
/// Private on purpose: the [`Avx2`] and [`Avx512`] versions execute AVX2 / AVX-512F
/// instructions from safe methods, which is sound only because they are reached solely
/// from `count_groups_avx2` / `count_groups_avx512` (compiled with those features) after
/// [`detect`] found them on the CPU. Nothing outside this file can name them.
trait Compare {
    fn below_upto(w: &[u64], x: i64, left: i64, right: i64) -> (usize, usize);
    /// Only `below`: the step of a pointer whose partners are rare (off-peak windows).
    fn below(w: &[u64], x: i64, left: i64) -> usize;
}

/// Plain integer compares (any CPU).
struct Portable;

impl Compare for Portable {
    #[inline(always)]
    fn below_upto(w: &[u64], x: i64, left: i64, right: i64) -> (usize, usize) {
        let w = &w[..STRIDE];
        let mut below = 0usize;
        let mut upto = 0usize;
        for &v in w {
            below += ((v as i64 - x) < left) as usize;
            upto += ((v as i64 - x) <= right) as usize;
        }
        (below, upto)
    }

    #[inline(always)]
    fn below(w: &[u64], x: i64, left: i64) -> usize {
        w[..STRIDE].iter().map(|&v| ((v as i64 - x) < left) as usize).sum()
    }
}

/// AVX2: four 4-wide compares of signed 64-bit values (tags are < 2^62 ps, so signed
/// is exact). Requires AVX2 (see [`Compare`]).
#[cfg(target_arch = "x86_64")]
struct Avx2;

#[cfg(target_arch = "x86_64")]
impl Compare for Avx2 {
    #[inline(always)]
    fn below_upto(w: &[u64], x: i64, left: i64, right: i64) -> (usize, usize) {
        use std::arch::x86_64::*;
        let w = &w[..STRIDE];
        // SAFETY: `w` holds eight u64 (64 bytes, unaligned loads); this is only reached
        // from functions compiled with AVX2 and called after the CPU was checked for it.
        unsafe {
            let xs = _mm256_set1_epi64x(x);
            let v0 = _mm256_sub_epi64(_mm256_loadu_si256(w.as_ptr() as *const __m256i), xs);
            let v1 = _mm256_sub_epi64(_mm256_loadu_si256(w.as_ptr().add(4) as *const __m256i), xs);
            let (l, r) = (_mm256_set1_epi64x(left), _mm256_set1_epi64x(right + 1));
            let mask = |c0: __m256i, c1: __m256i| {
                let lo = _mm256_movemask_pd(_mm256_castsi256_pd(c0)) as u64;
                let hi = _mm256_movemask_pd(_mm256_castsi256_pd(c1)) as u64;
                (lo | hi << 4).count_ones() as usize
            };
            let below = mask(_mm256_cmpgt_epi64(l, v0), _mm256_cmpgt_epi64(l, v1));
            let upto = mask(_mm256_cmpgt_epi64(r, v0), _mm256_cmpgt_epi64(r, v1));
            (below, upto)
        }
    }

    #[inline(always)]
    fn below(w: &[u64], x: i64, left: i64) -> usize {
        use std::arch::x86_64::*;
        let w = &w[..STRIDE];
        // SAFETY: as in `below_upto`.
        unsafe {
            let l = _mm256_set1_epi64x(x + left);
            let v0 = _mm256_loadu_si256(w.as_ptr() as *const __m256i);
            let v1 = _mm256_loadu_si256(w.as_ptr().add(4) as *const __m256i);
            let lo = _mm256_movemask_pd(_mm256_castsi256_pd(_mm256_cmpgt_epi64(l, v0))) as u64;
            let hi = _mm256_movemask_pd(_mm256_castsi256_pd(_mm256_cmpgt_epi64(l, v1))) as u64;
            (lo | hi << 4).count_ones() as usize
        }
    }
}

/// AVX-512: two 8-wide compares into mask registers. Requires AVX-512F (see [`Compare`]).
#[cfg(target_arch = "x86_64")]
struct Avx512;

#[cfg(target_arch = "x86_64")]
impl Compare for Avx512 {
    #[inline(always)]
    fn below_upto(w: &[u64], x: i64, left: i64, right: i64) -> (usize, usize) {
        use std::arch::x86_64::*;
        let w = &w[..STRIDE];
        // SAFETY: `w` holds eight u64 (64 bytes, unaligned load); this is only reached from
        // functions compiled with AVX-512F and called after the CPU was checked for it.
        unsafe {
            let v = _mm512_sub_epi64(_mm512_loadu_si512(w.as_ptr() as *const __m512i), _mm512_set1_epi64(x));
            let below = _mm512_cmplt_epi64_mask(v, _mm512_set1_epi64(left));
            let upto = _mm512_cmple_epi64_mask(v, _mm512_set1_epi64(right));
            (below.count_ones() as usize, upto.count_ones() as usize)
        }
    }

    #[inline(always)]
    fn below(w: &[u64], x: i64, left: i64) -> usize {
        use std::arch::x86_64::*;
        let w = &w[..STRIDE];
        // SAFETY: as in `below_upto`.
        unsafe {
            let v = _mm512_loadu_si512(w.as_ptr() as *const __m512i);
            _mm512_cmplt_epi64_mask(v, _mm512_set1_epi64(x + left)).count_ones() as usize
        }
    }
}

/// A's lanes: `LANES` equal contiguous slices of `a`, and what is left after them.
///
/// The lane length is trimmed (by whole 64-byte lines) so that the lanes' starts fall in
/// different sets of a 4 KiB-way L1 cache: with A in power-of-two chunks, equal lanes of
/// 2^13 events would start 64 KiB apart, all in one set, and the eight streams would evict
/// each other (measured: half the speed of trimmed lanes).
pub fn split(a: &[u64]) -> Option<([&[u64]; LANES], &[u64])> {
    let mut n = a.len() / LANES;
    // Lines per lane modulo the 64 sets; lane l starts in set l·j, distinct for all
    // lanes when gcd(j, 64) ≤ 64 / LANES.
    let sets_apart = |n: usize| gcd((n / 8) % 64, 64) <= 64 / LANES;
    while n > 16 && !sets_apart(n) {
        n -= 8;
    }
    if n == 0 {
        return None;
    }
    Some((std::array::from_fn(|l| &a[l * n..(l + 1) * n]), &a[LANES * n..]))
}

fn gcd(mut x: usize, mut y: usize) -> usize {
    while y != 0 {
        (x, y) = (y, x % y);
    }
    x
}

/// A group of windows served by one pointer: [left, right] is the b − a it covers. A lone
/// window (`shifts.len() == 1`) counts its partners directly; a group of several sorts
/// its rare partners into windows ([`Group::bin`]).
pub struct Group {
    pub left: i64,
    pub right: i64,
    pub h: i64,
    /// The group's shifts (ascending) and where each one's result goes.
    pub shifts: Vec<i64>,
    pub slots: Vec<usize>,
    pub sums: Vec<WindowCount>,
    /// Instead of windows, a delay histogram over [left, right]: partner b of event x
    /// goes to bin (b − x − left) / bin_ps.
    pub hist: Option<Bins>,
}

/// Histogram bins of a [`Group`].
pub struct Bins {
    pub bin_ps: u64,
    pub counts: Vec<u64>,
    /// A round's first partners, as offsets b − a − left, binned after the round.
    pending: Vec<u64>,
}

impl Group {
    /// A lone window or a group of windows at `shifts` (ascending), half-width `h`.
    pub fn windows(shifts: Vec<i64>, slots: Vec<usize>, h: i64) -> Self {
        Group { left: shifts[0] - h, right: shifts[shifts.len() - 1] + h, h, sums: vec![WindowCount::default(); shifts.len()], slots, shifts, hist: None }
    }

    /// The delay histogram of Δ = b − a − shift over [−span, span) in `nbins` bins of `bin_ps`.
    pub fn histogram(shift: i64, span: i64, bin_ps: u64, nbins: usize) -> Self {
        Group {
            left: shift - span,
            right: shift + span - 1,
            h: 0,
            shifts: vec![],
            slots: vec![],
            sums: vec![],
            hist: Some(Bins { bin_ps, counts: vec![0; nbins], pending: vec![0; ROUND * LANES] }),
        }
    }

    /// Whether partners go to [`Group::bin`] (several windows, or a histogram) rather than
    /// being counted in the loop.
    fn sorts_partners(&self) -> bool {
        self.shifts.len() != 1
    }

    /// Sort the partners b[from..to] of event x into the group's windows or bins.
    #[cold]
    #[inline(never)]
    pub fn bin(&mut self, b: &[u64], from: usize, to: usize, x: i64) {
        if let Some(h) = &mut self.hist {
            for &v in &b[from..to] {
                let i = ((v as i64 - x - self.left) as u64 / h.bin_ps) as usize;
                if let Some(c) = h.counts.get_mut(i) {
                    *c += 1;
                }
            }
            return;
        }
        let mut hit = 0u64;
        for &v in &b[from..to] {
            let d = v as i64 - x;
            for (j, &s) in self.shifts.iter().enumerate() {
                if (d - s).abs() <= self.h {
                    self.sums[j].pairs += 1;
                    hit |= 1 << j;
                }
            }
        }
        while hit != 0 {
            self.sums[hit.trailing_zeros() as usize].heralded += 1;
            hit &= hit - 1;
        }
    }
}

/// The exact step when the stride is full (rare for windows narrow against the tag
/// spacing): plain loops from `lo`, with a `hi` that never moves back, so a wide lone
/// window still costs O(|A| + |B|). Returns the new (lo, hi): the partners are b[lo..hi].
#[cold]
#[inline(never)]
fn wide_step(b: &[u64], mut lo: usize, hi: usize, left: i64, right: i64) -> (usize, usize) {
    while lo < b.len() && (b[lo] as i64) < left {
        lo += 1;
    }
    let mut hi = hi.max(lo);
    while hi < b.len() && (b[hi] as i64) <= right {
        hi += 1;
    }
    (lo, hi)
}

/// Window counts (or histogram) of every group over `a`, every event of which must be
/// stride-safe for every group (lo + STRIDE ≤ |B|; see `kernels::fast_prefix`), with the
/// instructions of `isa` (normally [`isa()`]; tests compare them); one the CPU lacks falls
/// back to the best it has.
pub fn count_groups_on(isa: Isa, a: &[u64], b: &[u64], groups: &mut [Group]) {
    match isa.min(detect()) {
        // SAFETY (both): `isa()` found the features the function is compiled for.
        #[cfg(target_arch = "x86_64")]
        Isa::Avx512 => unsafe { count_groups_avx512(a, b, groups) },
        #[cfg(target_arch = "x86_64")]
        Isa::Avx2 => unsafe { count_groups_avx2(a, b, groups) },
        _ => count_groups_with::<Portable>(a, b, groups),
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,popcnt")]
unsafe fn count_groups_avx2(a: &[u64], b: &[u64], groups: &mut [Group]) {
    count_groups_with::<Avx2>(a, b, groups)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,popcnt")]
unsafe fn count_groups_avx512(a: &[u64], b: &[u64], groups: &mut [Group]) {
    count_groups_with::<Avx512>(a, b, groups)
}

/// Events per lane copied into the interleaved buffer at a time.
const ROUND: usize = 128;

#[inline(always)]
fn count_groups_with<C: Compare>(a: &[u64], b: &[u64], groups: &mut [Group]) {
    let rest = match split(a) {
        Some((lanes, rest)) => {
            count_rounds::<C>(&lanes, b, groups);
            rest
        }
        None => a,
    };
    if !rest.is_empty() {
        for g in groups.iter_mut() {
            count_serial::<C>(g, rest, b);
        }
    }
}

/// The lanes round by round: each round's events are copied interleaved (event i of lane
/// l at i·LANES + l), so one pointer walks all lanes, and every group runs over the round
/// with its eight lane pointers in registers ([`group_round`]).
#[inline(always)]
fn count_rounds<C: Compare>(lanes: &[&[u64]; LANES], b: &[u64], groups: &mut [Group]) {
    let n = lanes[0].len();
    // Lane l starts after lane l − 1 in time, so its pointer is found by galloping up from
    // that lane's (a plain bisection from B's middle would miss the cache at every level).
    let mut lo: Vec<[usize; LANES]> = groups
        .iter()
        .map(|g| {
            let mut at = [0usize; LANES];
            for l in 0..LANES {
                let x = lanes[l][0] as i64 + g.left;
                at[l] = if l == 0 { lower_bound(b, x) } else { lower_bound_from(b, at[l - 1], x) };
            }
            at
        })
        .collect();
    let mut hi = lo.clone();
    let mut buf = [0u64; ROUND * LANES];
    let mut r = 0;
    while r < n {
        let m = ROUND.min(n - r);
        for (i, row) in buf.chunks_exact_mut(LANES).take(m).enumerate() {
            for (slot, lane) in row.iter_mut().zip(lanes) {
                *slot = lane[r + i];
            }
        }
        let xs = &buf[..m * LANES];
        for ((g, lo), hi) in groups.iter_mut().zip(lo.iter_mut()).zip(hi.iter_mut()) {
            match (g.hist.is_some(), g.sorts_partners()) {
                (true, _) => group_round::<C, HISTOGRAM>(g, xs, b, lo, hi),
                (false, false) => group_round::<C, LONE>(g, xs, b, lo, hi),
                (false, true) => group_round::<C, WINDOWS>(g, xs, b, lo, hi),
            }
        }
        r += m;
    }
}

/// What a group does with an event's partners: count them (a lone window), sort them into
/// windows ([`Group::bin`]; the step looks at the left edge only, as partners are rare),
/// or bin them into the histogram (first partners listed per round and binned after it).
const LONE: usize = 0;
const WINDOWS: usize = 1;
const HISTOGRAM: usize = 2;

/// Exact u64 division by a constant q for dividends below 2^32: ⌊d·m / 2^64⌋ with
/// m = ⌈2^64 / q⌉ (Lemire, Kaser & Kurz, Software: Practice and Experience 49, 953 (2019)).
#[derive(Clone, Copy)]
struct Divider {
    q: u64,
    m: u128,
    fast: bool,
}

impl Divider {
    /// For dividends below `limit`.
    fn new(q: u64, limit: u64) -> Self {
        let q = q.max(1);
        Divider { q, m: (u64::MAX / q) as u128 + 1, fast: limit <= 1 << 32 && q > 1 && q < 1 << 32 }
    }

    #[inline(always)]
    fn div(self, d: u64) -> u64 {
        if self.fast { ((d as u128 * self.m) >> 64) as u64 } else { d / self.q }
    }
}

/// One group over interleaved events `xs` (rows of LANES), the lane pointers in locals.
#[inline(always)]
fn group_round<C: Compare, const MODE: usize>(g: &mut Group, xs: &[u64], b: &[u64], lo: &mut [usize; LANES], hi: &mut [usize; LANES]) {
    let (left, right) = (g.left, g.right);
    let mut bins = g.hist.take();
    let div = Divider::new(bins.as_ref().map_or(1, |h| h.bin_ps), (right - left + 1) as u64);
    let [mut p0, mut p1, mut p2, mut p3, mut p4, mut p5, mut p6, mut p7] = *lo;
    let (mut pairs, mut heralded) = (0u64, 0u64);
    let mut n_pending = 0usize;
    for row in xs.chunks_exact(LANES) {
        macro_rules! lane {
            ($p:ident, $l:expr) => {{
                let x = row[$l] as i64;
                if MODE == WINDOWS {
                    // Partners are rare here: step on the left edge alone, then look at
                    // the one b the pointer stops at (≥ the left edge) for a partner.
                    let below = C::below(&b[$p..], x, left);
                    if below < STRIDE {
                        $p += below;
                        if (b[$p] as i64) - x <= right {
                            let (_, h2) = wide_step(b, $p, hi[$l], x + left, x + right);
                            hi[$l] = h2;
                            g.bin(b, $p, h2, x);
                        }
                    } else {
                        let (l2, h2) = wide_step(b, $p, hi[$l], x + left, x + right);
                        ($p, hi[$l]) = (l2, h2);
                        if h2 > l2 {
                            g.bin(b, l2, h2, x);
                        }
                    }
                } else {
                    let (below, upto) = C::below_upto(&b[$p..], x, left, right);
                    let (from, to) = if upto < STRIDE {
                        $p += below;
                        ($p, $p + (upto - below))
                    } else {
                        let (l2, h2) = wide_step(b, $p, hi[$l], x + left, x + right);
                        ($p, hi[$l]) = (l2, h2);
                        (l2, h2)
                    };
                    if MODE == HISTOGRAM {
                        if let Some(h) = bins.as_mut() {
                            // The first partner, without a branch (whether an event has one is
                            // unpredictable): written to the round's pending list, kept when it
                            // exists. The rare others go straight to their bins.
                            let first = b[from.min(b.len() - 1)];
                            h.pending[n_pending] = (first as i64).wrapping_sub(x).wrapping_sub(left) as u64;
                            n_pending += (to > from) as usize;
                            if to > from + 1 {
                                for &v in &b[from + 1..to] {
                                    if let Some(c) = h.counts.get_mut(div.div((v as i64 - x - left) as u64) as usize) {
                                        *c += 1;
                                    }
                                }
                            }
                        }
                    } else {
                        pairs += (to - from) as u64;
                        heralded += (to > from) as u64;
                    }
                }
            }};
        }
        lane!(p0, 0);
        lane!(p1, 1);
        lane!(p2, 2);
        lane!(p3, 3);
        lane!(p4, 4);
        lane!(p5, 5);
        lane!(p6, 6);
        lane!(p7, 7);
    }
    *lo = [p0, p1, p2, p3, p4, p5, p6, p7];
    if let Some(h) = bins.as_mut() {
        let Bins { counts, pending, .. } = h;
        for &d in &pending[..n_pending] {
            if let Some(c) = counts.get_mut(div.div(d) as usize) {
                *c += 1;
            }
        }
    }
    g.hist = bins;
    if MODE == LONE {
        g.sums[0] = g.sums[0] + WindowCount { pairs, heralded };
    }
}

/// One group over a short run of events in one plain loop (the few after the lanes, or a
/// slice too short for them).
#[inline(always)]
fn count_serial<C: Compare>(g: &mut Group, a: &[u64], b: &[u64]) {
    let (left, right, sorts) = (g.left, g.right, g.sorts_partners());
    let mut lo = lower_bound(b, a[0] as i64 + left);
    let mut hi = lo;
    let (mut pairs, mut heralded) = (0u64, 0u64);
    for &x in a {
        let x = x as i64;
        let (below, upto) = C::below_upto(&b[lo..], x, left, right);
        let (from, to) = if upto < STRIDE {
            lo += below;
            (lo, lo + (upto - below))
        } else {
            (lo, hi) = wide_step(b, lo, hi, x + left, x + right);
            (lo, hi)
        };
        if sorts {
            if to > from {
                g.bin(b, from, to, x);
            }
        } else {
            pairs += (to - from) as u64;
            heralded += (to > from) as u64;
        }
    }
    if !sorts {
        g.sums[0] = g.sums[0] + WindowCount { pairs, heralded };
    }
}

#[cfg(test)]
mod tests {
    use super::Divider;

    #[test]
    fn reciprocal_division_is_exact_below_two_to_the_32() {
        // Against plain integer division, on every divisor 1..3000 at the edges of each
        // quotient and on a pseudo-random spread of dividends below 2^32.
        let mut z = 0x9E37_79B9_7F4A_7C15u64;
        for q in 1..3000u64 {
            let d = Divider::new(q, 1 << 32);
            for k in [0u64, 1, 2, 1000, (1 << 32) / q - 1] {
                for n in [k * q, (k * q).saturating_sub(1), k * q + q - 1] {
                    let n = n.min((1 << 32) - 1);
                    assert_eq!(d.div(n), n / q, "{n} / {q}");
                }
            }
            for _ in 0..200 {
                z ^= z << 13;
                z ^= z >> 7;
                z ^= z << 17;
                let n = z >> 32;
                assert_eq!(d.div(n), n / q, "{n} / {q}");
            }
        }
    }
}
