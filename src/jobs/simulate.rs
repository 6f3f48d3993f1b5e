//! The simulate job: a run of the entangled-pair source and the detectors (optionally a
//! second recorder on its own clock) written as tag files plus a run manifest.

use super::Context;
use crate::simulate::{self, RunConfig, RunSummary, SecondSite};
use crate::sys::progress::Progress;
use crate::Result;
use std::path::PathBuf;

/// Simulate a run.
#[derive(Debug, Clone)]
pub struct SimulateJob {
    pub ctx: Context,
    pub run: RunConfig,
    /// Channels recorded by a second recorder on its own clock.
    pub second_site: Option<SecondSite>,
    /// Output directory (created if missing).
    pub output: PathBuf,
    /// Replace existing files there.
    pub force: bool,
}

pub fn run(job: &SimulateJob) -> Result<RunSummary> {
    let total_ms = (job.run.duration_s * 1e3).floor().max(0.0) as u64 * job.run.blocks.len() as u64;
    let progress = Progress::items("simulate ms", total_ms, job.ctx.quiet);
    let summary = simulate::write_run_two_site(&job.run, job.second_site.as_ref(), &job.output, job.force, &progress)?;
    progress.finish();
    Ok(summary)
}
