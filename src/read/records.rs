//! Format (b): interleaved fixed-size records of any [`RecordLayout`], in time order
//! overall, demultiplexed per channel in one pass (whole file or bounded-memory chunks),
//! with the counter-wrap rule and the exact tick → ps conversion of [`super::layout`].

use super::layout::{Endian, Field, RecordLayout};
use super::mapping::Mapping;
use super::{looks_monotone, record_location, InputFile, ReadOptions, TagSource, MAX_PS};
use crate::output::atomic::AtomicOutput;
use crate::{Channel, ChannelTags, Error, Result};
use std::collections::HashMap;
use std::io::{BufWriter, Write};
use std::path::Path;

/// Records demultiplexed per block when the file is not mapped (bounded buffer).
const BLOCK_RECORDS: u64 = 1 << 20;
/// Records looked at before sizing the per-channel vectors by each channel's share.
const PROBE_RECORDS: u64 = 1 << 16;

/// An interleaved-record file with its layout.
#[derive(Debug)]
pub struct Records {
    map: Mapping,
    layout: RecordLayout,
    count: u64,
    lenient: bool,
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
        Ok(Records { count: body / rec, map, layout, lenient: opts.lenient_order })
    }

    pub fn layout(&self) -> &RecordLayout {
        &self.layout
    }

    /// Bytes of records `first .. first + n`.
    fn block(&self, first: u64, n: u64) -> Result<std::borrow::Cow<'_, [u8]>> {
        let rec = self.layout.record_bytes as u64;
        self.map.bytes(self.layout.header_bytes + first * rec, (n * rec) as usize)
    }
}

impl TagSource for Records {
    fn file(&self) -> InputFile {
        InputFile { path: self.map.path().to_path_buf(), size_bytes: self.map.size_bytes(), format: "records" }
    }

    fn channels(&self) -> Result<Vec<ChannelTags<'_>>> {
        let mut d = Demuxer::new(&self.layout, self.map.path(), self.lenient);
        let probe = PROBE_RECORDS.min(self.count);
        d.feed(&self.block(0, probe)?)?;
        d.reserve_by_share(self.count - probe);
        let step = if self.map.is_mapped() { self.count } else { BLOCK_RECORDS };
        let mut first = probe;
        while first < self.count {
            let n = step.min(self.count - first);
            d.feed(&self.block(first, n)?)?;
            first += n;
        }
        Ok(d.take(false))
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
            2 => u16::from_le_bytes([b[0], b[1]]) as u64,
            4 => u32::from_le_bytes([b[0], b[1], b[2], b[3]]) as u64,
            _ => u64::from_le_bytes(b[..8].try_into().expect("8-byte field")),
        }
    }
}
impl<const W: usize> Uint for Be<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        match W {
            1 => b[0] as u64,
            2 => u16::from_be_bytes([b[0], b[1]]) as u64,
            4 => u32::from_be_bytes([b[0], b[1], b[2], b[3]]) as u64,
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

/// Channel numbers below this map to a slot through a flat table; others through a map.
const SMALL_CHANNELS: usize = 4096;
const NO_SLOT: u32 = u32::MAX;

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
        let seen = self.next_index.max(1) as f64;
        for v in &mut self.slots.times {
            let want = (v.len() as f64 / seen * remaining as f64 * 1.05) as usize;
            v.reserve(want);
            advise_huge_pages(v);
        }
        self.new_slot_capacity = (remaining / 64).clamp(1024, 1 << 20) as usize;
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

    /// Demultiplex whole records; dispatch once on the field shapes.
    fn feed(&mut self, bytes: &[u8]) -> Result<()> {
        macro_rules! chan {
            ($T:ty) => {
                match (self.layout.channel.width_bytes, self.layout.channel.endian) {
                    (1, _) => self.run::<$T, Le<1>>(bytes),
                    (2, Endian::Little) => self.run::<$T, Le<2>>(bytes),
                    (2, Endian::Big) => self.run::<$T, Be<2>>(bytes),
                    (4, Endian::Little) => self.run::<$T, Le<4>>(bytes),
                    _ => self.run::<$T, Be<4>>(bytes),
                }
            };
        }
        match (self.layout.time.width_bytes, self.layout.time.endian) {
            (4, Endian::Little) => chan!(Le<4>),
            (4, Endian::Big) => chan!(Be<4>),
            (8, Endian::Little) => chan!(Le<8>),
            _ => chan!(Be<8>),
        }
    }

    /// The hot loop. Shaped so the common record costs two fixed-width loads, one compare
    /// with the previous counter, a u64 multiply-add and constant division, one table
    /// lookup and a push into a pre-reserved vector. The counter state lives in locals and
    /// the slot table is moved out of `self` for the loop, so both stay in registers/L1
    /// instead of being reloaded after every store; wraps, errors and new channels leave
    /// the loop body through cold calls.
    fn run<T: Uint, C: Uint>(&mut self, bytes: &[u8]) -> Result<()> {
        let (rec, t_off, c_off) = (self.layout.record_bytes, self.layout.time.offset_bytes, self.layout.channel.offset_bytes);
        let (fs, fast_ticks) = (self.layout.tick.fs, self.fast_ticks);
        // 1 ps ticks (the common case) skip the multiply-divide; the test is loop-invariant.
        let unit = fs == 1000;
        // With a wrap of B bits only the low B bits of the time field are the counter.
        let mask = match self.layout.wrap_bits {
            Some(b) if b < 64 => (1u64 << b) - 1,
            _ => u64::MAX,
        };
        let mut slots = std::mem::take(&mut self.slots);
        let (mut prev, mut epoch) = (self.prev_raw, self.epoch_ticks);
        let mut outcome = Ok(());
        for (i, r) in bytes.chunks_exact(rec).enumerate() {
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
            let ticks = epoch.wrapping_add(raw);
            let ps = if ticks <= fast_ticks && ticks >= epoch {
                if unit {
                    ticks
                } else {
                    (ticks * fs + 500) / 1000
                }
            } else {
                match self.slow_ps(raw) {
                    ps if ps < MAX_PS => ps,
                    _ => {
                        outcome = Err(self.too_late(bytes, i, raw));
                        break;
                    }
                }
            };
            let slot = match slots.small.get(ch as usize) {
                Some(&s) if s != NO_SLOT => s,
                _ => slots.slot_of(ch, self.new_slot_capacity),
            };
            slots.times[slot as usize].push(ps);
        }
        self.slots = slots;
        self.prev_raw = prev;
        self.next_index += (bytes.len() / rec) as u64;
        outcome
    }

    /// ps for tick counts past the u64 fast path (u128; [`MAX_PS`] when out of range).
    #[cold]
    fn slow_ps(&self, raw: u64) -> u64 {
        let ticks = self.epoch_ticks as u128 + raw as u128;
        let ps = (ticks * self.layout.tick.fs as u128 + 500) / 1000;
        ps.min(MAX_PS as u128) as u64
    }

    /// The raw counter went down: a wrap when the layout has one, else an error (strict)
    /// or accepted as is (lenient; the caller counts the out-of-order step).
    #[cold]
    fn step_back(&mut self, bytes: &[u8], i: usize, raw: u64) -> Result<()> {
        if let Some(bits) = self.layout.wrap_bits {
            let period = 1u64.checked_shl(bits).unwrap_or(0);
            self.epoch_ticks = self.epoch_ticks.checked_add(period).filter(|_| period > 0).unwrap_or(u64::MAX);
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
