//! The inspect job, the file checker: per-channel statistics (events, first/last, span,
//! mean rate, smallest gap, out-of-order steps, duplicates) gathered in one bounded-memory
//! pass over lenient chunks, so order problems are counted instead of failing.

use super::inputs::BlockInputs;
use super::Context;
use crate::read::{InputFile, ReadOptions, TagSource};
use crate::sys::progress::Progress;
use crate::tags::{live_time_ps, rate_hz};
use crate::{Channel, Error, Result};
use serde::Serialize;
use std::collections::BTreeMap;

/// Inspect tag files.
#[derive(Debug, Clone)]
pub struct InspectJob {
    pub ctx: Context,
    /// The inputs and read options; the order check is always lenient here.
    pub inputs: BlockInputs,
}

/// Inspect the job's inputs; order problems are in the report ([`InspectReport::problems`]),
/// not an error.
pub fn run(job: &InspectJob) -> Result<InspectReport> {
    let inputs = BlockInputs { read: ReadOptions { lenient_order: true, ..job.inputs.read }, clock: None, ..job.inputs.clone() };
    let sources = inputs.open(job.ctx.quiet)?;
    let total: u64 = sources.iter().map(|s| s.event_count()).sum();
    let progress = Progress::items("inspect", total, job.ctx.quiet);
    let report = inspect(&sources, &progress)?;
    progress.finish();
    Ok(report)
}

/// Events per chunk while inspecting (bounded memory on any input size).
const CHUNK_EVENTS: usize = 1 << 20;

/// What `inspect` reports for one channel. Definitions (docs/formats.md):
/// first/last in file order; span = largest − smallest timestamp; rate = events / live time
/// of all the inputs inspected together ([`crate::tags::rate_hz`], the definition `count`
/// uses too); smallest gap = smallest positive step between consecutive tags.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelReport {
    pub channel: Channel,
    pub name: String,
    pub source: String,
    pub events: u64,
    pub first_ps: u64,
    pub last_ps: u64,
    pub min_ps: u64,
    pub max_ps: u64,
    pub span_ps: u64,
    pub rate_hz: Option<f64>,
    pub min_gap_ps: Option<u64>,
    pub out_of_order_steps: u64,
    pub duplicate_timestamps: u64,
}

/// Totals over all channels.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Totals {
    pub channels: u64,
    pub events: u64,
    pub min_ps: u64,
    pub max_ps: u64,
    pub span_ps: u64,
    /// From the earliest to the latest tag of any channel, + 1 ps ([`crate::tags::live_time_ps`]);
    /// `None` when no channel holds a tag.
    pub live_time_ps: Option<u64>,
    pub rate_hz: Option<f64>,
    pub out_of_order_steps: u64,
    pub duplicate_timestamps: u64,
}

/// The whole inspection.
#[derive(Debug, Clone)]
pub struct InspectReport {
    pub inputs: Vec<InputFile>,
    pub channels: Vec<ChannelReport>,
    pub totals: Totals,
    /// Remarks from the readers that are not problems (records of unknown kinds skipped).
    pub notes: Vec<String>,
}

impl InspectReport {
    /// One line per problem found (out-of-order steps); empty when the files are fine.
    pub fn problems(&self) -> Vec<String> {
        self.channels
            .iter()
            .filter(|c| c.out_of_order_steps > 0)
            .map(|c| format!("{}: channel {}: {} out-of-order steps (timestamps going backwards)", c.source, c.channel, c.out_of_order_steps))
            .collect()
    }
}

/// Streaming accumulator for one channel.
#[derive(Debug, Clone)]
struct Acc {
    report: ChannelReport,
    prev: Option<u64>,
}

impl Acc {
    fn new(channel: Channel, name: &str, source: &str) -> Self {
        let report = ChannelReport {
            channel,
            name: name.to_string(),
            source: source.to_string(),
            events: 0,
            first_ps: 0,
            last_ps: 0,
            min_ps: u64::MAX,
            max_ps: 0,
            span_ps: 0,
            rate_hz: None,
            min_gap_ps: None,
            out_of_order_steps: 0,
            duplicate_timestamps: 0,
        };
        Acc { report, prev: None }
    }

    fn feed(&mut self, times: &[u64]) {
        let r = &mut self.report;
        if r.events == 0 {
            if let Some(&t) = times.first() {
                r.first_ps = t;
            }
        }
        let mut min_gap = r.min_gap_ps.unwrap_or(u64::MAX);
        for &t in times {
            if let Some(p) = self.prev {
                match t.cmp(&p) {
                    std::cmp::Ordering::Less => r.out_of_order_steps += 1,
                    std::cmp::Ordering::Equal => r.duplicate_timestamps += 1,
                    std::cmp::Ordering::Greater => min_gap = min_gap.min(t - p),
                }
            }
            r.min_ps = r.min_ps.min(t);
            r.max_ps = r.max_ps.max(t);
            self.prev = Some(t);
        }
        r.min_gap_ps = (min_gap != u64::MAX).then_some(min_gap);
        r.events += times.len() as u64;
        if let Some(&t) = times.last() {
            r.last_ps = t;
        }
    }

    fn finish(mut self) -> ChannelReport {
        let r = &mut self.report;
        if r.events == 0 {
            r.min_ps = 0;
        }
        r.span_ps = r.max_ps - r.min_ps;
        self.report
    }
}

/// Inspect every source in one pass each (sources opened with `lenient_order`).
pub fn inspect(sources: &[Box<dyn TagSource>], progress: &Progress) -> Result<InspectReport> {
    let mut accs: BTreeMap<Channel, Acc> = BTreeMap::new();
    let mut notes = Vec::new();
    for s in sources {
        let source = s.file().path.display().to_string();
        for chunk in s.chunks(CHUNK_EVENTS)? {
            for c in chunk? {
                let acc = accs.entry(c.channel).or_insert_with(|| Acc::new(c.channel, &c.name, &source));
                if acc.report.source != source {
                    return Err(Error::Usage(format!("channel {} appears twice: in {} and in {source}", c.channel, acc.report.source)));
                }
                acc.feed(&c.times_ps);
                progress.inc(c.len() as u64);
            }
        }
        s.check_unchanged()?;
        notes.extend(s.notes());
    }
    let mut channels: Vec<ChannelReport> = accs.into_values().map(Acc::finish).collect();
    let totals = totals(&channels);
    // One live time for every channel: the span of all inputs together, as `count` takes it.
    for c in &mut channels {
        c.rate_hz = totals.live_time_ps.and_then(|t| rate_hz(c.events, t));
    }
    Ok(InspectReport { inputs: sources.iter().map(|s| s.file()).collect(), channels, totals, notes })
}

fn totals(channels: &[ChannelReport]) -> Totals {
    let busy: Vec<&ChannelReport> = channels.iter().filter(|c| c.events > 0).collect();
    let min_ps = busy.iter().map(|c| c.min_ps).min().unwrap_or(0);
    let max_ps = busy.iter().map(|c| c.max_ps).max().unwrap_or(0);
    let events = channels.iter().map(|c| c.events).sum();
    let live_time_ps = (!busy.is_empty()).then(|| live_time_ps(min_ps, max_ps));
    Totals {
        channels: channels.len() as u64,
        events,
        min_ps,
        max_ps,
        span_ps: max_ps - min_ps,
        live_time_ps,
        rate_hz: live_time_ps.and_then(|t| rate_hz(events, t)),
        out_of_order_steps: channels.iter().map(|c| c.out_of_order_steps).sum(),
        duplicate_timestamps: channels.iter().map(|c| c.duplicate_timestamps).sum(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_steps_across_feeds() {
        let mut a = Acc::new(1, "", "f");
        a.feed(&[10, 20, 20]);
        a.feed(&[15, 40]); // 20 → 15 is out of order across the chunk border
        let r = a.finish();
        assert_eq!((r.events, r.first_ps, r.last_ps, r.min_ps, r.max_ps), (5, 10, 40, 10, 40));
        assert_eq!((r.out_of_order_steps, r.duplicate_timestamps, r.min_gap_ps), (1, 1, Some(10)));
        // The rate is set by `inspect` over all channels together; alone, this channel's
        // 5 events over a live time of 40 − 10 + 1 = 31 ps (README, "Rates").
        let rate = rate_hz(r.events, live_time_ps(r.min_ps, r.max_ps)).unwrap();
        assert!((rate - 5.0 / 31e-12).abs() <= 1e-15 * rate, "{rate}");
    }
}
