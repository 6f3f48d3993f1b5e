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
        Ok(d.take())
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
            let r = self.block(first, n).and_then(|b| d.feed(&b)).map(|()| d.take());
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
/// plain loads for each layout instead of a per-byte loop.
trait Uint {
    fn get(b: &[u8]) -> u64;
}
struct Le<const W: usize>;
struct Be<const W: usize>;
impl<const W: usize> Uint for Le<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        let mut a = [0u8; 8];
        a[..W].copy_from_slice(&b[..W]);
        u64::from_le_bytes(a)
    }
}
impl<const W: usize> Uint for Be<W> {
    #[inline(always)]
    fn get(b: &[u8]) -> u64 {
        let mut a = [0u8; 8];
        a[8 - W..].copy_from_slice(&b[..W]);
        u64::from_be_bytes(a)
    }
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
    slot_small: Vec<u32>,
    slot_big: HashMap<u64, u32>,
    channels: Vec<Channel>,
    times: Vec<Vec<u64>>,
    prev_raw: u64,
    /// Ticks added by wraps so far (multiple of 2^wrap_bits).
    epoch_ticks: u64,
    next_index: u64,
    /// Largest tick count whose `ticks · tick_fs + 500` fits in u64 (fast path).
    fast_ticks: u64,
    /// Largest raw counter the wrap allows (2^wrap_bits − 1; u64::MAX without a wrap).
    max_raw: u64,
    new_slot_capacity: usize,
}

impl<'a> Demuxer<'a> {
    fn new(layout: &'a RecordLayout, path: &'a Path, lenient: bool) -> Self {
        Demuxer {
            layout,
            path,
            lenient,
            slot_small: vec![NO_SLOT; SMALL_CHANNELS],
            slot_big: HashMap::new(),
            channels: Vec::new(),
            times: Vec::new(),
            prev_raw: 0,
            epoch_ticks: 0,
            next_index: 0,
            fast_ticks: (u64::MAX - 500) / layout.tick.fs,
            max_raw: layout.wrap_bits.and_then(|b| 1u64.checked_shl(b)).map_or(u64::MAX, |p| p - 1),
            new_slot_capacity: 1024,
        }
    }

    /// Give each channel room for its share (seen so far) of `remaining` records, +5%.
    fn reserve_by_share(&mut self, remaining: u64) {
        let seen = self.next_index.max(1) as f64;
        for v in &mut self.times {
            let want = (v.len() as f64 / seen * remaining as f64 * 1.05) as usize;
            v.reserve(want);
        }
        self.new_slot_capacity = (remaining / 64).clamp(1024, 1 << 20) as usize;
    }

    /// Per channel (ascending channel number) the events fed since the last `take`.
    fn take(&mut self) -> Vec<ChannelTags<'static>> {
        let mut out: Vec<_> = self
            .channels
            .iter()
            .zip(&mut self.times)
            .map(|(&c, v)| ChannelTags::owned(c, "", std::mem::take(v)))
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
    /// lookup and a push into a pre-reserved vector; wraps, errors and new channels leave
    /// the loop body through cold calls.
    fn run<T: Uint, C: Uint>(&mut self, bytes: &[u8]) -> Result<()> {
        let (rec, t_off, c_off) = (self.layout.record_bytes, self.layout.time.offset_bytes, self.layout.channel.offset_bytes);
        let fs = self.layout.tick.fs;
        for (i, r) in bytes.chunks_exact(rec).enumerate() {
            let raw = T::get(&r[t_off..]);
            let ch = C::get(&r[c_off..]);
            if raw < self.prev_raw || raw > self.max_raw {
                self.unusual_raw(bytes, i, raw)?;
            }
            self.prev_raw = raw;
            let ticks = self.epoch_ticks.wrapping_add(raw);
            let ps = if ticks <= self.fast_ticks && ticks >= self.epoch_ticks {
                (ticks * fs + 500) / 1000
            } else {
                self.slow_ps(raw)
            };
            if ps >= MAX_PS {
                return Err(self.too_late(bytes, i, raw));
            }
            let slot = match self.slot_small.get(ch as usize) {
                Some(&s) if s != NO_SLOT => s,
                _ => self.slot_of(ch, i)?,
            };
            self.times[slot as usize].push(ps);
        }
        self.next_index += (bytes.len() / rec) as u64;
        Ok(())
    }

    /// ps for tick counts past the u64 fast path (u128; [`MAX_PS`] when out of range).
    #[cold]
    fn slow_ps(&self, raw: u64) -> u64 {
        let ticks = self.epoch_ticks as u128 + raw as u128;
        let ps = (ticks * self.layout.tick.fs as u128 + 500) / 1000;
        ps.min(MAX_PS as u128) as u64
    }

    /// A counter above the wrap period (the layout's wrap does not match the data) or a
    /// step back (see [`Self::step_back`]).
    #[cold]
    fn unusual_raw(&mut self, bytes: &[u8], i: usize, raw: u64) -> Result<()> {
        if raw <= self.max_raw {
            return self.step_back(bytes, i, raw);
        }
        let (index, at) = self.location(i);
        let bits = self.layout.wrap_bits.unwrap_or(64);
        Err(Error::bad_input(
            self.path,
            record_location(index, at),
            format!("time counter {raw} ticks, more than wrap={bits} allows"),
            format!(
                "a counter below 2^{bits} = {} (the layout's wrap does not match the data: give the counter's real width in bits, or leave wrap out)",
                self.max_raw as u128 + 1
            ),
        ))
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
        Err(self.with_swap_hint(e, bytes, i))
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
    /// over the records of this block around the failure (up to 4096 either side; a
    /// big-endian 8-byte counter read as little-endian already fails at record 0).
    fn with_swap_hint(&self, e: Error, bytes: &[u8], i: usize) -> Error {
        let t = self.layout.time;
        let other = Field { endian: t.endian.other(), ..t };
        let start = i.saturating_sub(4095);
        let n = bytes.len() / self.layout.record_bytes;
        let end = n.min(i + 4096);
        let recs = bytes.chunks_exact(self.layout.record_bytes).skip(start).take(end - start);
        if end - start > 1 && looks_monotone(recs.map(|r| other.get(r))) {
            let try_spec = format!("time={}:{}:{}", t.offset_bytes, t.width_bytes, other.endian.short());
            return e.with_hint(format!("records look byte-swapped: try {try_spec}"));
        }
        e
    }

    #[cold]
    fn slot_of(&mut self, ch: u64, i: usize) -> Result<u32> {
        if let Some(&s) = self.slot_big.get(&ch) {
            return Ok(s);
        }
        let channel = Channel::try_from(ch).map_err(|_| {
            let (index, at) = self.location(i);
            Error::bad_input(self.path, record_location(index, at), format!("channel {ch}"), "a channel number below 2^32")
        })?;
        let s = self.channels.len() as u32;
        self.channels.push(channel);
        self.times.push(Vec::with_capacity(self.new_slot_capacity));
        if (ch as usize) < SMALL_CHANNELS {
            self.slot_small[ch as usize] = s;
        } else {
            self.slot_big.insert(ch, s);
        }
        Ok(s)
    }
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
        w.write_all(&enc.encode(ps, ch)?).map_err(io)?;
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
