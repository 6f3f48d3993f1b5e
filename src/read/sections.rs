//! Sections of u64 little-endian timestamps inside a mapped file (one per channel), shared
//! by the per-channel array and container readers: the order/limit check, zero-copy
//! `channels()` and time-aligned bounded-memory chunks.

use super::mapping::Mapping;
use super::{looks_monotone, record_location, MAX_PS};
use crate::tags::descends;
use crate::{Channel, ChannelTags, Error, Result};
use std::borrow::Cow;

/// One channel's timestamps: `count` u64 LE values starting at `offset_bytes`.
#[derive(Debug, Clone, PartialEq)]
pub struct Section {
    pub channel: Channel,
    pub name: String,
    pub offset_bytes: u64,
    pub count: u64,
}

/// Checks one channel's timestamps, slice after slice: below [`MAX_PS`] and (strict mode)
/// ascending. Locations count records from the section start.
#[derive(Debug, Clone)]
pub struct OrderChecker {
    prev: Option<u64>,
    next_index: u64,
    lenient: bool,
}

impl OrderChecker {
    pub fn new(lenient: bool) -> Self {
        OrderChecker { prev: None, next_index: 0, lenient }
    }

    /// Check the next `times` of a section whose record 0 sits at `section_offset` bytes.
    pub fn check(&mut self, map: &Mapping, section_offset: u64, times: &[u64]) -> Result<()> {
        // Fast path shaped for vectorisation: one branch-free OR over all steps, and (since
        // ascending data has its maximum last) a single limit test; locate only on failure.
        let first_ok = self.prev.is_none_or(|p| times.first().is_none_or(|&t| t >= p));
        let descents = any_descent(times);
        let sorted = first_ok && !descents;
        let max_ok = if sorted { times.last().is_none_or(|&t| t < MAX_PS) } else { times.iter().all(|&t| t < MAX_PS) };
        if !(max_ok && (sorted || self.lenient)) {
            self.locate(map, section_offset, times)?;
        }
        self.next_index += times.len() as u64;
        if let Some(&t) = times.last() {
            self.prev = Some(t);
        }
        Ok(())
    }

    fn locate(&self, map: &Mapping, section_offset: u64, times: &[u64]) -> Result<()> {
        let mut prev = self.prev;
        for (i, &t) in times.iter().enumerate() {
            let index = self.next_index + i as u64;
            let at = record_location(index, section_offset + 8 * index);
            if t >= MAX_PS {
                let e = Error::bad_input(map.path(), at, format!("timestamp {t} ps"), format!("below 2^62 = {MAX_PS} ps (about 53.4 days)"));
                return Err(swap_hint(e, times, i));
            }
            if let Some(p) = prev.filter(|&p| t < p && !self.lenient) {
                let e = Error::bad_input(map.path(), at, format!("timestamp {t} ps after {p} ps"), format!("≥ {p} ps (timestamps ascending)"));
                return Err(swap_hint(e, times, i));
            }
            prev = Some(t);
        }
        Ok(())
    }
}

/// Whether any value is below the one before it: one branch-free OR per piece of 2^20
/// values (each piece overlapping the next by one), the pieces on the rayon pool.
fn any_descent(times: &[u64]) -> bool {
    use rayon::prelude::*;
    const PIECE: usize = 1 << 20;
    let piece = |k: usize| descends(&times[k * PIECE..((k + 1) * PIECE + 1).min(times.len())]);
    (0..times.len().div_ceil(PIECE)).into_par_iter().map(piece).reduce(|| false, |x, y| x | y)
}

/// Add a hint when the values around the failure, byte-swapped, rise steadily.
fn swap_hint(e: Error, times: &[u64], i: usize) -> Error {
    let w = &times[i.saturating_sub(2048)..(i + 2048).min(times.len())];
    if looks_monotone(w.iter().map(|v| v.swap_bytes())) {
        e.with_hint("values look byte-swapped: this reader expects little-endian u64")
    } else {
        e
    }
}

/// All sections as zero-copy (when mapped) checked channels.
pub fn channels<'a>(map: &'a Mapping, sections: &[Section], lenient: bool) -> Result<Vec<ChannelTags<'a>>> {
    sections
        .iter()
        .map(|s| {
            let times = map.u64s_le(s.offset_bytes, s.count as usize)?;
            OrderChecker::new(lenient).check(map, s.offset_bytes, &times)?;
            Ok(ChannelTags { channel: s.channel, name: s.name.clone(), times_ps: times, order_checked: true })
        })
        .collect()
}

/// All sections as zero-copy channels whose order is left for the engine to check
/// ([`crate::ChannelTags::order_checked`] false); only their place in the file is checked.
pub fn channels_unchecked<'a>(map: &'a Mapping, sections: &[Section]) -> Result<Vec<ChannelTags<'a>>> {
    sections
        .iter()
        .map(|s| {
            let times = map.u64s_le(s.offset_bytes, s.count as usize)?;
            Ok(ChannelTags { channel: s.channel, name: s.name.clone(), times_ps: times, order_checked: false })
        })
        .collect()
}

/// Time-aligned chunks over `sections`: each channel reads a window of at most
/// `events_per_chunk / channels` values; the chunk ends at the smallest window end `T`
/// among channels with data left, and every channel contributes its values ≤ `T`.
pub struct SectionChunks<'a> {
    map: &'a Mapping,
    sections: Vec<Section>,
    cursor: Vec<u64>,
    checkers: Vec<OrderChecker>,
    window: u64,
    lenient: bool,
    failed: bool,
}

impl<'a> SectionChunks<'a> {
    pub fn new(map: &'a Mapping, sections: &[Section], events_per_chunk: usize, lenient: bool) -> Self {
        let n = sections.len().max(1) as u64;
        SectionChunks {
            map,
            sections: sections.to_vec(),
            cursor: vec![0; sections.len()],
            checkers: vec![OrderChecker::new(lenient); sections.len()],
            window: (events_per_chunk as u64 / n).max(1),
            lenient,
            failed: false,
        }
    }

    fn windows(&self) -> Result<Vec<Cow<'a, [u64]>>> {
        self.sections
            .iter()
            .zip(&self.cursor)
            .map(|(s, &c)| {
                let len = self.window.min(s.count - c) as usize;
                self.map.u64s_le(s.offset_bytes + 8 * c, len)
            })
            .collect()
    }

    fn next_chunk(&mut self) -> Result<Option<Vec<ChannelTags<'static>>>> {
        if self.cursor.iter().zip(&self.sections).all(|(&c, s)| c == s.count) {
            return Ok(None);
        }
        let windows = self.windows()?;
        // In lenient mode the data may be unsorted: take whole windows (no alignment).
        // The channel that sets T takes its whole window, so every chunk makes progress
        // even when (strict mode, about to fail) its window is unsorted.
        let ends = windows.iter().enumerate().filter_map(|(i, w)| w.last().map(|&t| (t, i)));
        let end = if self.lenient { None } else { ends.min() };
        let mut out = Vec::with_capacity(windows.len());
        for (i, w) in windows.iter().enumerate() {
            let take = match end {
                Some((t, owner)) if owner != i => w.partition_point(|&x| x <= t),
                _ => w.len(),
            };
            let s = &self.sections[i];
            let slice = &w[..take];
            self.checkers[i].check(self.map, s.offset_bytes, slice)?;
            self.cursor[i] += take as u64;
            out.push(ChannelTags::owned(s.channel, s.name.clone(), slice.to_vec()));
        }
        Ok(Some(out))
    }
}

impl Iterator for SectionChunks<'_> {
    type Item = Result<Vec<ChannelTags<'static>>>;
    fn next(&mut self) -> Option<Self::Item> {
        if self.failed {
            return None;
        }
        let r = self.next_chunk().transpose();
        self.failed = matches!(r, Some(Err(_)));
        r
    }
}
