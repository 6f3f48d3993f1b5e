//! The wide path of the parallel demultiplexer: AVX-512 loops for the most common
//! layout (16-byte records, an 8-byte little-endian time, no wrap), with a stub that
//! declines everywhere else so the scalar loops take over.

/// The wide path: AVX-512 demultiplexing of the most common layout, 16-byte records with
/// an 8-byte little-endian time in one half and a little-endian channel in the other, a
/// whole number of ps per tick and no wrap, eight records per step. A step compares all
/// eight channels with each of a range's channels (at most [`LANES`]) at once and
/// moves each channel's times to its cursor with one compress and one masked store, with
/// no per-record branch. Same results as the scalar loops, which take everything else (and
/// the last records of a range, fewer than a step).
#[cfg(target_arch = "x86_64")]
mod imp {
    use super::super::super::layout::{Endian, RecordLayout};
    use super::super::super::MAX_PS;
    use super::super::parallel::{Cursor, Cursors, Tally};
    use std::arch::x86_64::*;

    /// Records per step: two 64-byte vectors.
    const STEP: usize = 8;
    const STEP_BYTES: usize = 16 * STEP;
    /// Most channels a range may hold for the wide path.
    pub(super) const LANES: usize = 8;

    /// The channels a range's counting pass has met so far (at most [`LANES`]) and their counts.
    struct Seen {
        channels: [u64; LANES],
        counts: [u64; LANES],
        n: usize,
    }

    impl Seen {
        /// Count one event of `ch`; `None` when it would be channel [`LANES`] + 1.
        fn add(&mut self, ch: u64) -> Option<()> {
            match self.channels[..self.n].iter().position(|&k| k == ch) {
                Some(j) => self.counts[j] += 1,
                None if self.n < LANES => (self.channels[self.n], self.counts[self.n], self.n) = (ch, 1, self.n + 1),
                None => return None,
            }
            Some(())
        }
    }

    /// A layout the wide path takes, on a CPU that has the instructions.
    pub(in super::super) struct Wide {
        /// Which 8-byte half holds the time (0 or 1); the channel is in the other.
        time_half: i64,
        channel_shift_bits: i64,
        channel_mask: u64,
        ps_per_tick: u64,
        /// Largest tick count below 2^62 ps.
        max_ticks: u64,
        lenient: bool,
    }

    impl Wide {
        pub(in super::super) fn new(l: &RecordLayout, lenient: bool) -> Option<Wide> {
            let (t, c) = (&l.time, &l.channel);
            // With the time in bytes 0..8 or 8..16 of 16, validation puts the channel in the other half.
            let shape = l.record_bytes == 16 && t.is_whole_word() && c.is_whole_word() && l.is_plain() && t.width_bytes == 8 && t.endian == Endian::Little && t.offset_bytes % 8 == 0;
            let plain = (c.width_bytes == 1 || c.endian == Endian::Little) && l.wrap_bits.is_none() && l.tick.fs.is_multiple_of(1000);
            let cpu = is_x86_feature_detected!("avx512f") && is_x86_feature_detected!("avx512dq") && is_x86_feature_detected!("popcnt");
            let ps_per_tick = l.tick.fs / 1000;
            (shape && plain && cpu).then(|| Wide {
                time_half: (t.offset_bytes / 8) as i64,
                channel_shift_bits: 8 * (c.offset_bytes % 8) as i64,
                channel_mask: u64::MAX >> (64 - 8 * c.width_bytes),
                ps_per_tick,
                max_ticks: (MAX_PS - 1) / ps_per_tick,
                lenient,
            })
        }

        /// [`super::super::parallel::tally`] for this layout; `None` when the range holds more than
        /// [`LANES`] channels.
        pub(in super::super) fn tally(&self, bytes: &[u8]) -> Option<Tally> {
            // SAFETY: `new` checked that the CPU has these instructions.
            unsafe { self.tally_avx512(bytes) }
        }

        /// Fill whole steps of a range from its cursors, as [`super::super::parallel::fill_loop`] does;
        /// the records done (the caller fills the rest), or `None` where that loop would
        /// return `false`. Does nothing (0 records) when the range's channels do not suit.
        pub(in super::super) fn fill(&self, bytes: &[u8], prev: u64, cur: &mut Cursors) -> Option<usize> {
            if cur.big.iter().any(|c| c.at != c.end) {
                return Some(0);
            }
            let mut lanes = [(0u64, Cursor::NONE); LANES];
            let mut n = 0;
            for (ch, c) in cur.small.iter().enumerate().filter(|(_, c)| c.at != c.end) {
                if n == LANES {
                    return Some(0);
                }
                lanes[n] = (ch as u64, *c);
                n += 1;
            }
            // SAFETY: `new` checked that the CPU has these instructions; the cursors are
            // this range's own segments (see `fill_loop`).
            let done = unsafe {
                match n {
                    0 => Some(0),
                    1 => self.fill_lanes::<1>(bytes, prev, &mut lanes),
                    2 => self.fill_lanes::<2>(bytes, prev, &mut lanes),
                    3 => self.fill_lanes::<3>(bytes, prev, &mut lanes),
                    4 => self.fill_lanes::<4>(bytes, prev, &mut lanes),
                    5 => self.fill_lanes::<5>(bytes, prev, &mut lanes),
                    6 => self.fill_lanes::<6>(bytes, prev, &mut lanes),
                    7 => self.fill_lanes::<7>(bytes, prev, &mut lanes),
                    _ => self.fill_lanes::<8>(bytes, prev, &mut lanes),
                }
            };
            for &(ch, c) in &lanes[..n] {
                cur.small[ch as usize] = c;
            }
            done
        }

        /// [`Wide::fill_avx512`] on the first `N` of `lanes`.
        ///
        /// # Safety
        /// The CPU has the instructions ([`Wide::new`]); the cursors are the range's own segments.
        unsafe fn fill_lanes<const N: usize>(&self, bytes: &[u8], prev: u64, lanes: &mut [(u64, Cursor); LANES]) -> Option<usize> {
            match <&mut [(u64, Cursor); N]>::try_from(&mut lanes[..N]) {
                // SAFETY: forwarded from the caller.
                Ok(first) => unsafe { self.fill_avx512::<N>(bytes, prev, first) },
                Err(_) => Some(0),
            }
        }

        /// The channel numbers of a step's eight records, one per 64-bit lane.
        #[target_feature(enable = "avx512f")]
        unsafe fn channels(&self, a: __m512i, b: __m512i) -> __m512i {
            let halves = _mm512_permutex2var_epi64(a, self.half_index(1 - self.time_half), b);
            _mm512_and_si512(_mm512_srlv_epi64(halves, _mm512_set1_epi64(self.channel_shift_bits)), _mm512_set1_epi64(self.channel_mask as i64))
        }

        /// Picks half `h` of each record out of two vectors of four records each.
        #[target_feature(enable = "avx512f")]
        unsafe fn half_index(&self, h: i64) -> __m512i {
            _mm512_setr_epi64(h, 2 + h, 4 + h, 6 + h, 8 + h, 10 + h, 12 + h, 14 + h)
        }

        /// The channel of one record (scalar, for the odd lanes and the tail).
        fn channel_of(&self, r: &[u8]) -> u64 {
            let half = (1 - self.time_half) as usize * 8;
            u64::from_le_bytes(r[half..half + 8].try_into().expect("8-byte half")) >> self.channel_shift_bits & self.channel_mask
        }

        #[target_feature(enable = "avx512f,avx512dq,popcnt")]
        unsafe fn tally_avx512(&self, bytes: &[u8]) -> Option<Tally> {
            let mut seen = Seen { channels: [0; LANES], counts: [0; LANES], n: 0 };
            let steps = bytes.chunks_exact(STEP_BYTES);
            let tail = steps.remainder();
            let mut wanted = [_mm512_setzero_si512(); LANES];
            for step in steps {
                // SAFETY: each step is 128 readable bytes; unaligned loads.
                let (a, b) = unsafe { (_mm512_loadu_si512(step.as_ptr().cast()), _mm512_loadu_si512(step.as_ptr().add(64).cast())) };
                let ch = self.channels(a, b);
                let mut covered = 0u8;
                for (count, w) in seen.counts[..seen.n].iter_mut().zip(&wanted) {
                    let m = _mm512_cmpeq_epi64_mask(ch, *w);
                    *count += m.count_ones() as u64;
                    covered |= m;
                }
                if covered != 0xFF {
                    // A channel first seen here: count the lanes no known channel matched.
                    let before = seen.n;
                    for lane in (0..STEP).filter(|i| covered >> i & 1 == 0) {
                        seen.add(self.channel_of(&step[16 * lane..]))?;
                    }
                    (before..seen.n).for_each(|j| wanted[j] = _mm512_set1_epi64(seen.channels[j] as i64));
                }
            }
            for r in tail.chunks_exact(16) {
                seen.add(self.channel_of(r))?;
            }
            let mut counts: Vec<(u64, u64)> = seen.channels.into_iter().zip(seen.counts).take(seen.n).collect();
            counts.sort_unstable();
            Some(Tally { counts, wraps: 0 })
        }

        /// [`Wide::fill`] for `N` channels, so the cursors stay in registers.
        #[target_feature(enable = "avx512f,avx512dq,popcnt")]
        unsafe fn fill_avx512<const N: usize>(&self, bytes: &[u8], prev: u64, lanes: &mut [(u64, Cursor); N]) -> Option<usize> {
            let wanted: [__m512i; N] = std::array::from_fn(|j| _mm512_set1_epi64(lanes[j].0 as i64));
            let mut cur: [Cursor; N] = std::array::from_fn(|j| lanes[j].1);
            let (time_index, max_ticks, scale) = (self.half_index(self.time_half), _mm512_set1_epi64(self.max_ticks as i64), _mm512_set1_epi64(self.ps_per_tick as i64));
            let mut last = _mm512_set1_epi64(prev as i64);
            let steps = bytes.chunks_exact(STEP_BYTES);
            let done = steps.len() * STEP;
            for step in steps {
                // SAFETY: each step is 128 readable bytes; unaligned loads.
                let (a, b) = unsafe { (_mm512_loadu_si512(step.as_ptr().cast()), _mm512_loadu_si512(step.as_ptr().add(64).cast())) };
                let ticks = _mm512_permutex2var_epi64(a, time_index, b);
                // Each lane's previous record: the last of the step before, then lanes 0..7.
                let back = !self.lenient && _mm512_cmplt_epu64_mask(ticks, _mm512_alignr_epi64::<7>(ticks, last)) != 0;
                if back || _mm512_cmpgt_epu64_mask(ticks, max_ticks) != 0 {
                    return None;
                }
                last = ticks;
                let ps = if self.ps_per_tick == 1 { ticks } else { _mm512_mullo_epi64(ticks, scale) };
                let ch = self.channels(a, b);
                let mut covered = 0u8;
                for (c, w) in cur.iter_mut().zip(&wanted) {
                    let m = _mm512_cmpeq_epi64_mask(ch, *w);
                    let (k, room) = (m.count_ones() as usize, (c.end as usize - c.at as usize) / 8);
                    let times = _mm512_maskz_compress_epi64(m, ps);
                    if room >= STEP {
                        // SAFETY: all eight places lie in the channel's own segment (room ≥ 8);
                        // those past the k set here are written by later steps of this
                        // range before it ends (the segment is filled exactly, or the
                        // range fails and its vectors are thrown away).
                        unsafe { _mm512_storeu_si512(c.at.cast(), times) };
                    } else if room >= k {
                        // SAFETY: the k places written lie in the segment (room ≥ k); the
                        // masked-off ones are not touched.
                        unsafe { _mm512_mask_storeu_epi64(c.at.cast(), ((1u16 << k) - 1) as u8, times) };
                    } else {
                        return None;
                    }
                    c.at = c.at.wrapping_add(k);
                    covered |= m;
                }
                if covered != 0xFF {
                    return None; // a channel the counting pass did not see here
                }
            }
            for (l, c) in lanes.iter_mut().zip(cur) {
                l.1 = c;
            }
            Some(done)
        }
    }
}

/// Elsewhere the scalar loops do all the work.
#[cfg(not(target_arch = "x86_64"))]
mod imp {
    use super::super::super::layout::RecordLayout;
    use super::super::parallel::{Cursors, Tally};

    pub(in super::super) struct Wide;

    impl Wide {
        pub(in super::super) fn new(_: &RecordLayout, _: bool) -> Option<Wide> {
            None
        }
        pub(in super::super) fn tally(&self, _: &[u8]) -> Option<Tally> {
            None
        }
        pub(in super::super) fn fill(&self, _: &[u8], _: u64, _: &mut Cursors) -> Option<usize> {
            Some(0)
        }
    }
}


pub(super) use imp::Wide;
