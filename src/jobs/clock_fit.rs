//! The clock-fit job: the map from the second recorder's time to the first's, fitted from
//! the tags alone (docs/clocks.md); the clock file is written by the caller from the map.

use super::inputs::{open_block, DelaySources};
use crate::analysis::clock_fit::{CoarseResult, FitConfig};
use crate::engine::Delays;
use crate::read::{self, ReadOptions, TagSource};
use crate::tags::clock::ClockMap;
use crate::{Error, Result};

/// Fit the clock map of one block's inputs.
#[derive(Debug, Clone)]
pub struct ClockFitJob {
    /// Inputs holding both sites' channels.
    pub inputs: Vec<String>,
    pub layout: Option<String>,
    pub read: ReadOptions,
    /// Channels recorded on the second recorder's clock; all others are the first's.
    pub second_site: Vec<u32>,
    pub delays: DelaySources,
    /// Offsets searched: ± this many seconds, in (0, 100].
    pub offset_range_s: f64,
    /// Frequency offsets searched: ± this many ppm, in [0, 10⁴].
    pub ppm_range: f64,
}

/// What a clock fit gives.
#[derive(Debug, Clone)]
pub struct ClockFitOutcome {
    pub map: ClockMap,
    pub coarse: CoarseResult,
}

pub fn run(job: &ClockFitJob) -> Result<ClockFitOutcome> {
    let in_range = |v: f64, lo: f64, hi: f64| v.is_finite() && v >= lo && v <= hi;
    if !in_range(job.offset_range_s, 1e-9, 100.0) {
        return Err(Error::setting("offset_range_s", job.offset_range_s, "expected (0, 100] s"));
    }
    if !in_range(job.ppm_range, 0.0, 1e4) {
        return Err(Error::setting("ppm_range", job.ppm_range, "expected [0, 10⁴] ppm"));
    }
    let delays = job.delays.resolve(None)?;
    let cfg = FitConfig { offset_range_ps: (job.offset_range_s * 1e12) as u64, ppm_range: job.ppm_range, ..FitConfig::default() };
    let sources = open_block(&job.inputs, job.layout.as_deref(), job.read)?;
    let (map, coarse) = fit_sources(&sources, &job.second_site, &delays, &cfg)?;
    Ok(ClockFitOutcome { map, coarse })
}

/// Clock fit of one block's inputs: split the channels of `sources` into the two sites (`second_site` lists the
/// second's; all others are the first's), subtract nothing yet but carry each channel's
/// delay (0 where none is given), and fit.
pub fn fit_sources(
    sources: &[Box<dyn TagSource>],
    second_site: &[u32],
    delays: &Delays,
    cfg: &FitConfig,
) -> Result<(ClockMap, CoarseResult)> {
    let channels = read::all_channels(sources)?;
    if let Some(ch) = second_site.iter().find(|ch| !channels.iter().any(|c| c.channel == **ch)) {
        let known: Vec<String> = channels.iter().map(|c| c.channel.to_string()).collect();
        return Err(Error::Usage(format!("clock fit: second-site channel {ch} is not in the inputs (channels: {})", known.join(", "))));
    }
    let delay = |ch: u32| delays.by_channel.get(&ch).copied().unwrap_or(0);
    let part = |second: bool| {
        let v: Vec<(&[u64], i64)> = channels
            .iter()
            .filter(|c| second_site.contains(&c.channel) == second)
            .map(|c| (c.times_ps.as_ref(), delay(c.channel)))
            .collect();
        crate::analysis::clock_fit::SiteTags::merge(&v)
    };
    let (first, second) = (part(false), part(true));
    crate::analysis::clock_fit::fit_clock(&first, &second, second_site.to_vec(), cfg)
}
