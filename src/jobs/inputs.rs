//! What every job that reads tags shares before its pass: a block's inputs opened from the
//! strings users give (with a record layout, the read options and an optional clock map
//! for a second recorder), and the one precedence of delays (manifest < delays file < flags).

use super::pass::PassMode;
use crate::engine::Delays;
use crate::manifest::Manifest;
use crate::read::{self, clocked, layout::RecordLayout, InputKind, ReadOptions, TagSource};
use crate::tags::clock::{ClockMap, MapTally};
use crate::Result;
use std::path::PathBuf;
use std::sync::{Arc, Mutex};

/// One block's inputs as a user names them.
#[derive(Debug, Clone, Default)]
pub struct BlockInputs {
    /// `CH=PATH` or `CH:NAME=PATH` for a per-channel array, a container file, or an
    /// interleaved-record file (needs `layout`).
    pub inputs: Vec<String>,
    /// Record layout: a layout TOML file or a compact spec (docs/formats.md).
    pub layout: Option<String>,
    pub read: ReadOptions,
    /// Clock file from `clock-fit`: its second-site channels are mapped onto the first
    /// site's time before the coincidence rule (whole passes only; docs/clocks.md).
    pub clock: Option<PathBuf>,
}

impl BlockInputs {
    /// Open the inputs; with a clock map, every source maps its second-site channels and
    /// the last one to drop reports on stderr (unless `quiet`) what the mapping left out.
    /// A container still named `.sieve` gets a note on stderr (unless `quiet`).
    pub fn open(&self, quiet: bool) -> Result<Vec<Box<dyn TagSource>>> {
        let sources = open_block(&self.inputs, self.layout.as_deref(), self.read)?;
        if !quiet {
            for note in old_extension_notes(&sources) {
                eprintln!("tagsieve: note: {note}");
            }
        }
        let Some(path) = &self.clock else { return Ok(sources) };
        let map = Arc::new(ClockMap::load(path)?);
        let tally = Arc::new(Mutex::new(MapTally::default()));
        let n = sources.len();
        let shown = path.display().to_string();
        Ok(sources
            .into_iter()
            .enumerate()
            .map(|(i, inner)| {
                // the last source drops last: it reports the tally of the whole block
                let shown = shown.clone();
                let on_drop: Option<clocked::TallyReport> = (i + 1 == n && !quiet).then(|| {
                    Box::new(move |t: &MapTally| {
                        eprintln!(
                            "clock map {shown}: {} second-site tags mapped; not counted: {} outside the fitted span, {} in lost segments, {} before time 0",
                            t.mapped, t.outside_span, t.in_lost_span, t.below_zero
                        )
                    }) as clocked::TallyReport
                });
                Box::new(clocked::ClockedSource { inner, map: map.clone(), tally: tally.clone(), on_drop }) as Box<dyn TagSource>
            })
            .collect())
    }

    /// The pass to use when `asked`: a clock map needs a whole pass, so `auto` becomes
    /// `whole` with one.
    pub fn mode(&self, asked: PassMode) -> PassMode {
        if self.clock.is_some() && asked == PassMode::Auto {
            PassMode::Whole
        } else {
            asked
        }
    }
}

/// Open a block's inputs given as strings (`CH=PATH`, a container, a record file).
pub fn open_block(inputs: &[String], layout: Option<&str>, opts: ReadOptions) -> Result<Vec<Box<dyn TagSource>>> {
    let layout = layout.map(RecordLayout::from_arg).transpose()?;
    read::open_inputs(inputs, layout.as_ref(), opts)
}

/// A note for each container still named `.sieve`.
pub fn old_extension_notes(sources: &[Box<dyn TagSource>]) -> Vec<String> {
    sources
        .iter()
        .filter(|s| s.file().format == InputKind::Container)
        .filter_map(|s| read::container::old_extension_note(&s.file().path))
        .collect()
}

/// Where a job's delays come from. The one precedence: the manifest's per-channel
/// `delay_ps`, then the manifest's delays file, then `file` (a delays file given by the
/// user), then `flags` (`CH=PS`); a later source replaces an earlier one channel by channel.
#[derive(Debug, Clone, Default)]
pub struct DelaySources {
    pub file: Option<PathBuf>,
    pub flags: Vec<String>,
}

impl DelaySources {
    /// The delays, with the manifest's underneath where there is one.
    pub fn resolve(&self, manifest: Option<&Manifest>) -> Result<Delays> {
        let mut d = Delays::default();
        if let Some(m) = manifest {
            for (c, v) in m.channel_delays_ps() {
                d.by_channel.insert(c, v);
                d.obtained.insert(c, "manifest delay_ps".into());
            }
            if let Some(p) = m.delays_file_path() {
                d.overlay(&Delays::load(&p)?);
            }
        }
        if let Some(p) = &self.file {
            d.overlay(&Delays::load(p)?);
        }
        d.apply_flags(&self.flags)?;
        Ok(d)
    }
}

/// Paths of the opened inputs.
pub fn paths(sources: &[Box<dyn TagSource>]) -> Vec<PathBuf> {
    sources.iter().map(|s| s.file().path).collect()
}
