//! Format (a): per-channel arrays of little-endian u64 ps timestamps, one channel per file,
//! given as `CH=PATH` or `CH:NAME=PATH`. The engine reads the mapped slice directly.

use super::mapping::Mapping;
use super::sections::{self, Section, SectionChunks};
use super::{InputFile, ReadOptions, TagSource};
use crate::sys::atomic::AtomicOutput;
use crate::{Channel, ChannelTags, Error, Result};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

/// One per-channel array file.
#[derive(Debug)]
pub struct ChannelArray {
    map: Mapping,
    section: Section,
    lenient: bool,
}

/// `CH=PATH` / `CH:NAME=PATH` → (channel, name, path); `None` when `arg` is not of that form.
pub fn parse_arg(arg: &str) -> Result<Option<(Channel, String, PathBuf)>> {
    let Some((head, path)) = arg.split_once('=') else { return Ok(None) };
    let (ch, name) = head.split_once(':').unwrap_or((head, ""));
    if ch.is_empty() || !ch.bytes().all(|b| b.is_ascii_digit()) {
        return Ok(None);
    }
    let channel = ch.parse::<Channel>().map_err(|_| Error::Usage(format!("{arg}: channel {ch} is not a number in 0..=4294967295")))?;
    if path.is_empty() {
        return Err(Error::Usage(format!("{arg}: no file after {head}=")));
    }
    Ok(Some((channel, name.to_string(), PathBuf::from(path))))
}

impl ChannelArray {
    /// Open and check the size (non-empty, whole 8-byte records); order is checked on read.
    pub fn open(channel: Channel, name: &str, path: &Path, opts: ReadOptions) -> Result<Self> {
        let map = Mapping::open(path, opts)?;
        let size = map.size_bytes();
        if size == 0 {
            return Err(Error::bad_input(path, "whole file", "an empty file (0 bytes)", "at least one 8-byte little-endian u64 timestamp"));
        }
        if size % 8 != 0 {
            let at = size - size % 8;
            return Err(Error::bad_input(
                path,
                format!("byte offset {at}"),
                format!("a trailing partial record of {} bytes (file size {size})", size % 8),
                "a whole number of 8-byte little-endian u64 timestamps",
            ));
        }
        let section = Section { channel, name: name.to_string(), offset_bytes: 0, count: size / 8 };
        Ok(ChannelArray { map, section, lenient: opts.lenient_order })
    }
}

impl TagSource for ChannelArray {
    fn file(&self) -> InputFile {
        InputFile { path: self.map.path().to_path_buf(), size_bytes: self.map.size_bytes(), format: super::InputKind::Arrays }
    }
    fn channels(&self) -> Result<Vec<ChannelTags<'_>>> {
        sections::channels(&self.map, std::slice::from_ref(&self.section), self.lenient)
    }
    fn channels_order_deferred(&self) -> Result<Vec<ChannelTags<'_>>> {
        if self.lenient {
            return self.channels();
        }
        sections::channels_unchecked(&self.map, std::slice::from_ref(&self.section))
    }
    fn chunks(&self, events_per_chunk: usize) -> Result<Box<dyn Iterator<Item = Result<Vec<ChannelTags<'static>>>> + Send + '_>> {
        Ok(Box::new(SectionChunks::new(&self.map, std::slice::from_ref(&self.section), events_per_chunk, self.lenient)))
    }
    fn check_unchanged(&self) -> Result<()> {
        self.map.check_unchanged()
    }
    fn event_count(&self) -> u64 {
        self.section.count
    }
    fn declared_channels(&self) -> Option<Vec<Channel>> {
        Some(vec![self.section.channel])
    }
}

/// Write one channel's timestamps as little-endian u64 (format a), atomically; replaces an
/// existing file (library writers always overwrite; the CLI checks `--force` first).
pub fn write_channel_array(path: &Path, times_ps: &[u64]) -> Result<()> {
    let out = AtomicOutput::prepare(path, true)?;
    let f = std::fs::File::create(out.temp_path()).map_err(|e| Error::io(path, e))?;
    let mut w = BufWriter::with_capacity(1 << 20, f);
    write_u64s_le(&mut w, times_ps).map_err(|e| Error::io(path, e))?;
    w.flush().map_err(|e| Error::io(path, e))?;
    drop(w);
    out.commit()
}

/// Append values as little-endian u64 (one write per 64 KiB block, not per value).
pub fn write_u64s_le(w: &mut impl Write, values: &[u64]) -> std::io::Result<()> {
    let mut buf = Vec::with_capacity(8 * 8192);
    for block in values.chunks(8192) {
        buf.clear();
        block.iter().for_each(|v| buf.extend_from_slice(&v.to_le_bytes()));
        w.write_all(&buf)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn arg_forms() {
        assert_eq!(parse_arg("3=run/ab_ch3.u64").unwrap(), Some((3, String::new(), PathBuf::from("run/ab_ch3.u64"))));
        assert_eq!(parse_arg("4:rowan_minus=x=y").unwrap(), Some((4, "rowan_minus".into(), PathBuf::from("x=y"))));
        assert_eq!(parse_arg("run/a.tsieve").unwrap(), None);
        assert_eq!(parse_arg("dir/a=b").unwrap(), None);
        assert!(parse_arg("99999999999=a").is_err());
        assert!(parse_arg("3=").is_err());
    }

    #[test]
    fn chunks_cover_every_event_once_in_order() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("a.u64");
        let times: Vec<u64> = (0..1000u64).map(|i| i * 7 / 3).collect();
        write_channel_array(&p, &times).unwrap();
        for mmap in [true, false] {
            let a = ChannelArray::open(1, "", &p, ReadOptions { mmap, lenient_order: false }).unwrap();
            let got: Vec<u64> = a.chunks(64).unwrap().flat_map(|c| c.unwrap()[0].times_ps.to_vec()).collect();
            assert_eq!(got, times);
        }
    }
}
