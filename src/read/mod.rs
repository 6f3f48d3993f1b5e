//! Readers: every input format behind one [`TagSource`] trait, memory-mapped with a
//! buffered fallback ([`mapping`]), validated with errors that name the file, the record
//! or byte offset, what was found and what was expected.
//!
//! Formats: per-channel u64 arrays (`CH=PATH`, [`channel_array`]), interleaved fixed-size
//! records of any layout ([`records`], [`layout`]), and our own columnar container
//! ([`container`]). Adding a format: one file implementing [`TagSource`] and one line in
//! [`open_inputs`].

pub mod channel_array;
pub mod clocked;
pub mod container;
pub mod layout;
pub mod mapping;
pub mod records;
pub mod sections;

use crate::{Channel, ChannelTags, Error, Result};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// The time limit [`crate::tags::MAX_TIME_PS`] under the readers' short name (one constant;
/// this alias stays while record readers name it so).
pub use crate::tags::MAX_TIME_PS as MAX_PS;

/// How inputs are read. Mapping is the caller's explicit choice: the default reads with
/// buffered I/O; [`ReadOptions::mapped`] (what the command line uses unless `--no-mmap`)
/// maps files into memory.
#[derive(Debug, Clone, Copy)]
pub struct ReadOptions {
    /// Map files into memory. A mapped file must not be truncated or rewritten while it is
    /// read: the pages would then fault (a SIGBUS, turned into an error and exit 1 by
    /// `sys::guard` where the handler is installed) or hold the new bytes. `false` (the
    /// default) reads with buffered I/O, which has no such requirement.
    pub mmap: bool,
    /// Lenient order check (for `inspect`): timestamps going backwards are handed on as
    /// they are instead of failing, so the caller can count them. Default `false` (strict).
    pub lenient_order: bool,
}

impl Default for ReadOptions {
    /// Buffered reads, strict order check.
    fn default() -> Self {
        ReadOptions { mmap: false, lenient_order: false }
    }
}

impl ReadOptions {
    /// Map the files (zero copy). The caller promises that no input is truncated or
    /// rewritten while it is read (see [`ReadOptions::mmap`]); files that may change are
    /// read with [`ReadOptions::default`] instead.
    pub fn mapped() -> Self {
        ReadOptions { mmap: true, lenient_order: false }
    }
}

/// A file an input set was read from.
#[derive(Debug, Clone, PartialEq)]
pub struct InputFile {
    pub path: PathBuf,
    pub size_bytes: u64,
    /// Which of the three formats the file holds.
    pub format: InputKind,
}

/// The kind of an input file. Its [`InputKind::name`] (and its serialized form) is the
/// name the manifest's `format` key and `simulate --format` use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum InputKind {
    /// One little-endian u64 array of ps per channel.
    Arrays,
    /// Interleaved records described by a layout.
    Records,
    /// A container file of all channels.
    Container,
}

impl InputKind {
    pub fn name(self) -> &'static str {
        match self {
            InputKind::Arrays => "arrays",
            InputKind::Records => "records",
            InputKind::Container => "container",
        }
    }
}

impl std::fmt::Display for InputKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// One opened input file of any format.
pub trait TagSource: Send + Sync {
    fn file(&self) -> InputFile;
    /// All channels of this file, in integer ps, sorted ascending. Zero-copy where the
    /// format allows; interleaved records are demultiplexed into memory.
    fn channels(&self) -> Result<Vec<ChannelTags<'_>>>;
    /// [`TagSource::channels`], where the format allows, without the pass that checks the
    /// timestamps ascend: the tags come marked [`ChannelTags::order_checked`] false and the
    /// engine checks them during its own first pass. Formats that must read every record
    /// anyway (interleaved records) check as they go and return checked tags.
    fn channels_order_deferred(&self) -> Result<Vec<ChannelTags<'_>>> {
        self.channels()
    }
    /// Bounded-memory view: consecutive chunks of about `events_per_chunk` events,
    /// demultiplexed per channel, in time order overall. Every event appears in exactly
    /// one chunk; within a channel, chunk k's events are all ≤ chunk k+1's.
    fn chunks(&self, events_per_chunk: usize) -> Result<Box<dyn Iterator<Item = Result<Vec<ChannelTags<'static>>>> + Send + '_>>;
    /// Re-check the file's size after a pass; an error if it changed underneath.
    fn check_unchanged(&self) -> Result<()>;
    /// Number of events in the file, known from its size or channel table (for records
    /// of a layout with kinds or an edge choice, the number of records: an upper bound).
    fn event_count(&self) -> u64;
    /// Whether [`TagSource::event_count`] is the exact number of tags read.
    fn exact_event_count(&self) -> bool {
        true
    }
    /// Channel numbers known without reading the data (arrays, container); `None` for
    /// interleaved records, whose channels appear only while demultiplexing.
    fn declared_channels(&self) -> Option<Vec<Channel>>;
    /// Remarks on the last pass that are not errors (records of unknown kinds skipped, say),
    /// one line each, for the report.
    fn notes(&self) -> Vec<String> {
        Vec::new()
    }
}

/// Open the INPUT arguments of one block: `CH=PATH` (or `CH:NAME=PATH`) for per-channel
/// arrays, a container file (recognised by its magic bytes), or an interleaved-record file
/// (needs `layout`). Channel numbers must be unique across the whole set.
pub fn open_inputs(
    args: &[String],
    layout: Option<&layout::RecordLayout>,
    opts: ReadOptions,
) -> Result<Vec<Box<dyn TagSource>>> {
    let mut sources: Vec<Box<dyn TagSource>> = Vec::with_capacity(args.len());
    let mut owner: BTreeMap<Channel, PathBuf> = BTreeMap::new();
    for arg in args {
        let src = open_one(arg, layout, opts)?;
        for ch in src.declared_channels().unwrap_or_default() {
            claim_channel(&mut owner, ch, &src.file().path)?;
        }
        sources.push(src);
    }
    Ok(sources)
}

/// One INPUT argument → its reader (the one line per format lives here).
fn open_one(arg: &str, layout: Option<&layout::RecordLayout>, opts: ReadOptions) -> Result<Box<dyn TagSource>> {
    if let Some((channel, name, path)) = channel_array::parse_arg(arg)? {
        return Ok(Box::new(channel_array::ChannelArray::open(channel, &name, &path, opts)?));
    }
    let path = Path::new(arg);
    let map = mapping::Mapping::open(path, opts)?;
    if container::has_magic(&map)? {
        return Ok(Box::new(container::Container::from_mapping(map, opts)?));
    }
    match layout {
        Some(l) => Ok(Box::new(records::Records::from_mapping(map, l.clone(), opts)?)),
        None => Err(Error::Usage(format!(
            "{arg}: byte offset 0: found {}: not a container file (its {} magic is {:02x?}) and no --layout given; \
             give per-channel arrays as CH=PATH, or describe the records with --layout FILE|SPEC",
            first_bytes(&map)?,
            container::EXTENSION,
            container::MAGIC
        ))),
    }
}

/// "first bytes [..]" (up to 8) or "an empty file (0 bytes)", for messages.
fn first_bytes(map: &mapping::Mapping) -> Result<String> {
    let n = map.size_bytes().min(8) as usize;
    if n == 0 {
        return Ok("an empty file (0 bytes)".into());
    }
    Ok(format!("first bytes {:02x?}", &*map.bytes(0, n)?))
}

fn claim_channel(owner: &mut BTreeMap<Channel, PathBuf>, ch: Channel, path: &Path) -> Result<()> {
    if let Some(first) = owner.get(&ch) {
        return Err(Error::Usage(format!(
            "channel {ch} appears twice: in {} and in {}; each channel may come from one input only",
            first.display(),
            path.display()
        )));
    }
    owner.insert(ch, path.to_path_buf());
    Ok(())
}

/// Convenience: all channels of a set of opened inputs, checking channel numbers are unique.
pub fn all_channels<'a>(sources: &'a [Box<dyn TagSource>]) -> Result<Vec<ChannelTags<'a>>> {
    gather(sources, |s| s.channels())
}

/// [`all_channels`] with the order check left to the engine
/// ([`TagSource::channels_order_deferred`]). If the engine then reports
/// [`Error::Unordered`], [`locate_disorder`] turns it into the reader's own error.
pub fn all_channels_order_deferred<'a>(sources: &'a [Box<dyn TagSource>]) -> Result<Vec<ChannelTags<'a>>> {
    gather(sources, |s| s.channels_order_deferred())
}

fn gather<'a>(sources: &'a [Box<dyn TagSource>], read: impl Fn(&'a dyn TagSource) -> Result<Vec<ChannelTags<'a>>>) -> Result<Vec<ChannelTags<'a>>> {
    let mut owner = BTreeMap::new();
    let mut out = Vec::new();
    for s in sources {
        let path = s.file().path;
        for c in read(s.as_ref())? {
            claim_channel(&mut owner, c.channel, &path)?;
            out.push(c);
        }
        s.check_unchanged()?;
    }
    Ok(out)
}

/// The result of an engine pass over [`all_channels_order_deferred`] tags: an
/// [`Error::Unordered`] is replaced by the strict reader's error for the same files
/// (naming the file, the record, its byte offset, what was found and what was expected).
pub fn locate_disorder<T>(r: Result<T>, sources: &[Box<dyn TagSource>]) -> Result<T> {
    match r {
        Err(e @ Error::Unordered { .. }) => {
            for s in sources {
                s.channels()?;
            }
            Err(e)
        }
        r => r,
    }
}

/// The result of a streamed engine pass over `source`'s chunks: an [`Error::Unordered`]
/// is replaced by the reader's located error, found by reading the chunks again (bounded
/// memory); should the reader pass them all, the error still names the file and channel.
pub fn locate_disorder_streamed<T>(r: Result<T>, source: &dyn TagSource) -> Result<T> {
    match r {
        Err(Error::Unordered { channel }) => {
            let mut last: Option<u64> = None;
            let mut events = 0u64;
            for chunk in source.chunks(1 << 20)? {
                for t in chunk?.iter().filter(|t| t.channel == channel) {
                    if let (Some(l), Some(&first)) = (last, t.times_ps.first()) {
                        if first < l {
                            return Err(Error::bad_input(
                                source.file().path,
                                format!("channel {channel}, its event {events}"),
                                format!("timestamp {first} ps after {l} ps"),
                                format!("≥ {l} ps (each channel's timestamps ascending)"),
                            ));
                        }
                    }
                    events += t.len() as u64;
                    last = t.times_ps.last().copied().or(last);
                }
            }
            Err(Error::bad_input(
                source.file().path,
                format!("channel {channel}"),
                "timestamps that go backwards between two chunks of the streamed pass",
                "ascending timestamps in each channel",
            ))
        }
        r => r,
    }
}

/// Whether `path` starts with the container's magic bytes.
pub fn is_container(path: &Path) -> bool {
    mapping::Mapping::open_buffered(path).ok().is_some_and(|m| container::has_magic(&m).unwrap_or(false))
}

/// "record 12 (byte offset 96)": the location text every reader uses.
pub fn record_location(index: u64, byte_offset: u64) -> String {
    format!("record {index} (byte offset {byte_offset})")
}

/// Whether the values are non-decreasing with at least two distinct ones (used to suggest
/// the other byte order when the data as read goes backwards).
pub(crate) fn looks_monotone(values: impl Iterator<Item = u64>) -> bool {
    let mut prev: Option<u64> = None;
    let mut rising = false;
    for v in values {
        if let Some(p) = prev {
            if v < p {
                return false;
            }
            rising |= v > p;
        }
        prev = Some(v);
    }
    rising
}
