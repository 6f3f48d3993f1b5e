//! The parallel demultiplexer's passes over fixed record ranges: a counting pass per
//! range (events per channel, counter wraps or overflow periods), the batch plan that
//! places each range's part of every channel vector and its starting epoch (a prefix sum
//! over the ranges), and the filling pass that writes each range into its own parts.

use super::super::layout::RecordLayout;
use super::kinds::{Class, Classifier};
use super::serial::{Slots, Uint};
use super::ticks::{counter_mask, epoch_after, next_epoch, ticks_ps, ticks_to_ps, wrap_period, Clock, ClockRules};
use super::wide;
use crate::Channel;
use std::collections::HashMap;

/// Channel numbers the parallel passes look up in a flat table; others go through [`Slots`].
pub(super) const FAST_CHANNELS: usize = 256;

/// One range's counting pass: events per channel number (ascending), and counter wraps.
pub(super) struct Tally {
    pub(super) counts: Vec<(u64, u64)>,
    pub(super) wraps: u64,
}

/// Count one range's records per channel and, when the layout wraps, the counter
/// decreases (wraps) from the counter `prev` of the record before the range on.
pub(super) fn tally<T: Uint, C: Uint>(bytes: &[u8], l: &RecordLayout, prev: u64, wrap: bool) -> Tally {
    if wrap {
        tally_loop::<T, C, true>(bytes, l, prev)
    } else {
        tally_loop::<T, C, false>(bytes, l, prev)
    }
}

/// [`tally`] with the wrap count compiled in or out.
pub(super) fn tally_loop<T: Uint, C: Uint, const WRAP: bool>(bytes: &[u8], l: &RecordLayout, mut prev: u64) -> Tally {
    let (rec, t_off, c_off, mask) = (l.record_bytes, l.time.offset_bytes, l.channel.offset_bytes, counter_mask(l));
    let (t_shift, c_shift, c_mask) = (l.time.shift_bits, l.channel.shift_bits, l.channel.mask());
    let mut small = Box::new([0u64; FAST_CHANNELS]);
    let mut big: HashMap<u64, u64> = HashMap::new();
    let mut wraps = 0u64;
    for r in bytes.chunks_exact(rec) {
        if WRAP {
            let raw = T::get(&r[t_off..]) >> t_shift & mask;
            wraps += (raw < prev) as u64;
            prev = raw;
        }
        let ch = C::get(&r[c_off..]) >> c_shift & c_mask;
        match small.get_mut(ch as usize) {
            Some(n) => *n += 1,
            None => *big.entry(ch).or_default() += 1,
        }
    }
    let mut counts: Vec<(u64, u64)> = small.iter().enumerate().filter(|&(_, &n)| n > 0).map(|(c, &n)| (c as u64, n)).chain(big).collect();
    counts.sort_unstable();
    Tally { counts, wraps }
}

/// Where a batch's ranges write: each range's part of each slot's vector (start after the
/// vector's current length, and length; `range · slots + slot`), each slot's total for
/// the batch, each range's starting epoch, and the wraps after the batch.
pub(super) struct Batch {
    pub(super) totals: Vec<u64>,
    starts: Vec<u64>,
    counts: Vec<u64>,
    pub(super) epochs: Vec<u64>,
    pub(super) wraps: u64,
}

impl Batch {
    /// Lay the ranges' tallies out one after another, giving channels first seen here a
    /// slot (with `capacity`) in `slots`; `wraps` before the batch, of `period` ticks each.
    pub(super) fn new(tallies: &[Tally], slots: &mut Slots, capacity: usize, mut wraps: u64, period: u64) -> Batch {
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
            wraps = wraps.saturating_add(t.wraps);
            for &(c, m) in &t.counts {
                let Some(s) = slots.find(c) else { continue }; // given a slot just above
                (starts[k * n + s], counts[k * n + s]) = (totals[s], m);
                totals[s] += m;
            }
        }
        Batch { totals, starts, counts, epochs, wraps }
    }

    /// Range `k`'s write cursors: `bases` (one per slot, of `channels`) plus its parts.
    pub(super) fn cursors(&self, k: usize, channels: &[Channel], bases: &[OutPtr]) -> Cursors {
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
pub(super) struct OutPtr(pub(super) *mut u64);
// SAFETY: the ranges write disjoint segments of the allocation (see `Plan::cursors`) and
// nothing reads it before every range is done.
unsafe impl Send for OutPtr {}
unsafe impl Sync for OutPtr {}

/// A range's next write position in one channel's vector and the end of its segment.
#[derive(Clone, Copy, PartialEq)]
pub(super) struct Cursor {
    pub(super) at: *mut u64,
    pub(super) end: *mut u64,
}

impl Cursor {
    /// A channel with nothing to write in this range.
    pub(super) const NONE: Cursor = Cursor { at: std::ptr::null_mut(), end: std::ptr::null_mut() };
}

/// One range's cursors: indexed by channel number below [`FAST_CHANNELS`] (absent
/// channels have an empty segment), by slot for larger numbers.
pub(super) struct Cursors {
    pub(super) small: Box<[Cursor; FAST_CHANNELS]>,
    pub(super) big: Vec<Cursor>,
}

/// What every range's fill shares.
pub(super) struct FillCtx<'a> {
    pub(super) layout: &'a RecordLayout,
    pub(super) fast_ticks: u64,
    pub(super) lenient: bool,
    pub(super) slots: &'a Slots,
}

/// Fill one range: on the wide path as far as it goes, then with the scalar loop.
pub(super) fn fill_range(bytes: &[u8], ctx: &FillCtx, wide: Option<&wide::Wide>, prev: u64, epoch: u64, mut cur: Cursors) -> bool {
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
pub(super) fn fill<T: Uint, C: Uint>(bytes: &[u8], ctx: &FillCtx, prev: u64, epoch: u64, cur: Cursors) -> bool {
    match (ctx.layout.tick.fs == 1000, ctx.layout.wrap_bits.is_some()) {
        (true, false) => fill_loop::<T, C, true, false>(bytes, ctx, prev, epoch, cur),
        (true, true) => fill_loop::<T, C, true, true>(bytes, ctx, prev, epoch, cur),
        (false, false) => fill_loop::<T, C, false, false>(bytes, ctx, prev, epoch, cur),
        (false, true) => fill_loop::<T, C, false, true>(bytes, ctx, prev, epoch, cur),
    }
}

/// [`fill`] for one tick kind (`UNIT`: 1 ps) and wrap kind.
pub(super) fn fill_loop<T: Uint, C: Uint, const UNIT: bool, const WRAP: bool>(bytes: &[u8], ctx: &FillCtx, mut prev: u64, mut epoch: u64, mut cur: Cursors) -> bool {
    let l = ctx.layout;
    let (rec, t_off, c_off) = (l.record_bytes, l.time.offset_bytes, l.channel.offset_bytes);
    let (t_shift, c_shift, c_mask) = (l.time.shift_bits, l.channel.shift_bits, l.channel.mask());
    let (fs, mask, period) = (if UNIT { 1000 } else { l.tick.fs }, counter_mask(l), wrap_period(l));
    if !WRAP {
        epoch = 0; // no wraps before any range (lets the compiler drop the epoch arithmetic)
    }
    for r in bytes.chunks_exact(rec) {
        let raw = T::get(&r[t_off..]) >> t_shift & mask;
        let ch = C::get(&r[c_off..]) >> c_shift & c_mask;
        if raw < prev {
            if WRAP {
                epoch = next_epoch(epoch, period);
            } else if !ctx.lenient {
                return false;
            }
        }
        prev = raw;
        let Some(ps) = ticks_to_ps(epoch, raw, ctx.fast_ticks, fs) else { return false };
        if !put(&mut cur, ctx.slots, ch, ps) {
            return false;
        }
    }
    cur.small.iter().chain(&cur.big).all(|c| c.at == c.end)
}

/// Write `ps` at channel `ch`'s cursor and move it on; `false` when the channel has no
/// segment here or its segment is full (the file changed since the counting pass).
#[inline(always)]
fn put(cur: &mut Cursors, slots: &Slots, ch: u64, ps: u64) -> bool {
    let c = match cur.small.get_mut(ch as usize) {
        Some(c) => c,
        None => match slots.find(ch).and_then(|s| cur.big.get_mut(s)) {
            Some(c) => c,
            None => return false,
        },
    };
    if c.at == c.end {
        return false;
    }
    // SAFETY: `c.at` lies in this range's own segment of the channel's vector
    // (`Batch::cursors`), below its end (just checked), inside the allocation; no other
    // range writes there and nothing reads the vector until every range is done.
    unsafe {
        c.at.write(ps);
        c.at = c.at.add(1);
    }
    true
}

/// One range's counting pass for layouts with kinds, a map or an edge flag ([`Classifier`]):
/// kept tags per channel, plus what the plan needs to start the next range's [`Clock`]
/// without reading this one again: the first and last raw counters of its time tags and
/// the implicit wraps between them, the overflow periods (and those before its last tag),
/// and its largest raw counter. `bad`: a record the serial pass refuses.
pub(super) struct RichTally {
    pub(super) tally: Tally,
    first_raw: Option<u64>,
    last_raw: Option<u64>,
    inner_wraps: u64,
    periods: u64,
    last_tag: Option<(u64, u64)>,
    max_raw: Option<u64>,
    pub(super) skipped: u64,
    pub(super) bad: bool,
}

pub(super) fn tally_rich(bytes: &[u8], l: &RecordLayout) -> RichTally {
    let classes = Classifier::new(l);
    let skip_unknown = l.kinds.as_ref().is_some_and(|k| k.skip_unknown);
    let mut counts: HashMap<u64, u64> = HashMap::new();
    let mut t = RichTally { tally: Tally { counts: Vec::new(), wraps: 0 }, first_raw: None, last_raw: None, inner_wraps: 0, periods: 0, last_tag: None, max_raw: None, skipped: 0, bad: false };
    for r in bytes.chunks_exact(l.record_bytes) {
        match classes.classify(r) {
            Class::Skip => {}
            Class::Overflow(n) => t.periods = t.periods.saturating_add(n),
            Class::UnknownKind(_) if skip_unknown => t.skipped += 1,
            Class::UnknownKind(_) | Class::Unmapped(_) => {
                t.bad = true;
                break;
            }
            Class::Tag { raw, channel, keep } => {
                t.first_raw.get_or_insert(raw);
                if t.last_raw.is_some_and(|p| raw < p) {
                    t.inner_wraps += 1;
                }
                t.last_raw = Some(raw);
                t.last_tag = Some((t.periods, raw));
                t.max_raw = Some(t.max_raw.map_or(raw, |m| m.max(raw)));
                if keep {
                    *counts.entry(channel as u64).or_default() += 1;
                }
            }
        }
    }
    t.tally.counts = counts.into_iter().collect();
    t.tally.counts.sort_unstable();
    t
}

/// The clock state carried from range to range of a rich layout: periods so far, the last
/// raw counter and the latest ticks.
#[derive(Debug, Clone, Copy, Default)]
pub(super) struct Carry {
    /// The epoch before the span (ticks).
    pub(super) base: u128,
    pub(super) periods: u64,
    pub(super) prev_raw: u64,
    pub(super) latest: Option<u128>,
}

impl Carry {
    /// The clock range `t` starts from, and the carry after it (its `tally.wraps` set to
    /// the periods it adds: the prefix sum of the second pass).
    pub(super) fn step(&mut self, t: &mut RichTally, rules: &ClockRules) -> Clock {
        let epoch = self.epoch(rules);
        let start = Clock { epoch, prev_raw: self.prev_raw, latest: self.latest };
        let added = if rules.implicit {
            t.first_raw.is_some_and(|f| f < self.prev_raw) as u64 + t.inner_wraps
        } else {
            t.periods
        };
        if rules.implicit {
            self.prev_raw = t.last_raw.unwrap_or(self.prev_raw);
        } else if rules.period > 0 {
            if let Some((before, raw)) = t.last_tag {
                let e = self.base.saturating_add((self.periods.saturating_add(before) as u128).saturating_mul(rules.period));
                self.latest = Some(e.saturating_add(raw as u128));
            }
        } else if let Some(m) = t.max_raw {
            self.latest = Some(self.latest.map_or(m as u128, |x| x.max(m as u128)));
        }
        self.periods = self.periods.saturating_add(added);
        t.tally.wraps = added;
        start
    }

    /// The epoch after the periods carried so far.
    pub(super) fn epoch(&self, rules: &ClockRules) -> u128 {
        self.base.saturating_add((self.periods as u128).saturating_mul(rules.period))
    }
}

/// Fill one range of a rich layout from its starting clock, by the serial rules;
/// `false` where the serial pass would fail (or the file changed since the count).
pub(super) fn fill_rich(bytes: &[u8], ctx: &FillCtx, mut clock: Clock, mut cur: Cursors) -> bool {
    let l = ctx.layout;
    let classes = Classifier::new(l);
    let rules = ClockRules::of(l, ctx.lenient);
    let skip_unknown = l.kinds.as_ref().is_some_and(|k| k.skip_unknown);
    for r in bytes.chunks_exact(l.record_bytes) {
        match classes.classify(r) {
            Class::Skip => {}
            Class::Overflow(n) => clock.overflow(n, &rules),
            Class::UnknownKind(_) if skip_unknown => {}
            Class::UnknownKind(_) | Class::Unmapped(_) => return false,
            Class::Tag { raw, channel, keep } => {
                let Ok(ticks) = clock.tag(raw, &rules) else { return false };
                let Some(ps) = ticks_ps(ticks, l.tick.fs) else { return false };
                if !keep {
                    continue;
                }
                if !put(&mut cur, ctx.slots, channel as u64, ps) {
                    return false;
                }
            }
        }
    }
    cur.small.iter().chain(&cur.big).all(|c| c.at == c.end)
}
