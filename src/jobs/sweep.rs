//! The sweep job: coincidences, accidentals, net counts and CAR against the window over one
//! block's inputs, and the window a documented criterion recommends.

use super::count::OffPeakChoice;
use super::inputs::{BlockInputs, DelaySources};
use super::pass::{run_pass, PassMode};
use super::{Context, Params};
use crate::engine::sweep::{OffPeak, SweepPass};
use crate::engine::tables::BlockTables;
use crate::engine::{CountConfig, Criterion};
use crate::output::{provenance::Provenance, AttrValue, Document};
use crate::{Channel, Result};

/// Sweep the window over one block.
#[derive(Debug, Clone)]
pub struct SweepJob {
    pub ctx: Context,
    pub label: String,
    pub inputs: BlockInputs,
    pub pass: PassMode,
    pub pairs: Vec<(Channel, Channel)>,
    pub delays: DelaySources,
    /// The windows to try, ps.
    pub windows_ps: Vec<u64>,
    pub criterion: Criterion,
    pub offpeak: OffPeakChoice,
    pub slice_ps: u64,
    pub document: bool,
}

/// What a sweep gives.
#[derive(Debug, Clone)]
pub struct SweepOutcome {
    pub block: BlockTables,
    pub provenance: Option<Provenance>,
    pub document: Option<Document>,
}

/// A sweep's settings: its windows, criterion, slice and off-peak windows.
pub struct SweepSettings<'a> {
    pub windows_ps: &'a [u64],
    pub criterion: Criterion,
    pub slice_ps: u64,
    pub offpeak: &'a OffPeak,
}

impl Params for SweepSettings<'_> {
    fn params(&self) -> Vec<(&'static str, AttrValue)> {
        let mut v = vec![("windows_ps", AttrValue::json_text(&self.windows_ps)), ("criterion", AttrValue::Str(criterion_arg(self.criterion).into()))];
        if let Criterion::PeakFraction(f) = self.criterion {
            v.push(("fraction", AttrValue::F64(f)));
        }
        v.push(super::count::slice_param(self.slice_ps));
        v.push((
            "acc_offsets_ps",
            match self.offpeak {
                OffPeak::Fixed(o) => AttrValue::json_text(o),
                OffPeak::PerWindow => AttrValue::Str(PER_WINDOW_RULE.into()),
            },
        ));
        v
    }
}

/// The criterion as `--criterion` spells it (its fraction is `param.fraction`).
pub fn criterion_arg(c: Criterion) -> &'static str {
    match c {
        Criterion::MaxNetSignificance => "net-significance",
        Criterion::PeakFraction(_) => "peak-fraction",
    }
}

/// The off-peak offsets of a sweep that places each window's own, as a provenance value.
const PER_WINDOW_RULE: &str = "per window w: ±(max(2000000, 2W) + k·W), k = 0…4, W = 2⌊w/2⌋+1";

pub fn run(job: &SweepJob) -> Result<SweepOutcome> {
    let base = CountConfig {
        pairs: job.pairs.clone(),
        delays: job.delays.resolve(None)?,
        window_ps: *job.windows_ps.iter().max().unwrap_or(&1),
        offsets_ps: vec![],
        slice_ps: job.slice_ps,
    };
    let offpeak = job.offpeak.sweep();
    let sources = job.inputs.open(job.ctx.quiet)?;
    let block = sweep_block(&job.label, &sources, &base, &job.windows_ps, &offpeak, job.criterion, job.inputs.mode(job.pass), job.ctx.quiet)?;
    let settings = SweepSettings { windows_ps: &job.windows_ps, criterion: job.criterion, slice_ps: job.slice_ps, offpeak: &offpeak };
    let (provenance, document) = super::block_document(job.document, &job.ctx, "sweep", &[&settings], &sources, &block)?;
    Ok(SweepOutcome { block, provenance, document })
}

/// Sweep one block of opened inputs.
#[allow(clippy::too_many_arguments)] // each is one independent choice of the sweep
pub fn sweep_block(
    label: &str,
    sources: &[Box<dyn crate::read::TagSource>],
    base: &CountConfig,
    windows_ps: &[u64],
    offpeak: &OffPeak,
    criterion: Criterion,
    mode: PassMode,
    quiet: bool,
) -> Result<BlockTables> {
    let pass = SweepPass { base, windows_ps: windows_ps.to_vec(), offpeak, criterion };
    let out = run_pass("sweep", label, sources, &pass, mode, true, quiet)?;
    Ok(out.block(label, &base.delays, |b, sweeps| b.sweeps = sweeps))
}
