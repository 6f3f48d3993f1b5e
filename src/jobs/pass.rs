//! The pass over one block's opened inputs, shared by the count, scan, sweep and chsh
//! jobs: whole-file (mapped, zero copy) or streamed (bounded memory), the delays checked
//! against the channels, progress, located order errors, inputs checked unchanged.

use crate::engine::driver::{self, BlockPass, PassOutput};
use crate::engine::Delays;
use crate::read::{self, InputKind, TagSource};
use crate::sys::progress::Progress;
use crate::{Channel, Error, Result};

/// Events per chunk on the streaming pass (32 MiB of u64 per chunk at most).
pub const STREAM_CHUNK_EVENTS: usize = 4 << 20;

/// Which pass to use over a block's inputs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PassMode {
    /// Streaming for a single interleaved-record file (demultiplexing it whole would need
    /// 8 bytes of memory per event), whole-file otherwise (mapped, zero copy).
    #[default]
    Auto,
    /// Always whole-file.
    Whole,
    /// Always streaming (single input file only).
    Stream,
}

impl PassMode {
    /// The mode of a name as the user types it (`auto`, `whole`, `stream`).
    pub fn from_name(s: &str) -> Option<Self> {
        match s {
            "auto" => Some(PassMode::Auto),
            "whole" => Some(PassMode::Whole),
            "stream" => Some(PassMode::Stream),
            _ => None,
        }
    }

    fn streams(self, sources: &[Box<dyn TagSource>]) -> Result<bool> {
        match self {
            PassMode::Whole => Ok(false),
            PassMode::Auto => Ok(sources.len() == 1 && sources[0].file().format == InputKind::Records),
            PassMode::Stream if sources.len() == 1 => Ok(true),
            PassMode::Stream => Err(Error::Usage(format!(
                "a streamed pass reads one input file in time order; this block has {} files (use a container or records file)",
                sources.len()
            ))),
        }
    }
}

fn total_bytes(sources: &[Box<dyn TagSource>]) -> u64 {
    sources.iter().map(|s| s.file().size_bytes).sum()
}

/// Chunks of the single source, feeding a progress bar (bytes done, events/s, ETA).
fn chunks_with_progress<'a>(
    src: &'a dyn TagSource,
    progress: &'a Progress,
) -> Result<impl Iterator<Item = Result<Vec<crate::ChannelTags<'static>>>> + 'a> {
    let it = src.chunks(STREAM_CHUNK_EVENTS)?;
    // Bytes per event of this file, so the bar runs over its real size.
    let bytes_per_event = src.file().size_bytes as f64 / src.event_count().max(1) as f64;
    Ok(it.inspect(move |c| {
        if let Ok(c) = c {
            let events: u64 = c.iter().map(|t| t.len() as u64).sum();
            progress.inc_events((events as f64 * bytes_per_event) as u64, events);
        }
    }))
}

/// Channels a block's inputs declare without reading the data; `None` when a record
/// file's channels appear only as it is read.
pub fn declared_channels(sources: &[Box<dyn TagSource>]) -> Option<Vec<Channel>> {
    let mut all = Vec::new();
    for s in sources {
        all.extend(s.declared_channels()?);
    }
    all.sort_unstable();
    Some(all)
}

/// Which delays a pass may use: a `--delay` for a channel no input has is refused, and,
/// with `require`, once a delays file is involved every channel of the pairs (every
/// channel when `pairs` is empty) must have a delay ([`Delays::require`]).
/// Checked before the pass where the inputs declare their channels, else after it.
struct DelayCheck<'a> {
    delays: &'a Delays,
    pairs: &'a [(Channel, Channel)],
    require: bool,
    done: bool,
}

impl<'a> DelayCheck<'a> {
    fn before(sources: &[Box<dyn TagSource>], delays: &'a Delays, pairs: &'a [(Channel, Channel)], require: bool) -> Result<Self> {
        let mut c = DelayCheck { delays, pairs, require, done: false };
        if let Some(channels) = declared_channels(sources) {
            c.check(&channels)?;
        }
        Ok(c)
    }

    fn after(self, channels: &[Channel]) -> Result<()> {
        if self.done {
            return Ok(());
        }
        let mut c = self;
        c.check(channels)
    }

    fn check(&mut self, channels: &[Channel]) -> Result<()> {
        self.done = true;
        self.delays.check_given(channels)?;
        if !self.require {
            return Ok(());
        }
        if self.pairs.is_empty() {
            self.delays.require(channels.iter().copied())
        } else {
            self.delays.require(self.pairs.iter().flat_map(|&(a, b)| [a, b]))
        }
    }
}

/// Run one pass (count, scan or sweep: [`BlockPass`]) over a block's inputs: the delays
/// checked against the channels, the pass chosen by `mode`, a progress bar named `what`,
/// the order check deferred into the pass and, on disorder, the reader's located error;
/// every input checked unchanged afterwards. `require_delays`: once a delays file is
/// involved every channel of the pairs needs a delay ([`Delays::require`]).
pub fn run_pass<P: BlockPass>(
    what: &str,
    label: &str,
    sources: &[Box<dyn TagSource>],
    pass: &P,
    mode: PassMode,
    require_delays: bool,
    quiet: bool,
) -> Result<PassOutput<P::Tables>> {
    let check = DelayCheck::before(sources, pass.delays(), pass.pairs(), require_delays)?;
    let progress = Progress::bytes(what, total_bytes(sources), quiet);
    let out = if mode.streams(sources)? {
        read::locate_disorder_streamed(driver::streamed(label, chunks_with_progress(sources[0].as_ref(), &progress)?, pass), sources[0].as_ref())
    } else {
        let tags = read::all_channels_order_deferred(sources)?;
        read::locate_disorder(driver::whole(label, &tags, pass), sources)
    };
    progress.finish();
    check_unchanged(sources)?;
    let out = out?;
    let channels: Vec<Channel> = if out.span.is_some() { out.channels.iter().map(|c| c.channel).collect() } else { vec![] };
    check.after(&channels)?;
    Ok(out)
}

/// Every input must still be the size it was when opened.
pub fn check_unchanged(sources: &[Box<dyn TagSource>]) -> Result<()> {
    sources.iter().try_for_each(|s| s.check_unchanged())
}

