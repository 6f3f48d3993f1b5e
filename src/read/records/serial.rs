//! The serial demultiplexer: raw records in file order → per-channel ps vectors, keeping
//! the counter state and record index across blocks so chunks continue seamlessly; the
//! channel → slot table; and the typed field loads (through `byteorder`) the hot loops use.

use super::super::layout::{Field, RecordLayout};
use super::super::{looks_monotone, record_location, MAX_PS};
use super::kinds::{Class, Classifier};
use super::ticks::{counter_mask, fast_ticks, next_epoch, ticks_ps, ticks_to_ps, wrap_guess, wrap_period, Clock, ClockRules};
use crate::{Channel, ChannelTags, Error, Result};
use byteorder::{BigEndian, ByteOrder, LittleEndian};
use std::collections::HashMap;
use std::path::Path;

/// An unsigned field of compile-time width and byte order, so the demux loop compiles to
/// one plain load per field for each layout. (Each width reads its own integer type: going
/// through a zeroed 8-byte buffer makes the CPU stall on store-to-load forwarding.)
pub(super) trait Uint {
    fn get(b: &[u8]) -> u64;
}
pub(super) struct Le<const W: usize>;
pub(super) struct Be<const W: usize>;
impl<const W: usize> Uint for Le<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        match W {
            1 => b[0] as u64,
            2 => LittleEndian::read_u16(b) as u64,
            4 => LittleEndian::read_u32(b) as u64,
            _ => LittleEndian::read_u64(b),
        }
    }
}
impl<const W: usize> Uint for Be<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        match W {
            1 => b[0] as u64,
            2 => BigEndian::read_u16(b) as u64,
            4 => BigEndian::read_u32(b) as u64,
            _ => BigEndian::read_u64(b),
        }
    }
}

/// Channel numbers below this map to a slot through a flat table; others through a map.
pub(super) const SMALL_CHANNELS: usize = 4096;
pub(super) const NO_SLOT: u32 = u32::MAX;

/// A channel's share of `remaining` records, +5%, from its `events` among `seen` records.
pub(super) fn share(events: u64, seen: u64, remaining: u64) -> usize {
    (events as f64 / seen.max(1) as f64 * remaining as f64 * 1.05) as usize
}

/// First capacity of a channel first seen after the probe, with `remaining` records to go.
pub(super) fn new_slot_capacity(remaining: u64) -> usize {
    (remaining / 64).clamp(1024, 1 << 20) as usize
}

/// One-pass demultiplexer: raw records in, per-channel ps vectors out. Keeps the wrap
/// state and record index across `feed` calls, so chunks continue seamlessly.
pub(super) struct Demuxer<'a> {
    pub(super) layout: &'a RecordLayout,
    path: &'a Path,
    lenient: bool,
    pub(super) slots: Slots,
    pub(super) prev_raw: u64,
    /// Ticks added by wraps so far (multiple of 2^wrap_bits).
    pub(super) epoch_ticks: u64,
    pub(super) next_index: u64,
    /// Largest tick count on the u64 fast path: `ticks · tick_fs + 500` fits in u64 and the
    /// result is below [`MAX_PS`], so the loop needs no separate limit test.
    pub(super) fast_ticks: u64,
    pub(super) new_slot_capacity: usize,
    /// Layouts with kinds, a map, an edge flag or a reorder tolerance: the counter state
    /// ([`Clock`]), each slot's last ps (the per-channel order check when the tolerance
    /// lets channels cross), records of unknown kinds skipped, and each slot's tags held
    /// back from the chunk handed out (later tags may still come before them).
    pub(super) clock: Clock,
    last_ps: Vec<u64>,
    pub(super) skipped: u64,
    held: Vec<Vec<u64>>,
}

impl<'a> Demuxer<'a> {
    pub(super) fn new(layout: &'a RecordLayout, path: &'a Path, lenient: bool) -> Self {
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
            clock: Clock::default(),
            last_ps: Vec::new(),
            skipped: 0,
            held: Vec::new(),
        }
    }

    /// Give each channel room for its share (seen so far) of `remaining` records, +5%.
    pub(super) fn reserve_by_share(&mut self, remaining: u64) {
        for v in &mut self.slots.times {
            v.reserve(share(v.len() as u64, self.next_index, remaining));
            advise_huge_pages(v);
        }
        self.new_slot_capacity = new_slot_capacity(remaining);
    }

    /// Per channel (ascending channel number) the events fed since the last `take`.
    /// `refill`: give each channel a new vector as large as the one handed out (chunked
    /// reading, where the next chunk has about as many events).
    pub(super) fn take(&mut self, refill: bool) -> Vec<ChannelTags<'static>> {
        if !self.held.is_empty() {
            // Tags held back from the previous chunk come first in their channel.
            for (v, h) in self.slots.times.iter_mut().zip(self.held.iter_mut()) {
                if !h.is_empty() {
                    h.append(v);
                    std::mem::swap(v, h);
                }
            }
            self.held.clear();
        }
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
    pub(super) fn feed(&mut self, bytes: &[u8]) -> Result<()> {
        let n = bytes.len() / self.layout.record_bytes;
        let outcome = self.feed_span(bytes, 0, n);
        self.next_index += n as u64;
        outcome
    }

    /// Demultiplex records `from .. to` of `bytes`, a block whose first record is record
    /// `next_index` of the file (the index is left as it is); dispatch once on the field shapes.
    pub(super) fn feed_span(&mut self, bytes: &[u8], from: usize, to: usize) -> Result<()> {
        if !super::is_fast(self.layout) {
            return self.run_rich(bytes, from, to);
        }
        by_fields!(self.layout, Self::run(self, bytes, from, to))
    }

    /// [`Demuxer::take`] for a chunk of a stream: with a reorder tolerance, tags later than
    /// every tag still to come may not be handed out yet (the engine takes a chunk's latest
    /// tag as a bound for all later ones), so each channel's tags after the watermark
    /// (latest ticks − tolerance, in ps) are held back for the next chunk. `last`: hand out
    /// everything. Memory held: the tags of one tolerance, rate × T.
    pub(super) fn take_chunk(&mut self, last: bool) -> Vec<ChannelTags<'static>> {
        let mut out = self.take(true);
        if last || self.layout.reorder_ps == 0 {
            return out;
        }
        let rules = ClockRules::of(self.layout, self.lenient);
        let watermark = match self.clock.latest {
            Some(m) if m >= rules.tolerance => ticks_ps(m - rules.tolerance, self.layout.tick.fs).unwrap_or(u64::MAX),
            _ => return self.hold_all(out),
        };
        // `take` sorted by channel; hold per slot, in the slot order `take` restores.
        self.held = vec![Vec::new(); self.slots.channels.len()];
        for c in &mut out {
            let Some(s) = self.slots.find(c.channel as u64) else { continue };
            let v = c.times_ps.to_mut();
            let keep = v.partition_point(|&x| x <= watermark);
            self.held[s] = v.split_off(keep);
        }
        out
    }

    /// Hand out empty channels and hold every tag back.
    fn hold_all(&mut self, out: Vec<ChannelTags<'static>>) -> Vec<ChannelTags<'static>> {
        self.held = vec![Vec::new(); self.slots.channels.len()];
        out.into_iter()
            .map(|mut c| {
                if let Some(s) = self.slots.find(c.channel as u64) {
                    self.held[s] = std::mem::take(c.times_ps.to_mut());
                }
                c
            })
            .collect()
    }

    /// The loop for layouts with kinds, a map, an edge flag, a reorder tolerance or field
    /// words the typed loads do not cover: each record classified ([`Classifier`]) and
    /// timed by the [`Clock`]. The parallel fill follows the same rules.
    fn run_rich(&mut self, bytes: &[u8], from: usize, to: usize) -> Result<()> {
        let l = self.layout;
        let (rec, fs) = (l.record_bytes, l.tick.fs);
        let classes = Classifier::new(l);
        let rules = ClockRules::of(l, self.lenient);
        let per_channel = rules.tolerance > 0 && !self.lenient;
        let skip_unknown = l.kinds.as_ref().is_some_and(|k| k.skip_unknown);
        for (i, r) in bytes[from * rec..to * rec].chunks_exact(rec).enumerate().map(|(i, r)| (i + from, r)) {
            match classes.classify(r) {
                Class::Skip => {}
                Class::Overflow(n) => self.clock.overflow(n, &rules),
                Class::UnknownKind(_) if skip_unknown => self.skipped += 1,
                Class::UnknownKind(v) => return Err(self.unknown_kind(i, v)),
                Class::Unmapped(v) => return Err(self.unmapped(i, v)),
                Class::Tag { raw, channel, keep } => {
                    let ticks = self.clock.tag(raw, &rules).map_err(|b| self.back(bytes, i, b, &rules))?;
                    let Some(ps) = ticks_ps(ticks, fs) else { return Err(self.too_late_ticks(bytes, i, ticks)) };
                    if !keep {
                        continue;
                    }
                    let s = match self.slots.find(channel as u64) {
                        Some(s) => s,
                        None => self.slots.slot_of(channel as u64, self.new_slot_capacity) as usize,
                    };
                    if per_channel {
                        if self.last_ps.len() <= s {
                            self.last_ps.resize(s + 1, 0);
                        }
                        if ps < self.last_ps[s] {
                            return Err(self.channel_back(i, channel, ps, self.last_ps[s]));
                        }
                        self.last_ps[s] = ps;
                    }
                    self.slots.times[s].push(ps);
                }
            }
        }
        Ok(())
    }

    /// After a parallel batch: whether each slot's tags from `before[slot]` on ascend,
    /// starting from the slot's last tag before them (the per-channel check of
    /// [`Demuxer::run_rich`]); moves each slot's last tag on.
    pub(super) fn channels_ascend(&mut self, before: &[usize]) -> bool {
        use rayon::prelude::*;
        if self.last_ps.len() < self.slots.times.len() {
            self.last_ps.resize(self.slots.times.len(), 0);
        }
        let ok = self.slots.times.par_iter().enumerate().all(|(s, v)| {
            let from = before.get(s).copied().unwrap_or(0);
            let mut last = if from > 0 { v[from - 1] } else { self.last_ps[s] };
            v[from..].iter().all(|&x| {
                let up = x >= last;
                last = x;
                up
            })
        });
        for (s, v) in self.slots.times.iter().enumerate() {
            if let Some(&x) = v.last() {
                self.last_ps[s] = x;
            }
        }
        ok
    }

    #[cold]
    fn unknown_kind(&self, i: usize, v: u64) -> Error {
        let (index, at) = self.location(i);
        let known: Vec<String> = self.layout.kinds.iter().flat_map(|k| k.table.keys()).map(|k| k.to_string()).collect();
        Error::bad_input(self.path, record_location(index, at), format!("kind value {v}"), format!("one of the layout's kind values ({})", known.join(", ")))
            .with_hint("add the value to the layout's kinds, or let the layout skip and count unknown kinds (unknown = \"skip\")")
    }

    #[cold]
    fn unmapped(&self, i: usize, v: i64) -> Error {
        let (index, at) = self.location(i);
        let known: Vec<String> = self.layout.channel_map.iter().flat_map(|m| m.keys()).map(|k| k.to_string()).collect();
        Error::bad_input(self.path, record_location(index, at), format!("raw channel value {v}"), format!("a raw value of the layout's channel map ({})", known.join(", ")))
    }

    #[cold]
    fn back(&self, bytes: &[u8], i: usize, b: super::ticks::Back, rules: &ClockRules) -> Error {
        let (index, at) = self.location(i);
        let expected = match rules.tolerance {
            0 => format!("≥ {} ticks (records in time order)", b.latest),
            t => format!("at most the reorder tolerance of {t} ticks ({} ps) before the latest time {} ticks", self.layout.reorder_ps, b.latest),
        };
        let e = Error::bad_input(self.path, record_location(index, at), format!("time {} ticks, {} ticks before the latest time {} ticks", b.ticks, b.latest - b.ticks, b.latest), expected);
        self.with_swap_hint(e, bytes, i)
    }

    #[cold]
    fn channel_back(&self, i: usize, channel: Channel, ps: u64, last: u64) -> Error {
        let (index, at) = self.location(i);
        Error::bad_input(
            self.path,
            record_location(index, at),
            format!("channel {channel} at {ps} ps after {last} ps on the same channel"),
            format!("≥ {last} ps (the reorder tolerance applies between channels; each channel stays in time order)"),
        )
    }

    #[cold]
    fn too_late_ticks(&self, bytes: &[u8], i: usize, ticks: u128) -> Error {
        let (index, at) = self.location(i);
        let ps = ticks.saturating_mul(self.layout.tick.fs as u128).saturating_add(500) / 1000;
        let e = Error::bad_input(self.path, record_location(index, at), format!("time {ticks} ticks = {ps} ps"), format!("below 2^62 = {MAX_PS} ps (about 53.4 days)"));
        self.with_swap_hint(e, bytes, i)
    }

    /// The hot loop. Shaped so the common record costs two fixed-width loads, one compare
    /// with the previous counter, a u64 multiply-add and constant division, one table
    /// lookup and a push into a pre-reserved vector. The counter state lives in locals and
    /// the slot table is moved out of `self` for the loop, so both stay in registers/L1
    /// instead of being reloaded after every store; wraps, errors and new channels leave
    /// the loop body through cold calls.
    fn run<T: Uint, C: Uint>(&mut self, bytes: &[u8], from: usize, to: usize) -> Result<()> {
        let (rec, t_off, c_off) = (self.layout.record_bytes, self.layout.time.offset_bytes, self.layout.channel.offset_bytes);
        let (t_shift, c_shift, c_mask) = (self.layout.time.shift_bits, self.layout.channel.shift_bits, self.layout.channel.mask());
        let (fs, fast_ticks) = (self.layout.tick.fs, self.fast_ticks);
        let mask = counter_mask(self.layout);
        let mut slots = std::mem::take(&mut self.slots);
        let (mut prev, mut epoch) = (self.prev_raw, self.epoch_ticks);
        let mut outcome = Ok(());
        for (i, r) in bytes[from * rec..to * rec].chunks_exact(rec).enumerate().map(|(i, r)| (i + from, r)) {
            let raw = T::get(&r[t_off..]) >> t_shift & mask;
            let ch = C::get(&r[c_off..]) >> c_shift & c_mask;
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
            let try_spec = format!("time={}", other.spec());
            return e.with_hint(format!("records look byte-swapped: try {try_spec}"));
        }
        e
    }
}

/// Channel number → slot (flat table for small numbers, a map for the rest) and each
/// slot's output vector.
#[derive(Debug, Default)]
pub(super) struct Slots {
    pub(super) small: Vec<u32>,
    pub(super) big: HashMap<u64, u32>,
    pub(super) channels: Vec<Channel>,
    pub(super) times: Vec<Vec<u64>>,
}

impl Slots {
    pub(super) fn new() -> Self {
        Slots { small: vec![NO_SLOT; SMALL_CHANNELS], ..Default::default() }
    }

    /// The slot of a channel the flat table does not answer (large number or first sight).
    #[cold]
    pub(super) fn slot_of(&mut self, ch: u64, capacity: usize) -> u32 {
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
    pub(super) fn find(&self, ch: u64) -> Option<usize> {
        match self.small.get(ch as usize) {
            Some(&s) => (s != NO_SLOT).then_some(s as usize),
            None => self.big.get(&ch).map(|&s| s as usize),
        }
    }
}

/// Ask for transparent huge pages on a large freshly reserved vector. Demultiplexing
/// writes every output byte once, and with 4 KiB pages the first-touch page faults cost
/// more than the demux loop itself (measured with perf in benches/read.rs); 2 MiB pages
/// cut the faults 512-fold. Advice only: no effect on contents or on other systems.
pub(super) fn advise_huge_pages(v: &mut Vec<u64>) {
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

