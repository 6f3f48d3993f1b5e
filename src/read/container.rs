//! Format (c): our columnar container (`.tsieve`; the older `.sieve`, which a mail-filter
//! language also claims, is still read). A versioned 96-byte header (tick length,
//! creation time, creator), a channel table, then each channel's u64 LE timestamps in an
//! 8-byte aligned section, so every channel maps zero-copy. Byte layout: docs/formats.md.

use super::layout::Tick;
use super::mapping::Mapping;
use super::sections::{self, Section, SectionChunks};
use super::{InputFile, ReadOptions, TagSource};
use crate::sys::atomic::AtomicOutput;
use crate::{Channel, ChannelTags, Error, Result};
use std::io::{BufWriter, Write};
use std::path::Path;

/// File name extension we give containers (no common format on a Debian desktop claims
/// it in shared-mime-info's database; checked against its globs2 file).
pub const EXTENSION: &str = ".tsieve";
/// The extension containers had before: still read (containers are recognised by their
/// magic bytes, not their name), with a deprecation note from the command line.
pub const OLD_EXTENSION: &str = ".sieve";

/// The deprecation note for a container still named with [`OLD_EXTENSION`], if `path` is one.
pub fn old_extension_note(path: &Path) -> Option<String> {
    let name = path.file_name()?.to_str()?;
    name.ends_with(OLD_EXTENSION).then(|| {
        format!(
            "{}: the {OLD_EXTENSION} extension is deprecated (a mail-filter language uses it too); rename the file to {EXTENSION}",
            path.display()
        )
    })
}
/// The first eight bytes of every container.
pub const MAGIC: [u8; 8] = *b"\x7fTSIEVE\n";
/// The only version this build reads and writes.
pub const VERSION: u32 = 1;
/// Header size; the channel table starts here.
pub const HEADER_BYTES: u64 = 96;
/// Size of one channel-table entry.
pub const ENTRY_BYTES: u64 = 64;
const CREATOR_BYTES: usize = 64;
const NAME_BYTES: usize = 40;

/// The header fields besides magic, version and channel count.
#[derive(Debug, Clone, PartialEq)]
pub struct ContainerInfo {
    /// Tick length of the source the tags came from (timestamps themselves are in ps).
    pub tick: Tick,
    pub created_unix_s: i64,
    pub creator: String,
}

/// An opened, validated container.
#[derive(Debug)]
pub struct Container {
    map: Mapping,
    info: ContainerInfo,
    sections: Vec<Section>,
    lenient: bool,
}

/// Whether the file starts with [`MAGIC`].
pub fn has_magic(map: &Mapping) -> Result<bool> {
    if map.size_bytes() < MAGIC.len() as u64 {
        return Ok(false);
    }
    Ok(*map.bytes(0, MAGIC.len())? == MAGIC)
}

fn u32_at(b: &[u8], at: usize) -> u32 {
    u32::from_le_bytes(b[at..at + 4].try_into().expect("4 bytes"))
}
fn u64_at(b: &[u8], at: usize) -> u64 {
    u64::from_le_bytes(b[at..at + 8].try_into().expect("8 bytes"))
}

/// A NUL-padded UTF-8 text field.
fn text_at(map: &Mapping, b: &[u8], at_file: u64) -> Result<String> {
    let end = b.iter().position(|&x| x == 0).unwrap_or(b.len());
    String::from_utf8(b[..end].to_vec())
        .map_err(|_| Error::bad_input(map.path(), format!("byte offset {at_file}"), "bytes that are not UTF-8", "NUL-padded UTF-8 text"))
}

impl Container {
    pub fn open(path: &Path, opts: ReadOptions) -> Result<Self> {
        Self::from_mapping(Mapping::open(path, opts)?, opts)
    }

    /// Validate header and channel table of an opened file.
    pub fn from_mapping(map: Mapping, opts: ReadOptions) -> Result<Self> {
        let info = read_header(&map)?;
        let count = u32_at(&map.bytes(12, 4)?, 0) as u64;
        let table_end = HEADER_BYTES + count * ENTRY_BYTES;
        if table_end > map.size_bytes() {
            return Err(Error::bad_input(
                map.path(),
                format!("byte offset {HEADER_BYTES}"),
                format!("a channel table of {count} entries ending at byte {table_end}, past the end of the {}-byte file", map.size_bytes()),
                "a channel table inside the file",
            ));
        }
        let sections = read_table(&map, count)?;
        check_sections(&map, &sections, table_end)?;
        Ok(Container { map, info, sections, lenient: opts.lenient_order })
    }

    pub fn info(&self) -> &ContainerInfo {
        &self.info
    }

    pub fn sections(&self) -> &[Section] {
        &self.sections
    }
}

fn read_header(map: &Mapping) -> Result<ContainerInfo> {
    let p = map.path();
    if map.size_bytes() == 0 {
        return Err(Error::bad_input(p, "whole file", "an empty file (0 bytes)", format!("a {EXTENSION} container")));
    }
    if !has_magic(map)? {
        let n = map.size_bytes().min(8) as usize;
        let found = format!("first bytes {:02x?}", &*map.bytes(0, n)?);
        return Err(Error::bad_input(p, "byte offset 0", found, format!("the container magic {:02x?}", MAGIC)));
    }
    if map.size_bytes() < HEADER_BYTES {
        let found = format!("a file of {} bytes", map.size_bytes());
        return Err(Error::bad_input(p, "byte offset 8", found, format!("a {HEADER_BYTES}-byte header")));
    }
    let h = map.bytes(0, HEADER_BYTES as usize)?;
    let version = u32_at(&h, 8);
    if version != VERSION {
        return Err(Error::bad_input(p, "byte offset 8", format!("version {version}"), format!("version {VERSION} (this build knows no other)")));
    }
    let tick_fs = u64_at(&h, 16) as i64;
    if tick_fs <= 0 {
        return Err(Error::bad_input(p, "byte offset 16", format!("tick length {tick_fs} fs"), "a positive tick length in fs"));
    }
    let creator = text_at(map, &h[32..32 + CREATOR_BYTES], 32)?;
    Ok(ContainerInfo { tick: Tick { fs: tick_fs as u64 }, created_unix_s: u64_at(&h, 24) as i64, creator })
}

fn read_table(map: &Mapping, count: u64) -> Result<Vec<Section>> {
    let table = map.bytes(HEADER_BYTES, (count * ENTRY_BYTES) as usize)?;
    let mut out = Vec::with_capacity(count as usize);
    for (i, e) in table.chunks_exact(ENTRY_BYTES as usize).enumerate() {
        let at = HEADER_BYTES + i as u64 * ENTRY_BYTES;
        let name = text_at(map, &e[24..24 + NAME_BYTES], at + 24)?;
        out.push(Section { channel: u32_at(e, 0), name, offset_bytes: u64_at(e, 16), count: u64_at(e, 8) });
    }
    Ok(out)
}

/// Sections aligned, after the table, inside the file, not overlapping, channels unique.
fn check_sections(map: &Mapping, sections: &[Section], table_end: u64) -> Result<()> {
    let p = map.path();
    let entry_at = |i: usize| format!("channel table entry {i} (byte offset {})", HEADER_BYTES + i as u64 * ENTRY_BYTES);
    let mut spans = Vec::with_capacity(sections.len());
    for (i, s) in sections.iter().enumerate() {
        if let Some(j) = sections[..i].iter().position(|t| t.channel == s.channel) {
            return Err(Error::bad_input(p, entry_at(i), format!("channel {} again (also entry {j})", s.channel), "each channel once"));
        }
        if s.offset_bytes % 8 != 0 {
            return Err(Error::bad_input(p, entry_at(i), format!("section offset {} (not a multiple of 8)", s.offset_bytes), "8-byte aligned sections"));
        }
        let end = s.count.checked_mul(8).and_then(|b| b.checked_add(s.offset_bytes));
        match end {
            Some(end) if end <= map.size_bytes() && s.offset_bytes >= table_end => spans.push((s.offset_bytes, end, i)),
            Some(end) if end <= map.size_bytes() => {
                return Err(Error::bad_input(p, entry_at(i), format!("section at byte {} inside the header or channel table", s.offset_bytes), format!("sections at or after byte {table_end}")));
            }
            _ => {
                let found = format!("section of {} timestamps at byte {} running past the end of the {}-byte file", s.count, s.offset_bytes, map.size_bytes());
                return Err(Error::bad_input(p, entry_at(i), found, "sections inside the file"));
            }
        }
    }
    spans.sort_unstable();
    for w in spans.windows(2) {
        let ((_, a_end, a), (b_start, _, b)) = (w[0], w[1]);
        if b_start < a_end {
            return Err(Error::bad_input(p, entry_at(b), format!("a section starting at byte {b_start}, inside entry {a}'s section (ends at {a_end})"), "non-overlapping sections"));
        }
    }
    Ok(())
}

impl TagSource for Container {
    fn file(&self) -> InputFile {
        InputFile { path: self.map.path().to_path_buf(), size_bytes: self.map.size_bytes(), format: super::InputKind::Container }
    }
    fn channels(&self) -> Result<Vec<ChannelTags<'_>>> {
        sections::channels(&self.map, &self.sections, self.lenient)
    }
    fn channels_order_deferred(&self) -> Result<Vec<ChannelTags<'_>>> {
        if self.lenient {
            return self.channels();
        }
        sections::channels_unchecked(&self.map, &self.sections)
    }
    fn chunks(&self, events_per_chunk: usize) -> Result<Box<dyn Iterator<Item = Result<Vec<ChannelTags<'static>>>> + Send + '_>> {
        Ok(Box::new(SectionChunks::new(&self.map, &self.sections, events_per_chunk, self.lenient)))
    }
    fn check_unchanged(&self) -> Result<()> {
        self.map.check_unchanged()
    }
    fn event_count(&self) -> u64 {
        self.sections.iter().map(|s| s.count).sum()
    }
    fn declared_channels(&self) -> Option<Vec<Channel>> {
        Some(self.sections.iter().map(|s| s.channel).collect())
    }
}

/// Streaming container writer: header and table first (counts known up front), then the
/// sections in table order through [`ContainerWriter::push`]; atomic (temp + rename).
pub struct ContainerWriter {
    out: AtomicOutput,
    w: BufWriter<std::fs::File>,
    counts: Vec<u64>,
    section: usize,
    written: u64,
}

impl ContainerWriter {
    /// `table`: (channel, name, event count) per section, in the order they will be pushed.
    /// `force`: replace an existing file.
    pub fn create(path: &Path, force: bool, info: &ContainerInfo, table: &[(Channel, String, u64)]) -> Result<Self> {
        let out = AtomicOutput::prepare(path, force)?;
        let f = std::fs::File::create(out.temp_path()).map_err(|e| Error::io(path, e))?;
        let mut w = BufWriter::with_capacity(1 << 20, f);
        let head = encode_head(path, info, table)?;
        w.write_all(&head).map_err(|e| Error::io(path, e))?;
        let counts = table.iter().map(|t| t.2).collect();
        let mut cw = ContainerWriter { out, w, counts, section: 0, written: 0 };
        cw.skip_full_sections();
        Ok(cw)
    }

    fn skip_full_sections(&mut self) {
        while self.section < self.counts.len() && self.written == self.counts[self.section] {
            self.section += 1;
            self.written = 0;
        }
    }

    /// Append timestamps to the current section; moves on when it is full.
    pub fn push(&mut self, mut values: &[u64]) -> Result<()> {
        while !values.is_empty() {
            let Some(&count) = self.counts.get(self.section) else {
                return Err(Error::Output { path: self.out.final_path().to_path_buf(), message: "more timestamps than the channel table holds".into() });
            };
            let n = (count - self.written).min(values.len() as u64) as usize;
            super::channel_array::write_u64s_le(&mut self.w, &values[..n]).map_err(|e| Error::io(self.out.final_path(), e))?;
            self.written += n as u64;
            values = &values[n..];
            self.skip_full_sections();
        }
        Ok(())
    }

    /// Check every section is complete, flush and rename into place.
    pub fn finish(mut self) -> Result<()> {
        if self.section != self.counts.len() {
            return Err(Error::Output { path: self.out.final_path().to_path_buf(), message: format!("section {} incomplete", self.section) });
        }
        self.w.flush().map_err(|e| Error::io(self.out.final_path(), e))?;
        drop(self.w);
        self.out.commit()
    }
}

fn put_text(buf: &mut Vec<u8>, text: &str, width: usize) {
    let mut cut = text.len().min(width);
    while !text.is_char_boundary(cut) {
        cut -= 1;
    }
    buf.extend_from_slice(&text.as_bytes()[..cut]);
    buf.resize(buf.len() + width - cut, 0);
}

/// Header + channel table bytes; sections follow back to back from the table's end.
fn encode_head(path: &Path, info: &ContainerInfo, table: &[(Channel, String, u64)]) -> Result<Vec<u8>> {
    let mut b = Vec::with_capacity((HEADER_BYTES + ENTRY_BYTES * table.len() as u64) as usize);
    b.extend_from_slice(&MAGIC);
    b.extend_from_slice(&VERSION.to_le_bytes());
    b.extend_from_slice(&(table.len() as u32).to_le_bytes());
    b.extend_from_slice(&(info.tick.fs as i64).to_le_bytes());
    b.extend_from_slice(&info.created_unix_s.to_le_bytes());
    put_text(&mut b, &info.creator, CREATOR_BYTES);
    let mut offset = HEADER_BYTES + ENTRY_BYTES * table.len() as u64;
    for (ch, name, count) in table {
        if name.len() > NAME_BYTES {
            return Err(Error::Usage(format!("{}: channel name {name:?} longer than {NAME_BYTES} bytes", path.display())));
        }
        b.extend_from_slice(&ch.to_le_bytes());
        b.extend_from_slice(&0u32.to_le_bytes());
        b.extend_from_slice(&count.to_le_bytes());
        b.extend_from_slice(&offset.to_le_bytes());
        put_text(&mut b, name, NAME_BYTES);
        offset += 8 * count;
    }
    Ok(b)
}

/// Seconds since the Unix epoch, for the header's creation time.
pub fn unix_now_s() -> i64 {
    std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.as_secs() as i64)
}

/// Write a container (format c) holding `channels`; `tick_ps` records the source's tick length.
/// Replaces an existing file (library writers always overwrite; the CLI checks `--force`).
pub fn write_container(path: &Path, channels: &[ChannelTags<'_>], tick_ps: f64, creator: &str) -> Result<()> {
    let tick = Tick::from_ps_f64(tick_ps).map_err(|m| Error::Usage(format!("{}: {m}", path.display())))?;
    let info = ContainerInfo { tick, created_unix_s: unix_now_s(), creator: creator.to_string() };
    let table: Vec<_> = channels.iter().map(|c| (c.channel, c.name.clone(), c.len() as u64)).collect();
    let mut w = ContainerWriter::create(path, true, &info, &table)?;
    for c in channels {
        w.push(&c.times_ps)?;
    }
    w.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_round_trips() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("x.sieve");
        let chans = [ChannelTags::owned(2, "larch_minus", vec![5, 9]), ChannelTags::owned(7, "", vec![])];
        write_container(&p, &chans, 12.345, "unit test").unwrap();
        let c = Container::open(&p, ReadOptions::mapped()).unwrap();
        assert_eq!(c.info().tick.fs, 12_345);
        assert_eq!(c.info().creator, "unit test");
        let got = c.channels().unwrap();
        assert_eq!((got[0].channel, got[0].name.as_str(), &*got[0].times_ps), (2, "larch_minus", &[5u64, 9][..]));
        assert!(got[1].is_empty());
        // Zero-copy: the slice points into the mapping.
        assert!(matches!(got[0].times_ps, std::borrow::Cow::Borrowed(_)));
    }
}
