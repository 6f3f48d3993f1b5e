//! Format (b): interleaved fixed-size records of any [`RecordLayout`], in time order
//! overall (or within the layout's reorder tolerance), demultiplexed per channel (whole
//! file or bounded-memory chunks), with the exact tick → ps rule of [`super::layout`].
//!
//! Split by concern: [`ticks`] (tick/wrap arithmetic and the counter [`ticks::Clock`]),
//! [`kinds`] (what a record of a rich layout stands for), [`serial`] (the one-pass
//! demultiplexer and the typed field loads), [`parallel`] (the counting, planning and
//! filling passes over ranges), [`wide`] (AVX-512) and [`writer`].
//!
//! A mapped file is demultiplexed on the rayon pool in fixed record ranges
//! (`RANGE_RECORDS`, the same for any thread count), a batch of ranges at a time: a
//! counting pass gives each range its exact place in each channel's vector and what it
//! adds to the epoch (counter wraps or overflow records), the epochs are a prefix sum over
//! the ranges, then a filling pass writes every range into its own part (no copy
//! afterwards). The result is the serial one bit for bit. Errors are found per range and
//! then reported by the serial demultiplexer, so the message is the serial one too. The
//! common 16-byte layout takes an AVX-512 path (`wide`) where the CPU has one. Streamed
//! chunks go through the same passes, chunk by chunk (bounded memory); layouts with a
//! reorder tolerance and a counter period are demultiplexed serially (whether a tag is
//! late from before a wrap depends on every tag before it).

use super::layout::RecordLayout;
use super::mapping::Mapping;
use super::{InputFile, ReadOptions, TagSource};
use crate::{Channel, ChannelTags, Error, Result};
use parallel::{fill_range, fill_rich, tally, tally_rich, Batch, Carry, FillCtx, OutPtr, RichTally, Tally};
use rayon::prelude::*;
use serial::{advise_huge_pages, new_slot_capacity, share, Demuxer};
use std::path::Path;
use std::sync::atomic::{AtomicU64, AtomicUsize, Ordering};
use ticks::{counter_mask, wrap_period, Clock, ClockRules};

pub use writer::write_records;

/// Records demultiplexed per block when the file is not mapped (bounded buffer).
const BLOCK_RECORDS: u64 = 1 << 20;
/// Records looked at before sizing the per-channel vectors by each channel's share.
const PROBE_RECORDS: u64 = 1 << 16;
/// Records per range of the parallel demultiplexer (1 MiB of 16-byte records): a fixed
/// split, so results never depend on the thread count. Files of one range or less are
/// demultiplexed serially.
const RANGE_RECORDS: u64 = 1 << 16;
/// Ranges counted and then filled together (256 MiB of 16-byte records). Each batch ends
/// with every thread joining, which on a busy machine waits for a descheduled thread's
/// time slice, so batches are large; batches small enough to be filled from the CPU
/// caches measured no faster. The first batch sizes the vectors for the rest.
const BATCH_RANGES: usize = 256;

/// Call the generic `f::<T, C>(args)` monomorphised for the layout's time field (`T`) and
/// channel field (`C`) shapes: one dispatch per call, then plain fixed-width loads.
macro_rules! by_fields {
    ($l:expr, $($f:ident)::+ ($($a:expr),*)) => {
        match ($l.time.width_bytes, $l.time.endian) {
            (4, $crate::read::layout::Endian::Little) => by_fields!(@chan $l, $crate::read::records::serial::Le<4>, $($f)::+ ($($a),*)),
            (4, $crate::read::layout::Endian::Big) => by_fields!(@chan $l, $crate::read::records::serial::Be<4>, $($f)::+ ($($a),*)),
            (8, $crate::read::layout::Endian::Little) => by_fields!(@chan $l, $crate::read::records::serial::Le<8>, $($f)::+ ($($a),*)),
            _ => by_fields!(@chan $l, $crate::read::records::serial::Be<8>, $($f)::+ ($($a),*)),
        }
    };
    (@chan $l:expr, $T:ty, $($f:ident)::+ ($($a:expr),*)) => {
        match ($l.channel.width_bytes, $l.channel.endian) {
            (1, _) => $($f)::+::<$T, $crate::read::records::serial::Le<1>>($($a),*),
            (2, $crate::read::layout::Endian::Little) => $($f)::+::<$T, $crate::read::records::serial::Le<2>>($($a),*),
            (2, $crate::read::layout::Endian::Big) => $($f)::+::<$T, $crate::read::records::serial::Be<2>>($($a),*),
            (4, $crate::read::layout::Endian::Little) => $($f)::+::<$T, $crate::read::records::serial::Le<4>>($($a),*),
            (4, $crate::read::layout::Endian::Big) => $($f)::+::<$T, $crate::read::records::serial::Be<4>>($($a),*),
            (8, $crate::read::layout::Endian::Little) => $($f)::+::<$T, $crate::read::records::serial::Le<8>>($($a),*),
            _ => $($f)::+::<$T, $crate::read::records::serial::Be<8>>($($a),*),
        }
    };
}

mod kinds;
mod parallel;
mod serial;
mod ticks;
mod wide;
mod writer;

/// Whether the typed loops take this layout: plain (see [`RecordLayout::is_plain`]) with
/// a 4- or 8-byte time word and a 1-, 2-, 4- or 8-byte channel word (a packed 64-bit
/// word included). Everything else goes
/// through the classifying loops.
pub(crate) fn is_fast(l: &RecordLayout) -> bool {
    l.is_plain() && matches!(l.time.width_bytes, 4 | 8) && matches!(l.channel.width_bytes, 1 | 2 | 4 | 8)
}

/// An interleaved-record file with its layout.
#[derive(Debug)]
pub struct Records {
    map: Mapping,
    layout: RecordLayout,
    count: u64,
    lenient: bool,
    /// Records per range of the parallel demultiplexer ([`RANGE_RECORDS`]; tests shrink it).
    range_records: u64,
    /// Ranges per batch ([`BATCH_RANGES`]; tests shrink it).
    batch_ranges: usize,
    /// Records of unknown kinds skipped ([`Records::skipped_records`]).
    skipped: AtomicU64,
}

impl Records {
    pub fn open(path: &Path, layout: RecordLayout, opts: ReadOptions) -> Result<Self> {
        Self::from_mapping(Mapping::open(path, opts)?, layout, opts)
    }

    /// Check the file size against the layout: non-empty, header present, whole records.
    pub fn from_mapping(map: Mapping, layout: RecordLayout, opts: ReadOptions) -> Result<Self> {
        layout.validate().map_err(|m| Error::Usage(format!("{}: layout: {m}", map.path().display())))?;
        let (p, size, rec, head) = (map.path(), map.size_bytes(), layout.record_bytes as u64, layout.header_bytes);
        if size == 0 {
            return Err(Error::bad_input(p, "whole file", "an empty file (0 bytes)", format!("{head} header bytes and {rec}-byte records")));
        }
        if size <= head {
            return Err(Error::bad_input(p, "whole file", format!("{size} bytes"), format!("more than the {head} header bytes (at least one {rec}-byte record)")));
        }
        let body = size - head;
        if body % rec != 0 {
            let at = head + body / rec * rec;
            return Err(Error::bad_input(
                p,
                format!("byte offset {at}"),
                format!("a trailing partial record of {} bytes ({body} bytes after the header)", body % rec),
                format!("a whole number of {rec}-byte records after the {head}-byte header"),
            ));
        }
        Ok(Records { count: body / rec, map, layout, lenient: opts.lenient_order, range_records: RANGE_RECORDS, batch_ranges: BATCH_RANGES, skipped: AtomicU64::new(0) })
    }

    pub fn layout(&self) -> &RecordLayout {
        &self.layout
    }

    /// The same reader with ranges of `range_records` records, `batch_ranges` to a batch
    /// (tests: make small files take the parallel passes).
    #[doc(hidden)]
    pub fn with_ranges(mut self, range_records: u64, batch_ranges: usize) -> Self {
        (self.range_records, self.batch_ranges) = (range_records.max(1), batch_ranges.max(1));
        self
    }

    /// Whether a whole read takes the parallel passes (tests).
    #[doc(hidden)]
    pub fn reads_in_parallel(&self) -> bool {
        self.parallel_body().is_some()
    }

    /// Records of unknown kinds skipped by the last whole pass or so far in a stream
    /// (layouts that skip unknown kinds).
    pub fn skipped_records(&self) -> u64 {
        self.skipped.load(Ordering::Relaxed)
    }

    /// Bytes of records `first .. first + n`.
    fn block(&self, first: u64, n: u64) -> Result<std::borrow::Cow<'_, [u8]>> {
        let rec = self.layout.record_bytes as u64;
        self.map.bytes(self.layout.header_bytes + first * rec, (n * rec) as usize)
    }

    /// The (first record, record count) blocks the serial demultiplexer is fed: the probe,
    /// then the rest in one block (mapped) or in [`BLOCK_RECORDS`] blocks (buffered). An
    /// error's byte-swap hint looks only inside the failing record's block, so the
    /// parallel path's error report goes through the same blocks.
    fn serial_blocks(&self) -> impl Iterator<Item = (u64, u64)> {
        let (count, probe) = (self.count, PROBE_RECORDS.min(self.count));
        let step = if self.map.is_mapped() { count } else { BLOCK_RECORDS };
        let rest = (probe..count).step_by(step.max(1) as usize).map(move |first| (first, step.min(count - first)));
        std::iter::once((0, probe)).chain(rest)
    }

    /// One [`Demuxer`] over every record in file order: the probe block first, then each
    /// channel's vector reserved by its share of the probe, then the rest.
    fn demux_serial(&self) -> Result<Vec<ChannelTags<'static>>> {
        let mut d = Demuxer::new(&self.layout, self.map.path(), self.lenient);
        for (first, n) in self.serial_blocks() {
            d.feed(&self.block(first, n)?)?;
            if first == 0 {
                d.reserve_by_share(self.count - n);
            }
        }
        self.skipped.store(d.skipped, Ordering::Relaxed);
        Ok(d.take(false))
    }

    /// Whether the parallel passes take this layout: all but a reorder tolerance with a
    /// counter period (see the module doc).
    fn parallel_layout(&self) -> bool {
        let r = ClockRules::of(&self.layout, self.lenient);
        is_fast(&self.layout) || r.tolerance == 0 || r.period == 0
    }

    /// The records (header skipped) when the parallel demultiplexer applies: a mapped file
    /// of more than one range.
    fn parallel_body(&self) -> Option<&[u8]> {
        let all = self.map.mapped_bytes()?;
        (self.count > self.range_records && self.parallel_layout()).then(|| &all[self.layout.header_bytes as usize..])
    }

    /// The whole file on the parallel passes; on any failure the serial demultiplexer
    /// reads it again and reports the first bad record as it always does.
    fn demux_parallel(&self, body: &[u8]) -> Result<Vec<ChannelTags<'static>>> {
        let mut d = Demuxer::new(&self.layout, self.map.path(), self.lenient);
        if !self.demux_span(body, &mut d, true) {
            return self.demux_serial();
        }
        self.skipped.store(d.skipped, Ordering::Relaxed);
        Ok(d.take(false))
    }

    /// Demultiplex `body` (records `d.next_index ..`) in fixed ranges on the rayon pool,
    /// a batch of [`BATCH_RANGES`] ranges at a time: count the batch's ranges, plan their
    /// parts after what the channel vectors already hold and their starting epochs (a
    /// prefix sum), fill them, then extend the vectors; `d`'s counter state moves past
    /// the span. `whole`: the span is the whole file, and the first batch sizes each
    /// channel's vector by its share of the rest, as the serial probe does. `false` when
    /// a range fails (nothing of the span is kept then: `d` is as it was).
    fn demux_span(&self, body: &[u8], d: &mut Demuxer, whole: bool) -> bool {
        let (l, rec) = (&self.layout, self.layout.record_bytes);
        let count = (body.len() / rec) as u64;
        let per = self.range_records.max(1);
        let range = |k: u64| (k * per, ((k + 1) * per).min(count));
        let span = |(a, b): (u64, u64)| &body[a as usize * rec..b as usize * rec];
        let fast = is_fast(l);
        let mask = counter_mask(l);
        let start_prev = d.prev_raw;
        // The raw counter before record `a` (the demuxer's before the span; typed layouts).
        let prev_of = |a: u64| if a == 0 { start_prev } else { l.time.get(&body[(a - 1) as usize * rec..]) & mask };
        let wrap = l.wrap_bits.is_some();
        let wide = if fast { wide::Wide::new(l, self.lenient) } else { None };
        let rules = ClockRules::of(l, self.lenient);
        let per_channel = !fast && rules.tolerance > 0 && !self.lenient;
        let saved = (d.prev_raw, d.epoch_ticks, d.clock, d.skipped, d.slots.times.iter().map(Vec::len).collect::<Vec<_>>());
        let mut carry = Carry { base: d.clock.epoch, periods: 0, prev_raw: d.clock.prev_raw, latest: d.clock.latest };
        let mut wraps = wraps_of(d.epoch_ticks, wrap_period(l));
        let (ranges, per_batch) = (count.div_ceil(per), self.batch_ranges.max(1));
        let mut ok = true;
        for first in (0..ranges).step_by(per_batch) {
            let batch: Vec<(u64, u64)> = (first..(first + per_batch as u64).min(ranges)).map(range).collect();
            let (tallies, clocks): (Vec<Tally>, Vec<Clock>) = if fast {
                let t = batch.par_iter().map(|&r| wide.as_ref().and_then(|w| w.tally(span(r))).unwrap_or_else(|| by_fields!(l, tally(span(r), l, prev_of(r.0), wrap)))).collect();
                (t, Vec::new())
            } else {
                let mut rich: Vec<RichTally> = batch.par_iter().map(|&r| tally_rich(span(r), l)).collect();
                if rich.iter().any(|t| t.bad) {
                    ok = false;
                    break;
                }
                let clocks = rich
                    .iter_mut()
                    .map(|t| {
                        d.skipped += t.skipped;
                        carry.step(t, &rules)
                    })
                    .collect();
                (rich.into_iter().map(|t| t.tally).collect(), clocks)
            };
            let plan = Batch::new(&tallies, &mut d.slots, d.new_slot_capacity, wraps, wrap_period(l));
            let (seen, end) = (batch[0].0, batch[batch.len() - 1].1);
            for (v, &n) in d.slots.times.iter_mut().zip(&plan.totals) {
                let capacity = v.capacity();
                match seen {
                    0 if whole => v.reserve(n as usize + share(n, end, count - end)),
                    _ => v.reserve(n as usize),
                }
                if v.capacity() != capacity {
                    advise_huge_pages(v);
                }
            }
            if seen == 0 && whole {
                d.new_slot_capacity = new_slot_capacity(count - end);
            }
            let before: Vec<usize> = d.slots.times.iter().map(Vec::len).collect();
            let bases: Vec<OutPtr> = d.slots.times.iter_mut().map(|v| OutPtr(v.as_mut_ptr().wrapping_add(v.len()))).collect();
            let ctx = FillCtx { layout: l, fast_ticks: d.fast_ticks, lenient: self.lenient, slots: &d.slots };
            let first_bad = AtomicUsize::new(usize::MAX);
            batch.par_iter().enumerate().for_each(|(k, &r)| {
                if k > first_bad.load(Ordering::Relaxed) {
                    return; // an earlier range already failed: the serial pass reports it
                }
                let cur = plan.cursors(k, &d.slots.channels, &bases);
                let filled = match fast {
                    true => fill_range(span(r), &ctx, wide.as_ref(), prev_of(r.0), plan.epochs[k], cur),
                    false => fill_rich(span(r), &ctx, clocks[k], cur),
                };
                if !filled {
                    first_bad.fetch_min(k, Ordering::Relaxed);
                }
            });
            if first_bad.into_inner() != usize::MAX {
                ok = false;
                break;
            }
            for (v, &n) in d.slots.times.iter_mut().zip(&plan.totals) {
                // SAFETY: `reserve` above made room for n more; every range of the batch
                // filled its segment completely (the fills check each cursor reached its
                // segment end) and the segments tile those n places, so all are set.
                unsafe { v.set_len(v.len() + n as usize) };
            }
            if per_channel && !d.channels_ascend(&before) {
                ok = false;
                break;
            }
            wraps = plan.wraps;
        }
        if !ok {
            (d.prev_raw, d.epoch_ticks, d.clock, d.skipped) = (saved.0, saved.1, saved.2, saved.3);
            for (v, &n) in d.slots.times.iter_mut().zip(saved.4.iter().chain(std::iter::repeat(&0))) {
                v.truncate(n);
            }
            return false;
        }
        if fast {
            d.prev_raw = if count == 0 { start_prev } else { prev_of(count) };
            d.epoch_ticks = ticks::epoch_after(wraps, wrap_period(l));
        } else {
            d.clock = Clock {
                epoch: carry.epoch(&rules),
                prev_raw: carry.prev_raw,
                latest: carry.latest,
            };
        }
        d.next_index += count;
        true
    }
}

/// The wraps that give `epoch` ticks with `period`-tick wraps (inverse of `epoch_after`,
/// saturated epochs included).
fn wraps_of(epoch: u64, period: u64) -> u64 {
    match (epoch, period) {
        (0, _) => 0,
        (u64::MAX, _) | (_, 0) => u64::MAX,
        (e, p) => e / p,
    }
}

impl TagSource for Records {
    fn file(&self) -> InputFile {
        InputFile { path: self.map.path().to_path_buf(), size_bytes: self.map.size_bytes(), format: crate::read::InputKind::Records }
    }

    fn channels(&self) -> Result<Vec<ChannelTags<'_>>> {
        match self.parallel_body() {
            Some(body) => self.demux_parallel(body),
            None => self.demux_serial(),
        }
    }

    /// Chunks of `events_per_chunk` records, each demultiplexed on the parallel passes
    /// when it spans more than one range (serially otherwise, and on any failure, which
    /// the serial pass then reports). With a reorder tolerance, the tags of the last
    /// tolerance before each chunk's end wait for the next chunk ([`Demuxer::take_chunk`]).
    fn chunks(&self, events_per_chunk: usize) -> Result<Box<dyn Iterator<Item = Result<Vec<ChannelTags<'static>>>> + Send + '_>> {
        let per = (events_per_chunk as u64).max(1);
        let mut d = Demuxer::new(&self.layout, self.map.path(), self.lenient);
        let mut first = 0u64;
        let mut failed = false;
        let parallel = self.parallel_layout();
        self.skipped.store(0, Ordering::Relaxed);
        Ok(Box::new(std::iter::from_fn(move || {
            if failed || first >= self.count {
                return None;
            }
            let n = per.min(self.count - first);
            let r = self.block(first, n).and_then(|b| {
                if !(parallel && n > self.range_records && self.demux_span(&b, &mut d, false)) {
                    d.feed(&b)?;
                }
                Ok(d.take_chunk(first + n == self.count))
            });
            self.skipped.store(d.skipped, Ordering::Relaxed);
            first += n;
            failed = r.is_err();
            Some(r)
        })))
    }

    fn check_unchanged(&self) -> Result<()> {
        self.map.check_unchanged()
    }
    fn event_count(&self) -> u64 {
        self.count
    }
    fn exact_event_count(&self) -> bool {
        self.layout.kinds.is_none() && self.layout.edge.as_ref().is_none_or(|e| e.keep == super::layout::EdgeKeep::Both)
    }
    fn declared_channels(&self) -> Option<Vec<Channel>> {
        None
    }
    fn notes(&self) -> Vec<String> {
        match self.skipped_records() {
            0 => Vec::new(),
            n => vec![format!("{}: {n} records of kinds the layout does not list were skipped", self.map.path().display())],
        }
    }
}

#[cfg(test)]
mod tests {
    use super::super::MAX_PS;
    use super::ticks::{fast_ticks, wrap_guess};
    use super::writer::put_uint;
    use super::*;

    fn layout(spec: &str) -> RecordLayout {
        RecordLayout::from_spec(spec).unwrap()
    }

    #[test]
    fn wrapped_counter_is_unwrapped() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.bin");
        // 8-bit wrap on a 4-byte field: raw 250, 3, 10 → ticks 250, 259, 266 (1 ps ticks).
        let l = layout("rec=8,time=0:4:le,chan=4:1,tick_ps=1,wrap=8");
        let mut bytes = Vec::new();
        for (raw, ch) in [(250u32, 1u8), (3, 2), (10, 1)] {
            bytes.extend_from_slice(&raw.to_le_bytes());
            bytes.extend_from_slice(&[ch, 0, 0, 0]);
        }
        std::fs::write(&p, &bytes).unwrap();
        let r = Records::open(&p, l, ReadOptions::mapped()).unwrap();
        let c = r.channels().unwrap();
        assert_eq!(&*c[0].times_ps, &[250, 266]);
        assert_eq!(&*c[1].times_ps, &[259]);
    }

    #[test]
    fn fast_path_ends_exactly_at_the_limit() {
        for fs in [1u64, 500, 1000, 12_345, 1 << 40] {
            let t = fast_ticks(fs);
            let tick = super::super::layout::Tick { fs };
            assert!(tick.to_ps(t) < MAX_PS as u128 && (t as u128 * fs as u128 + 500) <= u64::MAX as u128, "{fs}");
            assert!(tick.to_ps(t + 1) >= MAX_PS as u128 || (t as u128 + 1) * fs as u128 + 500 > u64::MAX as u128, "{fs}");
        }
    }

    #[test]
    fn bits_above_the_wrap_width_are_ignored() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.bin");
        // 12-bit counter in a 4-byte field whose top bits carry flags: raw 0xF000_0FF0,
        // then 0x0000_0010 (a wrap) → ticks 4080, 4096 + 16 = 4112.
        let mut bytes = Vec::new();
        for raw in [0xF000_0FF0u32, 0x0000_0010] {
            bytes.extend_from_slice(&raw.to_le_bytes());
            bytes.extend_from_slice(&[1, 0, 0, 0]);
        }
        std::fs::write(&p, &bytes).unwrap();
        let r = Records::open(&p, layout("rec=8,time=0:4,chan=4:1,tick_ps=1,wrap=12"), ReadOptions::mapped()).unwrap();
        assert_eq!(&*r.channels().unwrap()[0].times_ps, &[4080, 4112]);
    }

    #[test]
    fn wrap_guess_needs_top_then_bottom_of_a_range() {
        assert_eq!(wrap_guess(65_500, 20), Some(16)); // just below 2^16, then near 0
        assert_eq!(wrap_guess(u32::MAX as u64 - 5, 3), Some(32));
        assert_eq!(wrap_guess(40_000, 20), None); // 40 000 < 7/8 · 2^16
        assert_eq!(wrap_guess(65_500, 30_000), None);
        assert_eq!(wrap_guess(250, 3), Some(8));
        assert_eq!(wrap_guess(120, 3), None); // 7 bits: too small a range to tell
    }

    /// A file of `layout` records holding (raw time field, channel) pairs as they are.
    fn raw_file(dir: &Path, name: &str, l: &RecordLayout, recs: &[(u64, u64)]) -> std::path::PathBuf {
        let mut bytes = vec![0xA5u8; l.header_bytes as usize];
        let mut rec = vec![0u8; l.record_bytes];
        for &(raw, ch) in recs {
            put_uint(&mut rec, &l.time, raw);
            put_uint(&mut rec, &l.channel, ch);
            bytes.extend_from_slice(&rec);
        }
        let p = dir.join(name);
        std::fs::write(&p, &bytes).unwrap();
        p
    }

    /// Ascending ticks (gaps 0..=40, ties included) on channels 1..=`spread`, with channel 9
    /// only in records 20 000..30 000 and `rare` every 5 000th record.
    fn stream(n: usize, spread: u64, rare: u64) -> Vec<(u64, u64)> {
        let (mut x, mut t) = (0x9E37_79B9_7F4A_7C15u64, 1_000u64);
        (0..n)
            .map(|i| {
                x ^= x << 13;
                x ^= x >> 7;
                x ^= x << 17;
                t += x % 41;
                let ch = match i {
                    _ if i % 5_000 == 4_999 => rare,
                    20_000..=29_999 if x >> 62 == 0 => 9,
                    _ => 1 + (x >> 40) % spread,
                };
                (t, ch)
            })
            .collect()
    }

    /// Records of `p` with small ranges: the parallel result (or error text) on 1, 2 and 16
    /// threads must equal the serial one.
    fn assert_parallel_is_serial(p: &Path, l: &RecordLayout, lenient: bool) -> std::result::Result<usize, String> {
        let mut r = Records::open(p, l.clone(), ReadOptions { mmap: true, lenient_order: lenient }).unwrap();
        // Ranges of a prime size straddle the serial blocks; batches of 5 make channels
        // appear, and vectors grow, after the first batch.
        (r.range_records, r.batch_ranges) = (997, 5);
        assert!(r.parallel_body().is_some(), "the parallel path must be the one under test");
        let flat = |c: Result<Vec<ChannelTags<'_>>>| c.map(|v| v.iter().map(|c| (c.channel, c.times_ps.to_vec())).collect::<Vec<_>>()).map_err(|e| e.to_string());
        let serial = flat(r.demux_serial());
        for threads in [1, 2, 16] {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            assert_eq!(pool.install(|| flat(r.channels())), serial, "{threads} threads, {}", l.to_spec());
        }
        if serial.is_ok() {
            // The parallel passes themselves succeed (no silent serial fallback).
            let mut d = Demuxer::new(&r.layout, r.map.path(), lenient);
            assert!(r.demux_span(r.parallel_body().unwrap(), &mut d, true), "parallel passes fell back: {}", l.to_spec());
        }
        serial.map(|v| v.len())
    }

    #[test]
    fn parallel_demux_equals_serial() {
        let d = tempfile::tempdir().unwrap();
        let cases = [
            ("rec=16,time=0:8:le,chan=8:2:le,tick_ps=1", 3, 300),        // the wide path where the CPU has it
            ("rec=16,time=8:8:le,chan=0:4:le,tick_ps=3", 4, 70_000),     // time in the second half, a big channel number
            ("rec=16,time=0:8:le,chan=8:1,tick_ps=1", 11, 7),            // more channels than the wide path takes
            ("rec=12,skip=5,time=0:8:be,chan=8:4:be,tick_ps=12.345", 3, 70_000), // scalar, rounding ticks
            ("rec=8,time=0:8:le[0..56],chan=0:8:le[56..64],tick_ps=1", 3, 200),  // one packed 64-bit word
            ("rec=8,time=0:8:be[8..64],chan=0:8:be[0..8],tick_ps=2", 5, 255),    // the same, big-endian
            ("rec=7,time=0:5:be,chan=5:2:le[3..11],tick_ps=1", 4, 200),         // words the typed loads do not cover
        ];
        for (k, (spec, spread, rare)) in cases.into_iter().enumerate() {
            let l = layout(spec);
            let recs = stream(70_001, spread, rare);
            let p = raw_file(d.path(), &format!("ok{k}.bin"), &l, &recs);
            let distinct: std::collections::BTreeSet<u64> = recs.iter().map(|r| r.1).collect();
            assert_eq!(assert_parallel_is_serial(&p, &l, false), Ok(distinct.len()), "{spec}");
        }
    }

    #[test]
    fn parallel_demux_unwraps_counters_like_serial() {
        let d = tempfile::tempdir().unwrap();
        let l = layout("rec=8,time=0:4:le,chan=4:2:le,tick_ps=2,wrap=12");
        let mut recs: Vec<(u64, u64)> = stream(50_000, 3, 300).into_iter().map(|(t, c)| (t & 0xFFF, c)).collect();
        // A wrap exactly on the first record of range 7 (after one just before it).
        (recs[7 * 997 - 1].0, recs[7 * 997].0) = (0xFFF, 3);
        let p = raw_file(d.path(), "wrap.bin", &l, &recs);
        assert_parallel_is_serial(&p, &l, false).unwrap();
    }

    #[test]
    fn parallel_demux_reports_the_serial_error() {
        let d = tempfile::tempdir().unwrap();
        for spec in ["rec=16,time=0:8:le,chan=8:2:le,tick_ps=1", "rec=12,time=4:8:le,chan=0:4:le,tick_ps=5"] {
            let l = layout(spec);
            // Backwards just after a range edge, one further on, across the probe block's
            // end, two failures in one run (the first must win), and a time past 2^62 ps.
            for (k, backs) in [vec![12 * 997], vec![3 * 997 + 1], vec![65_536], vec![65_535], vec![40_000, 5 * 997]].into_iter().enumerate() {
                let mut recs = stream(70_001, 3, 300);
                for &i in &backs {
                    recs[i].0 = recs[i - 1].0 - 1;
                }
                let p = raw_file(d.path(), &format!("back{k}.bin"), &l, &recs);
                let e = assert_parallel_is_serial(&p, &l, false).unwrap_err();
                let first = backs.iter().min().unwrap();
                assert!(e.contains(&format!("record {first} (byte offset {})", first * l.record_bytes)), "{e}");
                // Lenient reading hands the step on instead, in both paths alike.
                assert_parallel_is_serial(&p, &l, true).unwrap();
            }
            let mut recs = stream(70_001, 3, 300);
            let late = 9 * 997 + 2;
            recs[late..].iter_mut().for_each(|r| r.0 += (1u64 << 62) / l.tick.fs * 1000);
            let p = raw_file(d.path(), "late.bin", &l, &recs);
            let e = assert_parallel_is_serial(&p, &l, true).unwrap_err();
            assert!(e.contains(&format!("record {late} ")) && e.contains("below 2^62"), "{e}");
        }
    }

    /// A layout with overflow records: a step backwards after several ranges and chunks is
    /// refused with the same message whole (serial and parallel) and streamed in chunks
    /// (parallel chunks that start after overflow records).
    #[test]
    fn overflow_records_order_errors_agree_everywhere() {
        let d = tempfile::tempdir().unwrap();
        let l = layout("rec=8,time=0:4,chan=4:1,kind=5:1,event=0,overflow=1,tick_ps=1,wrap=16");
        let ticks: Vec<(u64, u64)> = stream(40_000, 3, 7);
        let bad = 31_337;
        let mut bytes = Vec::new();
        let (mut epoch, mut index_of_bad) = (0u64, 0);
        for (i, &(t, ch)) in ticks.iter().enumerate() {
            let t = if i == bad { ticks[i - 1].0 - 5 } else { t };
            while t >> 16 > epoch && i != bad {
                let mut r = [0u8; 8];
                r[5] = 1;
                bytes.extend_from_slice(&r);
                epoch += 1;
            }
            if i == bad {
                index_of_bad = bytes.len() / 8;
            }
            let mut r = [0u8; 8];
            r[..4].copy_from_slice(&((t & 0xFFFF) as u32).to_le_bytes());
            r[4] = ch as u8;
            bytes.extend_from_slice(&r);
        }
        let p = d.path().join("o.bin");
        std::fs::write(&p, &bytes).unwrap();
        let opts = ReadOptions { mmap: true, lenient_order: false };
        let serial = Records::open(&p, l.clone(), opts).unwrap().channels().unwrap_err().to_string();
        assert!(serial.contains(&format!("record {index_of_bad} (byte offset {})", index_of_bad * 8)), "{serial}");
        let par = Records::open(&p, l.clone(), opts).unwrap().with_ranges(997, 3);
        assert!(par.reads_in_parallel());
        assert_eq!(par.channels().unwrap_err().to_string(), serial);
        for chunk in [5_000, 12_345] {
            let e = par.chunks(chunk).unwrap().find_map(|c| c.err()).expect("a chunk fails").to_string();
            assert!(e.contains(&format!("record {index_of_bad} ")), "chunks of {chunk}: {e}");
        }
        // Lenient reading hands the step on in every path alike.
        let lenient = ReadOptions { mmap: true, lenient_order: true };
        let (a, b) = (Records::open(&p, l.clone(), lenient).unwrap(), Records::open(&p, l, lenient).unwrap().with_ranges(997, 3));
        let flat = |v: Vec<ChannelTags<'_>>| v.iter().map(|c| (c.channel, c.times_ps.to_vec())).collect::<Vec<_>>();
        assert_eq!(flat(a.channels().unwrap()), flat(b.channels().unwrap()));
    }

    #[test]
    fn big_channel_numbers_use_the_map() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.bin");
        let l = layout("rec=12,time=0:8:be,chan=8:4:be,tick_ps=2");
        let chans = [ChannelTags::owned(70_000, "", vec![2, 8]), ChannelTags::owned(3, "", vec![4])];
        write_records(&p, &l, &chans).unwrap();
        let r = Records::open(&p, l, ReadOptions { mmap: false, lenient_order: false }).unwrap();
        let got = r.channels().unwrap();
        assert_eq!((got[0].channel, &*got[0].times_ps), (3, &[4u64][..]));
        assert_eq!((got[1].channel, &*got[1].times_ps), (70_000, &[2u64, 8][..]));
    }
}

