//! The record writer: per-channel tags merged into time order and encoded with a plain
//! layout (time and channel fields, whole words or bit ranges, the counter wrapped as the
//! layout says), refusing what a reader could not recover.

use super::super::layout::{Field, RecordLayout};
use crate::sys::atomic::AtomicOutput;
use crate::{Channel, ChannelTags, Error, Result};
use std::io::{BufWriter, Write};
use std::path::Path;

/// Write interleaved records (format b) in time order with `layout` (ps → ticks by the
/// layout's tick length; narrow time fields wrap as the layout says). Ties keep the order
/// of `channels`. Replaces an existing file (library writers always overwrite).
pub fn write_records(path: &Path, layout: &RecordLayout, channels: &[ChannelTags<'_>]) -> Result<()> {
    layout.validate().map_err(|m| Error::Usage(format!("{}: layout: {m}", path.display())))?;
    if !layout.is_plain() {
        return Err(Error::Usage(format!(
            "{}: layout {}: the record writer writes time and channel fields only (no kinds, channel map, edge flag or reorder tolerance)",
            path.display(),
            layout.to_spec()
        )));
    }
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
        let field_bits = l.time.bits;
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
        if (ch as u64) & !l.channel.mask() != 0 {
            return Err(fail(format!("channel {ch} does not fit the {}-bit channel field", l.channel.bits)));
        }
        self.prev_ticks = Some(ticks);
        self.index += 1;
        put_uint(&mut self.buf, &l.time, raw);
        put_uint(&mut self.buf, &l.channel, ch as u64);
        Ok(&self.buf)
    }
}

/// Write `v` into field `f` of one record (the word's other bits kept).
pub(super) fn put_uint(rec: &mut [u8], f: &Field, v: u64) {
    f.put(rec, v);
}

