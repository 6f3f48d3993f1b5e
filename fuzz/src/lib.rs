//! What each fuzz target does with one input, shared by the libFuzzer binaries
//! (fuzz/fuzz_targets/*.rs) and the regression test (tests/fuzz_regressions.rs), so a
//! crashing input replays through exactly the code that found it.
//!
//! Every function takes untrusted bytes, drives the real library entry points, and panics
//! only when the library itself panics or breaks one of its documented promises (a whole
//! read and a chunked read disagree, a mapped and a buffered read disagree, a parsed layout
//! does not round-trip). A returned `Err` from the library is a correct answer.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use tagsieve::manifest::Manifest;
use tagsieve::sys::progress::Progress;
use tagsieve::read::layout::RecordLayout;
use tagsieve::read::records::Records;
use tagsieve::jobs::inspect as check;
use tagsieve::read::{open_inputs, ReadOptions, TagSource};
use tagsieve::{Channel, Result};

/// What an input led to: the reader refused it, or read it (with this many events).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Outcome {
    Refused,
    Read { events: u64 },
}

/// Per channel, all timestamps read (empty channels left out so chunked and whole agree).
type Tags = BTreeMap<Channel, Vec<u64>>;

/// A file on tmpfs (RAM) named per process and target, rewritten for every input: the
/// readers only take paths. Removed when dropped.
pub struct ScratchFile {
    path: PathBuf,
}

impl ScratchFile {
    pub fn write(target: &str, bytes: &[u8]) -> ScratchFile {
        let dir = if Path::new("/dev/shm").is_dir() { PathBuf::from("/dev/shm") } else { std::env::temp_dir() };
        let path = dir.join(format!("tagsieve-fuzz-{target}-{}", std::process::id()));
        std::fs::write(&path, bytes).expect("scratch file on tmpfs");
        ScratchFile { path }
    }
    pub fn path(&self) -> &Path {
        &self.path
    }
}

impl Drop for ScratchFile {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

/// Target (a): a record layout taken from the input's first bytes, the rest as the record
/// file, demultiplexed whole and in chunks, mapped and buffered, strict and lenient.
///
/// Byte 0: bit 0 set → bytes 1.. up to the first `\n` are a compact spec string;
/// clear → bytes 1..=8 pick the layout fields (see [`spec_from_bytes`]). Bits 1..7 pick
/// the chunk size (1..=128 events).
pub fn records(data: &[u8]) -> Outcome {
    let Some((&flags, rest)) = data.split_first() else { return Outcome::Refused };
    let (spec, body) = if flags & 1 == 1 {
        let nl = rest.iter().position(|&b| b == b'\n').unwrap_or(rest.len());
        let Ok(spec) = std::str::from_utf8(&rest[..nl]) else { return Outcome::Refused };
        (spec.to_string(), rest.get(nl + 1..).unwrap_or_default())
    } else {
        if rest.len() < 8 {
            return Outcome::Refused;
        }
        (spec_from_bytes(&rest[..8]), &rest[8..])
    };
    let Ok(layout) = RecordLayout::from_spec(&spec) else { return Outcome::Refused };
    let again = RecordLayout::from_spec(&layout.to_spec()).expect("to_spec output parses");
    assert_eq!(again, layout, "layout spec round trip");
    let chunk = (flags >> 1) as usize + 1;
    let file = ScratchFile::write("records", body);
    let open = |opts| Records::open(file.path(), layout.clone(), opts).map(|r| Box::new(r) as Box<dyn TagSource>);
    read_every_way(open, chunk)
}

/// Eight bytes → a compact layout spec; ranges are chosen so most specs are valid but
/// every field still reaches the edges of what `validate` accepts and refuses.
pub fn spec_from_bytes(b: &[u8]) -> String {
    let endian = |bit: u8| if b[6] & bit != 0 { "be" } else { "le" };
    let time_width = if b[6] & 4 != 0 { 8 } else { 4 };
    let chan_width = [1, 2, 4, 3][(b[6] >> 3 & 3) as usize];
    let tick_fs = u16::from_le_bytes([b[4], b[5]]) as u64 + 1;
    // Bits 6 and 7 put a field's offset just below u64::MAX (overflowing offset + width).
    let offset = |v: u8, bit: u8| if b[6] & bit != 0 { u64::MAX - (v % 16) as u64 } else { (v % 40) as u64 };
    let mut spec = format!(
        "rec={},skip={},time={}:{time_width}:{},chan={}:{chan_width}:{},tick_ps={}.{:03}",
        b[0] % 40,
        b[1] % 32,
        offset(b[2], 64),
        endian(1),
        offset(b[3], 128),
        endian(2),
        tick_fs / 1000,
        tick_fs % 1000
    );
    if b[6] & 32 != 0 {
        spec.push_str(&format!(",wrap={}", b[7] % 66));
    }
    spec
}

/// Target (b): the input is a whole file handed to `open_inputs` (a container when it has
/// the magic bytes; no layout given), read whole and chunked, mapped and buffered, then
/// inspected as `inspect` does.
pub fn container(data: &[u8]) -> Outcome {
    let file = ScratchFile::write("container", data);
    let arg = file.path().display().to_string();
    let open = |opts| open_inputs(std::slice::from_ref(&arg), None, opts).map(|mut v| v.remove(0));
    read_every_way(open, 3)
}

/// Open with each read option, read whole and chunked, compare all answers, inspect.
fn read_every_way(open: impl Fn(ReadOptions) -> Result<Box<dyn TagSource>>, chunk: usize) -> Outcome {
    let mut strict = None;
    for mmap in [true, false] {
        let Ok(src) = open(ReadOptions { mmap, lenient_order: false }) else { return Outcome::Refused };
        let whole = whole_read(src.as_ref());
        assert_eq!(whole, chunked_read(src.as_ref(), chunk), "whole and chunked reads differ (mmap {mmap})");
        if let Some(declared) = src.declared_channels() {
            if let Some(tags) = &whole {
                assert!(tags.keys().all(|c| declared.contains(c)), "channel read that the table does not declare");
            }
        }
        if let Some(first) = &strict {
            assert_eq!(first, &whole, "mapped and buffered reads differ");
        }
        strict = Some(whole);
        inspect_lenient(&open, mmap);
    }
    match strict.flatten() {
        Some(tags) => Outcome::Read { events: tags.values().map(|v| v.len() as u64).sum() },
        None => Outcome::Refused,
    }
}

fn whole_read(src: &dyn TagSource) -> Option<Tags> {
    let channels = src.channels().ok()?;
    let mut out = Tags::new();
    for c in channels.iter().filter(|c| !c.is_empty()) {
        assert!(out.insert(c.channel, c.times_ps.to_vec()).is_none(), "channel {} returned twice", c.channel);
    }
    let events: u64 = out.values().map(|v| v.len() as u64).sum();
    // Records of layouts with kinds or an edge choice hold fewer tags than records:
    // event_count is then an upper bound.
    assert!(events <= src.event_count(), "more events read than event_count says");
    if src.exact_event_count() {
        assert_eq!(events, src.event_count(), "event_count disagrees with the events read");
    }
    Some(out)
}

fn chunked_read(src: &dyn TagSource, chunk: usize) -> Option<Tags> {
    let mut out = Tags::new();
    for part in src.chunks(chunk).ok()? {
        for c in part.ok()? {
            out.entry(c.channel).or_default().extend_from_slice(&c.times_ps);
        }
    }
    out.retain(|_, v| !v.is_empty());
    Some(out)
}

/// The `inspect` path: lenient order, chunked, statistics over whatever was read.
fn inspect_lenient(open: &impl Fn(ReadOptions) -> Result<Box<dyn TagSource>>, mmap: bool) {
    let Ok(src) = open(ReadOptions { mmap, lenient_order: true }) else { return };
    if let Ok(report) = check::inspect(std::slice::from_ref(&src), &Progress::hidden()) {
        let _ = report.problems();
        for c in &report.channels {
            assert!(c.min_ps <= c.max_ps && c.span_ps == c.max_ps - c.min_ps, "inspect span of channel {}", c.channel);
        }
    }
}

/// Target (c): the layout TOML parser; an accepted layout must be valid and round-trip
/// through the compact spec.
pub fn layout_toml(data: &[u8]) -> Outcome {
    let Ok(text) = std::str::from_utf8(data) else { return Outcome::Refused };
    let Ok(layout) = RecordLayout::from_toml(text, Path::new("fuzz-layout.toml")) else { return Outcome::Refused };
    assert!(layout.validate().is_ok(), "from_toml accepted a layout validate refuses");
    let again = RecordLayout::from_spec(&layout.to_spec()).expect("to_spec output parses");
    assert_eq!(again, layout, "TOML layout does not round-trip through the spec");
    Outcome::Read { events: 0 }
}

/// Target (d): the run manifest parser and every accessor the commands call on it; a
/// parsed manifest must save to text that parses again to the same text.
pub fn manifest(data: &[u8]) -> Outcome {
    let Ok(text) = std::str::from_utf8(data) else { return Outcome::Refused };
    let Ok(m) = Manifest::parse(text, Path::new("fuzz-manifest.toml"), Path::new("/fuzz")) else { return Outcome::Refused };
    for block in &m.blocks {
        let _ = m.block_inputs(block);
        let _ = m.block_angles_deg(block);
        if let Some(l) = m.block_layout(block).filter(|l| l.contains('=')) {
            let _ = RecordLayout::from_spec(&l);
        }
    }
    let _ = (m.setting_pairs(), m.channel_delays_ps(), m.delays_file_path());
    for c in &m.channels {
        let _ = m.role_of(c.number);
    }
    let saved = m.to_toml_string().expect("a parsed manifest serialises");
    let again = Manifest::parse(&saved, Path::new("saved.toml"), Path::new("/fuzz")).expect("a saved manifest parses again");
    assert_eq!(again.to_toml_string().expect("serialises"), saved, "manifest save/parse round trip");
    Outcome::Read { events: m.blocks.len() as u64 }
}
