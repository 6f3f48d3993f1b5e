//! The count job: coincidences and accidentals at one window over one block's inputs,
//! into the block's tables, their provenance and the output Document.

use super::inputs::{BlockInputs, DelaySources};
use super::pass::{run_pass, PassMode};
use super::{Context, Params};
use crate::engine::tables::BlockTables;
use crate::engine::{accidentals, count, rule, sweep::OffPeak, CountConfig};
use crate::output::{provenance::Provenance, AttrValue, Document};
use crate::{Channel, Result};

/// Where the off-peak windows of the measured accidentals sit.
#[derive(Debug, Clone, PartialEq, Default)]
pub enum OffPeakChoice {
    /// Ten windows side by side, five each side of the peak
    /// ([`accidentals::default_offsets_ps`]); a sweep places each window's own.
    #[default]
    Default,
    /// The offsets given, ps from the peak (the same on every row of a sweep).
    Given(Vec<i64>),
    /// No off-peak windows: no measured accidentals.
    None,
}

impl OffPeakChoice {
    /// The offsets of a count at `window_ps`.
    pub fn offsets_ps(&self, window_ps: u64) -> Vec<i64> {
        match self {
            OffPeakChoice::Default => accidentals::default_offsets_ps(window_ps),
            OffPeakChoice::Given(v) => v.clone(),
            OffPeakChoice::None => vec![],
        }
    }
    /// The off-peak windows of a sweep.
    pub fn sweep(&self) -> OffPeak {
        match self {
            OffPeakChoice::Default => OffPeak::PerWindow,
            OffPeakChoice::Given(v) => OffPeak::Fixed(v.clone()),
            OffPeakChoice::None => OffPeak::Fixed(vec![]),
        }
    }
}

/// A value together with where it came from (a flag, a manifest line), for messages.
#[derive(Debug, Clone, PartialEq)]
pub struct Sourced<T> {
    pub value: T,
    /// e.g. `--window-ps`, `run.toml: window_ps`.
    pub from: String,
}

impl Sourced<u64> {
    /// A coincidence window, checked once with a message naming where it came from.
    pub fn checked_window(&self) -> Result<u64> {
        rule::check_window(self.value, &self.from)?;
        Ok(self.value)
    }
}

/// Count one block.
#[derive(Debug, Clone)]
pub struct CountJob {
    pub ctx: Context,
    /// Block label (the HDF5 group name).
    pub label: String,
    pub inputs: BlockInputs,
    pub pass: PassMode,
    /// Channel pairs (A, B); empty = every pair of the channels present.
    pub pairs: Vec<(Channel, Channel)>,
    pub delays: DelaySources,
    pub window_ps: Sourced<u64>,
    pub offpeak: OffPeakChoice,
    /// Slice length of the analytic accidentals, ps.
    pub slice_ps: u64,
    /// Build the provenance and Document (reads every input once more for its checksum).
    pub document: bool,
}

/// What a count gives.
#[derive(Debug, Clone)]
pub struct CountOutcome {
    pub block: BlockTables,
    pub config: CountConfig,
    pub provenance: Option<Provenance>,
    pub document: Option<Document>,
}

/// The settings of a count, as every job that counts records them.
impl Params for CountConfig {
    fn params(&self) -> Vec<(&'static str, AttrValue)> {
        vec![
            ("window_ps", AttrValue::U64(self.window_ps)),
            slice_param(self.slice_ps),
            ("acc_offsets_ps", AttrValue::json_text(&self.offsets_ps)),
            ("delays_ps", AttrValue::json_text(&self.delays.by_channel)),
        ]
    }
}

/// The slice length of the analytic accidentals as `param.slice_s`, in seconds as
/// `--slice-s` gives it (the job holds it in whole ps; ps / 10¹² gives back the value typed to the picosecond).
pub fn slice_param(slice_ps: u64) -> (&'static str, AttrValue) {
    ("slice_s", AttrValue::F64(slice_ps as f64 / 1e12))
}

/// Count one block at the job's window.
pub fn run(job: &CountJob) -> Result<CountOutcome> {
    let window_ps = job.window_ps.checked_window()?;
    let config = CountConfig {
        pairs: job.pairs.clone(),
        delays: job.delays.resolve(None)?,
        window_ps,
        offsets_ps: job.offpeak.offsets_ps(window_ps),
        slice_ps: job.slice_ps,
    };
    let sources = job.inputs.open(job.ctx.quiet)?;
    let block = count_block(&job.label, &sources, &config, job.inputs.mode(job.pass), job.ctx.quiet)?;
    let layout_param: Vec<(&'static str, AttrValue)> = job.inputs.layout.iter().map(|l| ("layout", AttrValue::Str(l.clone()))).collect();
    let (provenance, document) = super::block_document(job.document, &job.ctx, "count", &[&config, &layout_param], &sources, &block)?;
    Ok(CountOutcome { block, config, provenance, document })
}

/// Count one block of opened inputs (also each block of a run: [`super::chsh`]).
pub fn count_block(label: &str, sources: &[Box<dyn crate::read::TagSource>], cfg: &CountConfig, mode: PassMode, quiet: bool) -> Result<BlockTables> {
    let out = run_pass("count", label, sources, cfg, mode, true, quiet)?;
    Ok(out.block(label, &cfg.delays, |b, rows| count::fill(b, cfg, rows)))
}
