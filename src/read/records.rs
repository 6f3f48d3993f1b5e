//! Format (b): interleaved fixed-size records of any [`RecordLayout`], in time order
//! overall, demultiplexed per channel (whole file or bounded-memory chunks), with the
//! counter-wrap rule and the exact tick → ps conversion of [`super::layout`].
//!
//! A whole mapped file is demultiplexed on the rayon pool in fixed record ranges
//! (`RANGE_RECORDS`, the same for any thread count), a batch of ranges at a time: a
//! counting pass gives each range its exact place in each channel's vector, then a
//! filling pass writes every range into its own part (no copy afterwards). Each range
//! starts from the record before it (previous counter) and from the wraps counted before
//! it (epoch), so the result is the serial one bit for bit, wrapping counters included.
//! Errors are found per range and then reported by the serial demultiplexer over the
//! first failing range, so the message is the serial one too. The common 16-byte layout
//! takes an AVX-512 path (`wide`) where the CPU has one. Buffered reads (`--no-mmap`)
//! and chunks stay serial, in one `Demuxer` pass (bounded memory: a range needs the
//! whole file's counts before it can be placed).

use super::layout::{Endian, Field, RecordLayout};
use super::mapping::Mapping;
use super::{looks_monotone, record_location, InputFile, ReadOptions, TagSource, MAX_PS};
use crate::output::atomic::AtomicOutput;
use crate::{Channel, ChannelTags, Error, Result};
use rayon::prelude::*;
use std::collections::HashMap;
use std::io::{BufWriter, Write};
use std::path::Path;
use std::sync::atomic::{AtomicUsize, Ordering};

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
/// Channel numbers the parallel passes look up in a flat table; others go through [`Slots`].
const FAST_CHANNELS: usize = 256;

/// Call the generic `f::<T, C>(args)` monomorphised for the layout's time field (`T`) and
/// channel field (`C`) shapes: one dispatch per call, then plain fixed-width loads.
macro_rules! by_fields {
    ($l:expr, $($f:ident)::+ ($($a:expr),*)) => {
        match ($l.time.width_bytes, $l.time.endian) {
            (4, Endian::Little) => by_fields!(@chan $l, Le<4>, $($f)::+ ($($a),*)),
            (4, Endian::Big) => by_fields!(@chan $l, Be<4>, $($f)::+ ($($a),*)),
            (8, Endian::Little) => by_fields!(@chan $l, Le<8>, $($f)::+ ($($a),*)),
            _ => by_fields!(@chan $l, Be<8>, $($f)::+ ($($a),*)),
        }
    };
    (@chan $l:expr, $T:ty, $($f:ident)::+ ($($a:expr),*)) => {
        match ($l.channel.width_bytes, $l.channel.endian) {
            (1, _) => $($f)::+::<$T, Le<1>>($($a),*),
            (2, Endian::Little) => $($f)::+::<$T, Le<2>>($($a),*),
            (2, Endian::Big) => $($f)::+::<$T, Be<2>>($($a),*),
            (4, Endian::Little) => $($f)::+::<$T, Le<4>>($($a),*),
            _ => $($f)::+::<$T, Be<4>>($($a),*),
        }
    };
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
        Ok(Records { count: body / rec, map, layout, lenient: opts.lenient_order, range_records: RANGE_RECORDS, batch_ranges: BATCH_RANGES })
    }

    pub fn layout(&self) -> &RecordLayout {
        &self.layout
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
        Ok(d.take(false))
    }

    /// The records (header skipped) when the parallel demultiplexer applies: a mapped file
    /// of more than one range.
    fn parallel_body(&self) -> Option<&[u8]> {
        let all = self.map.mapped_bytes()?;
        (self.count > self.range_records).then(|| &all[self.layout.header_bytes as usize..])
    }

    /// Demultiplex `body` (all records) in fixed ranges on the rayon pool, a batch of
    /// [`BATCH_RANGES`] ranges at a time (see the module doc): count the batch's ranges,
    /// lay them out after what the channel vectors already hold, fill them, then extend
    /// the vectors. The first batch sizes each channel's vector by its share of the rest,
    /// as the serial probe does (exactly, when one batch holds the whole file).
    fn demux_parallel(&self, body: &[u8]) -> Result<Vec<ChannelTags<'static>>> {
        let (l, rec) = (&self.layout, self.layout.record_bytes);
        let per = self.range_records.max(1);
        let range = |k: u64| (k * per, ((k + 1) * per).min(self.count));
        let span = |(a, b): (u64, u64)| &body[a as usize * rec..b as usize * rec];
        let mask = counter_mask(l);
        // The raw counter before record `a` (0 before the first, as in the serial pass).
        let prev_of = |a: u64| if a == 0 { 0 } else { l.time.get(&body[(a - 1) as usize * rec..]) & mask };
        let wrap = l.wrap_bits.is_some();
        let wide = wide::Wide::new(l, self.lenient);
        let tally_of = |r: (u64, u64)| wide.as_ref().and_then(|w| w.tally(span(r))).unwrap_or_else(|| by_fields!(l, tally(span(r), l, prev_of(r.0), wrap)));
        let mut d = Demuxer::new(l, self.map.path(), self.lenient);
        let (ranges, mut wraps) = (self.count.div_ceil(per), 0u64);
        let per_batch = self.batch_ranges.max(1);
        for first in (0..ranges).step_by(per_batch) {
            let batch: Vec<(u64, u64)> = (first..(first + per_batch as u64).min(ranges)).map(range).collect();
            let tallies: Vec<Tally> = batch.par_iter().map(|&r| tally_of(r)).collect();
            let plan = Batch::new(&tallies, &mut d.slots, d.new_slot_capacity, wraps, wrap_period(l));
            let (seen, end) = (batch[0].0, batch[batch.len() - 1].1);
            for (v, &n) in d.slots.times.iter_mut().zip(&plan.totals) {
                let capacity = v.capacity();
                match seen {
                    0 => v.reserve(n as usize + share(n, end, self.count - end)),
                    _ => v.reserve(n as usize),
                }
                if v.capacity() != capacity {
                    advise_huge_pages(v);
                }
            }
            if seen == 0 {
                d.new_slot_capacity = new_slot_capacity(self.count - end);
            }
            let bases: Vec<OutPtr> = d.slots.times.iter_mut().map(|v| OutPtr(v.as_mut_ptr().wrapping_add(v.len()))).collect();
            let ctx = FillCtx { layout: l, fast_ticks: d.fast_ticks, lenient: self.lenient, slots: &d.slots };
            let first_bad = AtomicUsize::new(usize::MAX);
            batch.par_iter().enumerate().for_each(|(k, &r)| {
                if k > first_bad.load(Ordering::Relaxed) {
                    return; // an earlier range already failed: only the first failure is reported
                }
                if !fill_range(span(r), &ctx, wide.as_ref(), prev_of(r.0), plan.epochs[k], plan.cursors(k, &d.slots.channels, &bases)) {
                    first_bad.fetch_min(k, Ordering::Relaxed);
                }
            });
            if let Some(k) = Some(first_bad.into_inner()).filter(|&k| k != usize::MAX) {
                return self.report_range(batch[k], prev_of(batch[k].0), plan.epochs[k]);
            }
            for (v, &n) in d.slots.times.iter_mut().zip(&plan.totals) {
                // SAFETY: `reserve` above made room for n more; every range of the batch
                // filled its segment completely (`fill_range` checks each cursor reached
                // its segment end) and the segments tile those n places, so all are set.
                unsafe { v.set_len(v.len() + n as usize) };
            }
            wraps = plan.wraps;
        }
        Ok(d.take(false))
    }

    /// The error of the first failing range `(a, b)`: the serial demultiplexer re-run over
    /// just that range, started from the counter and epoch the range starts from and fed
    /// through the serial blocks, so the message (record index, byte offset, hints) is the
    /// one a serial read gives. Should the range read cleanly now, the file changed between
    /// the passes: read it again serially from the start.
    #[cold]
    fn report_range(&self, (a, b): (u64, u64), prev_raw: u64, epoch_ticks: u64) -> Result<Vec<ChannelTags<'static>>> {
        let mut d = Demuxer::new(&self.layout, self.map.path(), self.lenient);
        (d.prev_raw, d.epoch_ticks) = (prev_raw, epoch_ticks);
        for (first, n) in self.serial_blocks().filter(|&(first, n)| first < b && first + n > a) {
            d.next_index = first;
            d.feed_span(&self.block(first, n)?, (a.max(first) - first) as usize, (b.min(first + n) - first) as usize)?;
        }
        self.demux_serial()
    }
}

impl TagSource for Records {
    fn file(&self) -> InputFile {
        InputFile { path: self.map.path().to_path_buf(), size_bytes: self.map.size_bytes(), format: "records" }
    }

    fn channels(&self) -> Result<Vec<ChannelTags<'_>>> {
        match self.parallel_body() {
            Some(body) => self.demux_parallel(body),
            None => self.demux_serial(),
        }
    }

    fn chunks(&self, events_per_chunk: usize) -> Result<Box<dyn Iterator<Item = Result<Vec<ChannelTags<'static>>>> + Send + '_>> {
        let per = (events_per_chunk as u64).max(1);
        let mut d = Demuxer::new(&self.layout, self.map.path(), self.lenient);
        let mut first = 0u64;
        let mut failed = false;
        Ok(Box::new(std::iter::from_fn(move || {
            if failed || first >= self.count {
                return None;
            }
            let n = per.min(self.count - first);
            let r = self.block(first, n).and_then(|b| d.feed(&b)).map(|()| d.take(true));
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
    fn declared_channels(&self) -> Option<Vec<Channel>> {
        None
    }
}

/// An unsigned field of compile-time width and byte order, so the demux loop compiles to
/// one plain load per field for each layout. (Each width reads its own integer type: going
/// through a zeroed 8-byte buffer makes the CPU stall on store-to-load forwarding.)
trait Uint {
    fn get(b: &[u8]) -> u64;
}
struct Le<const W: usize>;
struct Be<const W: usize>;
impl<const W: usize> Uint for Le<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        match W {
            1 => b[0] as u64,
            2 => u16::from_le_bytes(b[..2].try_into().expect("2-byte field")) as u64,
            4 => u32::from_le_bytes(b[..4].try_into().expect("4-byte field")) as u64,
            _ => u64::from_le_bytes(b[..8].try_into().expect("8-byte field")),
        }
    }
}
impl<const W: usize> Uint for Be<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        match W {
            1 => b[0] as u64,
            2 => u16::from_be_bytes(b[..2].try_into().expect("2-byte field")) as u64,
            4 => u32::from_be_bytes(b[..4].try_into().expect("4-byte field")) as u64,
            _ => u64::from_be_bytes(b[..8].try_into().expect("8-byte field")),
        }
    }
}

/// See [`Demuxer::fast_ticks`]: min of the u64-overflow bound and the last tick count
/// whose ps (round half up) stays below 2^62.
fn fast_ticks(tick_fs: u64) -> u64 {
    let overflow = (u64::MAX - 500) / tick_fs;
    let limit = (MAX_PS as u128 * 1000 - 501) / tick_fs as u128;
    overflow.min(limit.min(u64::MAX as u128) as u64)
}

/// ps of `raw` ticks after `epoch` ticks, exactly (round half up): u64 arithmetic up to
/// `fast_ticks` (1 ps ticks skip the multiply-divide; the test is loop-invariant), u128
/// past it; `None` at or past [`MAX_PS`].
#[inline(always)]
fn ticks_to_ps(epoch: u64, raw: u64, fast_ticks: u64, fs: u64) -> Option<u64> {
    let ticks = epoch.wrapping_add(raw);
    if ticks <= fast_ticks && ticks >= epoch {
        Some(if fs == 1000 { ticks } else { (ticks * fs + 500) / 1000 })
    } else {
        slow_ps(epoch, raw, fs)
    }
}

/// ps for tick counts past the u64 fast path (u128); `None` at or past [`MAX_PS`].
#[cold]
fn slow_ps(epoch: u64, raw: u64, fs: u64) -> Option<u64> {
    let ps = ((epoch as u128 + raw as u128) * fs as u128 + 500) / 1000;
    (ps < MAX_PS as u128).then_some(ps as u64)
}

/// The counter bits of the time field: the low `wrap_bits` bits when the layout wraps.
fn counter_mask(l: &RecordLayout) -> u64 {
    match l.wrap_bits {
        Some(b) if b < 64 => (1u64 << b) - 1,
        _ => u64::MAX,
    }
}

/// Ticks one wrap adds, 2^wrap_bits; 0 for a 64-bit wrap (a period past u64).
fn wrap_period(l: &RecordLayout) -> u64 {
    l.wrap_bits.and_then(|b| 1u64.checked_shl(b)).unwrap_or(0)
}

/// The epoch after one more wrap; saturates at u64::MAX (every later time is then past
/// the 2^62 ps limit), as does a period past u64.
fn next_epoch(epoch_ticks: u64, period: u64) -> u64 {
    epoch_ticks.checked_add(period).filter(|_| period > 0).unwrap_or(u64::MAX)
}

/// The epoch after `wraps` wraps from 0: `wraps` times [`next_epoch`] in one step.
fn epoch_after(wraps: u64, period: u64) -> u64 {
    match wraps {
        0 => 0,
        _ if period == 0 => u64::MAX,
        _ => wraps.saturating_mul(period),
    }
}

/// Channel numbers below this map to a slot through a flat table; others through a map.
const SMALL_CHANNELS: usize = 4096;
const NO_SLOT: u32 = u32::MAX;

/// A channel's share of `remaining` records, +5%, from its `events` among `seen` records.
fn share(events: u64, seen: u64, remaining: u64) -> usize {
    (events as f64 / seen.max(1) as f64 * remaining as f64 * 1.05) as usize
}

/// First capacity of a channel first seen after the probe, with `remaining` records to go.
fn new_slot_capacity(remaining: u64) -> usize {
    (remaining / 64).clamp(1024, 1 << 20) as usize
}

/// One-pass demultiplexer: raw records in, per-channel ps vectors out. Keeps the wrap
/// state and record index across `feed` calls, so chunks continue seamlessly.
struct Demuxer<'a> {
    layout: &'a RecordLayout,
    path: &'a Path,
    lenient: bool,
    slots: Slots,
    prev_raw: u64,
    /// Ticks added by wraps so far (multiple of 2^wrap_bits).
    epoch_ticks: u64,
    next_index: u64,
    /// Largest tick count on the u64 fast path: `ticks · tick_fs + 500` fits in u64 and the
    /// result is below [`MAX_PS`], so the loop needs no separate limit test.
    fast_ticks: u64,
    new_slot_capacity: usize,
}

impl<'a> Demuxer<'a> {
    fn new(layout: &'a RecordLayout, path: &'a Path, lenient: bool) -> Self {
        Demuxer {
            layout,
            path,
            lenient,
            slots: Slots::new(),
            prev_raw: 0,
            epoch_ticks: 0,
            next_index: 0,
            fast_ticks: fast_ticks(layout.tick.fs),
            new_slot_capacity: 1024,
        }
    }

    /// Give each channel room for its share (seen so far) of `remaining` records, +5%.
    fn reserve_by_share(&mut self, remaining: u64) {
        for v in &mut self.slots.times {
            v.reserve(share(v.len() as u64, self.next_index, remaining));
            advise_huge_pages(v);
        }
        self.new_slot_capacity = new_slot_capacity(remaining);
    }

    /// Per channel (ascending channel number) the events fed since the last `take`.
    /// `refill`: give each channel a new vector as large as the one handed out (chunked
    /// reading, where the next chunk has about as many events).
    fn take(&mut self, refill: bool) -> Vec<ChannelTags<'static>> {
        let mut out: Vec<_> = self
            .slots
            .channels
            .iter()
            .zip(&mut self.slots.times)
            .map(|(&c, v)| {
                let next = if refill { Vec::with_capacity(v.len()) } else { Vec::new() };
                ChannelTags::owned(c, "", std::mem::replace(v, next))
            })
            .collect();
        out.sort_by_key(|c| c.channel);
        out
    }

    /// Demultiplex whole records and move the record index past them.
    fn feed(&mut self, bytes: &[u8]) -> Result<()> {
        let n = bytes.len() / self.layout.record_bytes;
        let outcome = self.feed_span(bytes, 0, n);
        self.next_index += n as u64;
        outcome
    }

    /// Demultiplex records `from .. to` of `bytes`, a block whose first record is record
    /// `next_index` of the file (the index is left as it is); dispatch once on the field shapes.
    fn feed_span(&mut self, bytes: &[u8], from: usize, to: usize) -> Result<()> {
        by_fields!(self.layout, Self::run(self, bytes, from, to))
    }

    /// The hot loop. Shaped so the common record costs two fixed-width loads, one compare
    /// with the previous counter, a u64 multiply-add and constant division, one table
    /// lookup and a push into a pre-reserved vector. The counter state lives in locals and
    /// the slot table is moved out of `self` for the loop, so both stay in registers/L1
    /// instead of being reloaded after every store; wraps, errors and new channels leave
    /// the loop body through cold calls.
    fn run<T: Uint, C: Uint>(&mut self, bytes: &[u8], from: usize, to: usize) -> Result<()> {
        let (rec, t_off, c_off) = (self.layout.record_bytes, self.layout.time.offset_bytes, self.layout.channel.offset_bytes);
        let (fs, fast_ticks) = (self.layout.tick.fs, self.fast_ticks);
        let mask = counter_mask(self.layout);
        let mut slots = std::mem::take(&mut self.slots);
        let (mut prev, mut epoch) = (self.prev_raw, self.epoch_ticks);
        let mut outcome = Ok(());
        for (i, r) in bytes[from * rec..to * rec].chunks_exact(rec).enumerate().map(|(i, r)| (i + from, r)) {
            let raw = T::get(&r[t_off..]) & mask;
            let ch = C::get(&r[c_off..]);
            if raw < prev {
                self.prev_raw = prev;
                if let Err(e) = self.step_back(bytes, i, raw) {
                    outcome = Err(e);
                    break;
                }
                epoch = self.epoch_ticks;
            }
            prev = raw;
            let Some(ps) = ticks_to_ps(epoch, raw, fast_ticks, fs) else {
                outcome = Err(self.too_late(bytes, i, raw));
                break;
            };
            let slot = match slots.small.get(ch as usize) {
                Some(&s) if s != NO_SLOT => s,
                _ => slots.slot_of(ch, self.new_slot_capacity),
            };
            slots.times[slot as usize].push(ps);
        }
        self.slots = slots;
        self.prev_raw = prev;
        outcome
    }

    /// The raw counter went down: a wrap when the layout has one, else an error (strict)
    /// or accepted as is (lenient; the caller counts the out-of-order step).
    #[cold]
    fn step_back(&mut self, bytes: &[u8], i: usize, raw: u64) -> Result<()> {
        if self.layout.wrap_bits.is_some() {
            self.epoch_ticks = next_epoch(self.epoch_ticks, wrap_period(self.layout));
            return Ok(());
        }
        if self.lenient {
            return Ok(());
        }
        let (index, at) = self.location(i);
        let e = Error::bad_input(
            self.path,
            record_location(index, at),
            format!("time counter {raw} ticks after {} ticks", self.prev_raw),
            format!("≥ {} ticks (records in time order; the layout has no wrap)", self.prev_raw),
        );
        match wrap_guess(self.prev_raw, raw) {
            Some(bits) => Err(e.with_hint(format!(
                "the counter fell from the top to the bottom of a {bits}-bit range: it looks like it wraps at 2^{bits}; add wrap={bits} to the layout"
            ))),
            None => Err(self.with_swap_hint(e, bytes, i)),
        }
    }

    #[cold]
    fn too_late(&self, bytes: &[u8], i: usize, raw: u64) -> Error {
        let (index, at) = self.location(i);
        let ticks = self.epoch_ticks as u128 + raw as u128;
        let e = Error::bad_input(
            self.path,
            record_location(index, at),
            format!("time {ticks} ticks = {} ps", self.layout.tick.to_ps(ticks.min(u64::MAX as u128) as u64)),
            format!("below 2^62 = {MAX_PS} ps (about 53.4 days)"),
        );
        self.with_swap_hint(e, bytes, i)
    }

    /// Record index and byte offset of record `i` of the current block.
    fn location(&self, i: usize) -> (u64, u64) {
        let index = self.next_index + i as u64;
        (index, self.layout.header_bytes + index * self.layout.record_bytes as u64)
    }

    /// Suggest the other byte order when the time field read that way rises steadily
    /// over the records of this block around the failure (up to 2048 either side).
    fn with_swap_hint(&self, e: Error, bytes: &[u8], i: usize) -> Error {
        let t = self.layout.time;
        let other = Field { endian: t.endian.other(), ..t };
        let start = i.saturating_sub(2048);
        let recs = bytes.chunks_exact(self.layout.record_bytes).skip(start).take(i + 2048 - start);
        if looks_monotone(recs.map(|r| other.get(r))) {
            let try_spec = format!("time={}:{}:{}", t.offset_bytes, t.width_bytes, other.endian.short());
            return e.with_hint(format!("records look byte-swapped: try {try_spec}"));
        }
        e
    }

}

/// Channel number → slot (flat table for small numbers, a map for the rest) and each
/// slot's output vector.
#[derive(Debug, Default)]
struct Slots {
    small: Vec<u32>,
    big: HashMap<u64, u32>,
    channels: Vec<Channel>,
    times: Vec<Vec<u64>>,
}

impl Slots {
    fn new() -> Self {
        Slots { small: vec![NO_SLOT; SMALL_CHANNELS], ..Default::default() }
    }

    /// The slot of a channel the flat table does not answer (large number or first sight).
    #[cold]
    fn slot_of(&mut self, ch: u64, capacity: usize) -> u32 {
        if let Some(&s) = self.big.get(&ch) {
            return s;
        }
        let s = self.channels.len() as u32;
        // The channel field is at most 4 bytes wide, so `ch` fits a Channel (u32).
        self.channels.push(ch as Channel);
        self.times.push(Vec::with_capacity(capacity));
        if (ch as usize) < SMALL_CHANNELS {
            self.small[ch as usize] = s;
        } else {
            self.big.insert(ch, s);
        }
        s
    }

    /// The slot of channel `ch`, if it has one (read-only; the parallel fill's path for
    /// channel numbers past its own table).
    #[cold]
    fn find(&self, ch: u64) -> Option<usize> {
        match self.small.get(ch as usize) {
            Some(&s) => (s != NO_SLOT).then_some(s as usize),
            None => self.big.get(&ch).map(|&s| s as usize),
        }
    }
}

/// One range's counting pass: events per channel number (ascending), and counter wraps.
struct Tally {
    counts: Vec<(u64, u64)>,
    wraps: u64,
}

/// Count one range's records per channel and, when the layout wraps, the counter
/// decreases (wraps) from the counter `prev` of the record before the range on.
fn tally<T: Uint, C: Uint>(bytes: &[u8], l: &RecordLayout, prev: u64, wrap: bool) -> Tally {
    if wrap {
        tally_loop::<T, C, true>(bytes, l, prev)
    } else {
        tally_loop::<T, C, false>(bytes, l, prev)
    }
}

/// [`tally`] with the wrap count compiled in or out.
fn tally_loop<T: Uint, C: Uint, const WRAP: bool>(bytes: &[u8], l: &RecordLayout, mut prev: u64) -> Tally {
    let (rec, t_off, c_off, mask) = (l.record_bytes, l.time.offset_bytes, l.channel.offset_bytes, counter_mask(l));
    let mut small = Box::new([0u64; FAST_CHANNELS]);
    let mut big: HashMap<u64, u64> = HashMap::new();
    let mut wraps = 0u64;
    for r in bytes.chunks_exact(rec) {
        if WRAP {
            let raw = T::get(&r[t_off..]) & mask;
            wraps += (raw < prev) as u64;
            prev = raw;
        }
        match small.get_mut(C::get(&r[c_off..]) as usize) {
            Some(n) => *n += 1,
            None => *big.entry(C::get(&r[c_off..])).or_default() += 1,
        }
    }
    let mut counts: Vec<(u64, u64)> = small.iter().enumerate().filter(|&(_, &n)| n > 0).map(|(c, &n)| (c as u64, n)).chain(big).collect();
    counts.sort_unstable();
    Tally { counts, wraps }
}

/// Where a batch's ranges write: each range's part of each slot's vector (start after the
/// vector's current length, and length; `range · slots + slot`), each slot's total for
/// the batch, each range's starting epoch, and the wraps after the batch.
struct Batch {
    totals: Vec<u64>,
    starts: Vec<u64>,
    counts: Vec<u64>,
    epochs: Vec<u64>,
    wraps: u64,
}

impl Batch {
    /// Lay the ranges' tallies out one after another, giving channels first seen here a
    /// slot (with `capacity`) in `slots`; `wraps` before the batch, of `period` ticks each.
    fn new(tallies: &[Tally], slots: &mut Slots, capacity: usize, mut wraps: u64, period: u64) -> Batch {
        for &(c, _) in tallies.iter().flat_map(|t| &t.counts) {
            if slots.find(c).is_none() {
                slots.slot_of(c, capacity);
            }
        }
        let n = slots.channels.len();
        let (mut totals, mut starts, mut counts) = (vec![0u64; n], vec![0u64; n * tallies.len()], vec![0u64; n * tallies.len()]);
        let mut epochs = Vec::with_capacity(tallies.len());
        for (k, t) in tallies.iter().enumerate() {
            epochs.push(epoch_after(wraps, period));
            wraps += t.wraps;
            for &(c, m) in &t.counts {
                let Some(s) = slots.find(c) else { continue }; // given a slot just above
                (starts[k * n + s], counts[k * n + s]) = (totals[s], m);
                totals[s] += m;
            }
        }
        Batch { totals, starts, counts, epochs, wraps }
    }

    /// Range `k`'s write cursors: `bases` (one per slot, of `channels`) plus its parts.
    fn cursors(&self, k: usize, channels: &[Channel], bases: &[OutPtr]) -> Cursors {
        let n = bases.len();
        let mut c = Cursors { small: Box::new([Cursor::NONE; FAST_CHANNELS]), big: vec![Cursor::NONE; n] };
        for (s, (&ch, base)) in channels.iter().zip(bases).enumerate() {
            let (start, len) = (self.starts[k * n + s] as usize, self.counts[k * n + s] as usize);
            let seg = Cursor { at: base.0.wrapping_add(start), end: base.0.wrapping_add(start + len) };
            match c.small.get_mut(ch as usize) {
                Some(slot) => *slot = seg,
                None => c.big[s] = seg,
            }
        }
        c
    }
}

/// The start of a channel vector's allocation, shared by the ranges that fill it.
#[derive(Clone, Copy)]
struct OutPtr(*mut u64);
// SAFETY: the ranges write disjoint segments of the allocation (see `Plan::cursors`) and
// nothing reads it before every range is done.
unsafe impl Send for OutPtr {}
unsafe impl Sync for OutPtr {}

/// A range's next write position in one channel's vector and the end of its segment.
#[derive(Clone, Copy, PartialEq)]
struct Cursor {
    at: *mut u64,
    end: *mut u64,
}

impl Cursor {
    /// A channel with nothing to write in this range.
    const NONE: Cursor = Cursor { at: std::ptr::null_mut(), end: std::ptr::null_mut() };
}

/// One range's cursors: indexed by channel number below [`FAST_CHANNELS`] (absent
/// channels have an empty segment), by slot for larger numbers.
struct Cursors {
    small: Box<[Cursor; FAST_CHANNELS]>,
    big: Vec<Cursor>,
}

/// What every range's fill shares.
struct FillCtx<'a> {
    layout: &'a RecordLayout,
    fast_ticks: u64,
    lenient: bool,
    slots: &'a Slots,
}

/// Fill one range: on the wide path as far as it goes, then with the scalar loop.
fn fill_range(bytes: &[u8], ctx: &FillCtx, wide: Option<&wide::Wide>, prev: u64, epoch: u64, mut cur: Cursors) -> bool {
    let (l, rec) = (ctx.layout, ctx.layout.record_bytes);
    let done = match wide.map_or(Some(0), |w| w.fill(bytes, prev, &mut cur)) {
        Some(done) => done,
        None => return false,
    };
    let prev = if done == 0 { prev } else { l.time.get(&bytes[(done - 1) * rec..]) };
    by_fields!(l, fill(&bytes[done * rec..], ctx, prev, epoch, cur))
}

/// Fill one range: each record's ps written at its channel's cursor. Starts from the
/// counter `prev` of the record before the range and from `epoch`, and follows the serial
/// rules exactly (wraps, lenient order, the fast path and the 2^62 limit). `false` when the
/// serial pass would fail in this range, or when a record does not fit the counting pass
/// (a channel not counted, a segment overfull or left short: the file changed).
/// Dispatches on 1 ps ticks and on wrapping, so the loop carries neither test.
fn fill<T: Uint, C: Uint>(bytes: &[u8], ctx: &FillCtx, prev: u64, epoch: u64, cur: Cursors) -> bool {
    match (ctx.layout.tick.fs == 1000, ctx.layout.wrap_bits.is_some()) {
        (true, false) => fill_loop::<T, C, true, false>(bytes, ctx, prev, epoch, cur),
        (true, true) => fill_loop::<T, C, true, true>(bytes, ctx, prev, epoch, cur),
        (false, false) => fill_loop::<T, C, false, false>(bytes, ctx, prev, epoch, cur),
        (false, true) => fill_loop::<T, C, false, true>(bytes, ctx, prev, epoch, cur),
    }
}

/// [`fill`] for one tick kind (`UNIT`: 1 ps) and wrap kind.
fn fill_loop<T: Uint, C: Uint, const UNIT: bool, const WRAP: bool>(bytes: &[u8], ctx: &FillCtx, mut prev: u64, mut epoch: u64, mut cur: Cursors) -> bool {
    let l = ctx.layout;
    let (rec, t_off, c_off) = (l.record_bytes, l.time.offset_bytes, l.channel.offset_bytes);
    let (fs, mask, period) = (if UNIT { 1000 } else { l.tick.fs }, counter_mask(l), wrap_period(l));
    if !WRAP {
        epoch = 0; // no wraps before any range (lets the compiler drop the epoch arithmetic)
    }
    for r in bytes.chunks_exact(rec) {
        let raw = if WRAP { T::get(&r[t_off..]) & mask } else { T::get(&r[t_off..]) };
        let ch = C::get(&r[c_off..]);
        if raw < prev {
            if WRAP {
                epoch = next_epoch(epoch, period);
            } else if !ctx.lenient {
                return false;
            }
        }
        prev = raw;
        let Some(ps) = ticks_to_ps(epoch, raw, ctx.fast_ticks, fs) else { return false };
        let c = match cur.small.get_mut(ch as usize) {
            Some(c) => c,
            None => match ctx.slots.find(ch).and_then(|s| cur.big.get_mut(s)) {
                Some(c) => c,
                None => return false,
            },
        };
        if c.at == c.end {
            return false;
        }
        // SAFETY: `c.at` lies in this range's own segment of the channel's vector
        // (`Plan::cursors`), below its end (just checked), inside the allocation; no other
        // range writes there and nothing reads the vector until every range is done.
        unsafe {
            c.at.write(ps);
            c.at = c.at.add(1);
        }
    }
    cur.small.iter().chain(&cur.big).all(|c| c.at == c.end)
}

/// The wide path: AVX-512 demultiplexing of the most common layout, 16-byte records with
/// an 8-byte little-endian time in one half and a little-endian channel in the other, a
/// whole number of ps per tick and no wrap, eight records per step. A step compares all
/// eight channels with each of a range's channels (at most [`wide::LANES`]) at once and
/// moves each channel's times to its cursor with one compress and one masked store, with
/// no per-record branch. Same results as the scalar loops, which take everything else (and
/// the last records of a range, fewer than a step).
#[cfg(target_arch = "x86_64")]
mod wide {
    use super::{Cursor, Cursors, Endian, RecordLayout, Tally, MAX_PS};
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
    pub(super) struct Wide {
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
        pub(super) fn new(l: &RecordLayout, lenient: bool) -> Option<Wide> {
            let (t, c) = (&l.time, &l.channel);
            // With the time in bytes 0..8 or 8..16 of 16, validation puts the channel in the other half.
            let shape = l.record_bytes == 16 && t.width_bytes == 8 && t.endian == Endian::Little && t.offset_bytes % 8 == 0;
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

        /// [`super::tally`] for this layout; `None` when the range holds more than
        /// [`LANES`] channels.
        pub(super) fn tally(&self, bytes: &[u8]) -> Option<Tally> {
            // SAFETY: `new` checked that the CPU has these instructions.
            unsafe { self.tally_avx512(bytes) }
        }

        /// Fill whole steps of a range from its cursors, as [`super::fill_loop`] does;
        /// the records done (the caller fills the rest), or `None` where that loop would
        /// return `false`. Does nothing (0 records) when the range's channels do not suit.
        pub(super) fn fill(&self, bytes: &[u8], prev: u64, cur: &mut Cursors) -> Option<usize> {
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
            // this range's own segments (see `super::fill_loop`).
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
mod wide {
    use super::{Cursors, RecordLayout, Tally};

    pub(super) struct Wide;

    impl Wide {
        pub(super) fn new(_: &RecordLayout, _: bool) -> Option<Wide> {
            None
        }
        pub(super) fn tally(&self, _: &[u8]) -> Option<Tally> {
            None
        }
        pub(super) fn fill(&self, _: &[u8], _: u64, _: &mut Cursors) -> Option<usize> {
            Some(0)
        }
    }
}

/// Ask for transparent huge pages on a large freshly reserved vector. Demultiplexing
/// writes every output byte once, and with 4 KiB pages the first-touch page faults cost
/// more than the demux loop itself (measured with perf in benches/read.rs); 2 MiB pages
/// cut the faults 512-fold. Advice only: no effect on contents or on other systems.
fn advise_huge_pages(v: &mut Vec<u64>) {
    #[cfg(target_os = "linux")]
    {
        const HUGE: usize = 2 << 20;
        const MADV_HUGEPAGE: std::ffi::c_int = 14;
        extern "C" {
            fn madvise(addr: *mut std::ffi::c_void, len: usize, advice: std::ffi::c_int) -> std::ffi::c_int;
        }
        let start = v.as_mut_ptr() as usize;
        let end = start + v.capacity() * std::mem::size_of::<u64>();
        let (a, b) = ((start + HUGE - 1) & !(HUGE - 1), end & !(HUGE - 1));
        if b > a {
            // SAFETY: [a, b) lies inside the vector's own allocation; MADV_HUGEPAGE only
            // changes how the kernel backs those pages, never their contents.
            unsafe { madvise(a as *mut std::ffi::c_void, b - a, MADV_HUGEPAGE) };
        }
    }
    #[cfg(not(target_os = "linux"))]
    let _ = v;
}

/// A step from `prev` down to `raw` that looks like a counter wrap: `prev` in the top
/// eighth of the smallest power-of-two range holding it (2^B, B ≥ 8) and `raw` in the
/// bottom eighth. Returns B.
fn wrap_guess(prev: u64, raw: u64) -> Option<u32> {
    let bits = 64 - prev.leading_zeros();
    let eighth = 1u64.checked_shl(bits)?.checked_shr(3)?;
    (bits >= 8 && prev >= 7 * eighth && raw < eighth).then_some(bits)
}

/// Write interleaved records (format b) in time order with `layout` (ps → ticks by the
/// layout's tick length; narrow time fields wrap as the layout says). Ties keep the order
/// of `channels`. Replaces an existing file (library writers always overwrite).
pub fn write_records(path: &Path, layout: &RecordLayout, channels: &[ChannelTags<'_>]) -> Result<()> {
    layout.validate().map_err(|m| Error::Usage(format!("{}: layout: {m}", path.display())))?;
    let out = AtomicOutput::prepare(path, true)?;
    let f = std::fs::File::create(out.temp_path()).map_err(|e| Error::io(path, e))?;
    let mut w = BufWriter::with_capacity(1 << 20, f);
    let io = |e| Error::io(path, e);
    w.write_all(&vec![0u8; layout.header_bytes as usize]).map_err(io)?;
    let mut enc = RecordEncoder::new(layout, path);
    for (ps, ch) in merged(channels) {
        w.write_all(enc.encode(ps, ch)?).map_err(io)?;
    }
    w.flush().map_err(io)?;
    drop(w);
    out.commit()
}

/// All (ps, channel) pairs of `channels` in time order (k-way merge, ties by input order).
fn merged<'c>(channels: &'c [ChannelTags<'_>]) -> impl Iterator<Item = (u64, Channel)> + 'c {
    use std::cmp::Reverse;
    use std::collections::BinaryHeap;
    let mut heap: BinaryHeap<Reverse<(u64, usize, usize)>> =
        channels.iter().enumerate().filter(|(_, c)| !c.is_empty()).map(|(k, c)| Reverse((c.times_ps[0], k, 0))).collect();
    std::iter::from_fn(move || {
        let Reverse((ps, k, i)) = heap.pop()?;
        if let Some(&next) = channels[k].times_ps.get(i + 1) {
            heap.push(Reverse((next, k, i + 1)));
        }
        Some((ps, channels[k].channel))
    })
}

/// ps → one record's bytes, enforcing what the reader can recover.
struct RecordEncoder<'a> {
    layout: &'a RecordLayout,
    path: &'a Path,
    prev_ticks: Option<u128>,
    index: u64,
    buf: Vec<u8>,
}

impl<'a> RecordEncoder<'a> {
    fn new(layout: &'a RecordLayout, path: &'a Path) -> Self {
        RecordEncoder { layout, path, prev_ticks: None, index: 0, buf: vec![0; layout.record_bytes] }
    }

    fn encode(&mut self, ps: u64, ch: Channel) -> Result<&[u8]> {
        let l = self.layout;
        let ticks = l.tick.from_ps(ps);
        let field_bits = 8 * l.time.width_bytes as u32;
        let fail = |m: String| Error::Usage(format!("{}: record {}: {m}", self.path.display(), self.index));
        let raw = match l.wrap_bits {
            Some(bits) => {
                let gap = ticks - self.prev_ticks.unwrap_or(0);
                if bits < 128 && gap >> bits != 0 {
                    return Err(fail(format!("a gap of {gap} ticks is a full wrap period (2^{bits}) or more; the reader could not recover it")));
                }
                (ticks & ((1u128 << bits) - 1)) as u64
            }
            None if field_bits == 64 || ticks >> field_bits == 0 => ticks as u64,
            None => return Err(fail(format!("{ticks} ticks do not fit the {field_bits}-bit time field and the layout has no wrap"))),
        };
        if (ch as u64) >> (8 * l.channel.width_bytes as u32) != 0 {
            return Err(fail(format!("channel {ch} does not fit the {}-byte channel field", l.channel.width_bytes)));
        }
        self.prev_ticks = Some(ticks);
        self.index += 1;
        put_uint(&mut self.buf, &l.time, raw);
        put_uint(&mut self.buf, &l.channel, ch as u64);
        Ok(&self.buf)
    }
}

fn put_uint(rec: &mut [u8], f: &Field, v: u64) {
    let dst = &mut rec[f.offset_bytes..f.offset_bytes + f.width_bytes];
    match f.endian {
        Endian::Little => dst.copy_from_slice(&v.to_le_bytes()[..f.width_bytes]),
        Endian::Big => dst.copy_from_slice(&v.to_be_bytes()[8 - f.width_bytes..]),
    }
}

#[cfg(test)]
mod tests {
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
        let r = Records::open(&p, l, ReadOptions::default()).unwrap();
        let c = r.channels().unwrap();
        assert_eq!(&*c[0].times_ps, &[250, 266]);
        assert_eq!(&*c[1].times_ps, &[259]);
    }

    #[test]
    fn fast_path_ends_exactly_at_the_limit() {
        for fs in [1u64, 500, 1000, 80_955, 1 << 40] {
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
        let r = Records::open(&p, layout("rec=8,time=0:4,chan=4:1,tick_ps=1,wrap=12"), ReadOptions::default()).unwrap();
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
        serial.map(|v| v.len())
    }

    #[test]
    fn parallel_demux_equals_serial() {
        let d = tempfile::tempdir().unwrap();
        let cases = [
            ("rec=16,time=0:8:le,chan=8:2:le,tick_ps=1", 3, 300),        // the wide path where the CPU has it
            ("rec=16,time=8:8:le,chan=0:4:le,tick_ps=3", 4, 70_000),     // time in the second half, a big channel number
            ("rec=16,time=0:8:le,chan=8:1,tick_ps=1", 11, 7),            // more channels than the wide path takes
            ("rec=12,skip=5,time=0:8:be,chan=8:4:be,tick_ps=80.955", 3, 70_000), // scalar, rounding ticks
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
