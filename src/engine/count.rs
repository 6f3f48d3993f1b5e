//! Counting at one window: singles per channel and, per pair, coincidences, heralded
//! counts, both accidental estimates, net counts and CAR.

use super::accidentals::{self, SliceProducts};
use super::delays::Delays;
use super::driver::{self, BlockPass};
use super::kernels::WindowCount;
use super::rule;
use super::stream::{ChannelSummary, PairResult, PairTask};
use super::tables::{BlockSpan, BlockTables, CoincidenceRow, Estimate, SinglesRow};
use crate::{Channel, ChannelTags, Error, Result};

/// What to count in a block.
#[derive(Debug, Clone)]
pub struct CountConfig {
    /// Channel pairs (A, B); empty = every pair of channels present, A < B.
    pub pairs: Vec<(Channel, Channel)>,
    pub delays: Delays,
    pub window_ps: u64,
    /// Off-peak offsets (ps from the peak) for the measured accidentals.
    pub offsets_ps: Vec<i64>,
    /// Slice length for the analytic accidentals, ps.
    pub slice_ps: u64,
}

/// Default slice for the analytic accidentals: 100 ms (rates drift on seconds).
pub const DEFAULT_SLICE_PS: u64 = 100_000_000_000;

/// From the earliest to the latest tag of any channel; None when every channel is empty.
pub fn block_span(tags: &[ChannelTags<'_>]) -> Option<BlockSpan> {
    let start = tags.iter().filter_map(|t| t.times_ps.first()).min()?;
    let end = tags.iter().filter_map(|t| t.times_ps.last()).max()?;
    Some(BlockSpan { start_ps: *start, end_ps: end + 1 })
}

/// The tags of channel `ch`, or an error listing the channels there are.
pub fn channel<'a>(tags: &'a [ChannelTags<'_>], ch: Channel) -> Result<&'a [u64]> {
    tags.iter().find(|t| t.channel == ch).map(|t| &t.times_ps[..]).ok_or_else(|| {
        let have: Vec<String> = tags.iter().map(|t| t.channel.to_string()).collect();
        Error::Usage(format!("channel {ch} is not in the inputs (they hold channels {})", have.join(", ")))
    })
}

/// The pairs to use: the configured ones, or all A < B of the channels present.
pub fn resolve_pairs(tags: &[ChannelTags<'_>], pairs: &[(Channel, Channel)]) -> Result<Vec<(Channel, Channel)>> {
    if !pairs.is_empty() {
        for &(a, b) in pairs {
            if a == b {
                return Err(Error::Usage(format!("pair {a}:{b}: a channel cannot be paired with itself")));
            }
            channel(tags, a)?;
            channel(tags, b)?;
        }
        return Ok(pairs.to_vec());
    }
    let mut chans: Vec<Channel> = tags.iter().map(|t| t.channel).collect();
    chans.sort_unstable();
    Ok(chans.iter().enumerate().flat_map(|(i, &a)| chans[i + 1..].iter().map(move |&b| (a, b))).collect())
}

/// Validate offsets: each must be a real shift (non-zero, within limits).
pub fn check_offsets(offsets_ps: &[i64], window_ps: u64) -> Result<()> {
    for &o in offsets_ps {
        rule::check_shift(o, "accidental offset")?;
        if o.unsigned_abs() <= window_ps {
            return Err(Error::Usage(format!(
                "accidental offset {o} ps lies within one window ({window_ps} ps) of the peak; use offsets far from it"
            )));
        }
    }
    Ok(())
}

/// Count one block (whole-file path).
pub fn count_block(label: &str, tags: &[ChannelTags<'_>], cfg: &CountConfig) -> Result<BlockTables> {
    Ok(driver::whole(label, tags, cfg)?.block(label, &cfg.delays, |b, rows| fill(b, cfg, rows)))
}

/// Count one block from chunks in time order (bounded-memory path); equal to
/// [`count_block`] on the same events.
pub fn count_stream<'a, I>(label: &str, chunks: I, cfg: &CountConfig) -> Result<BlockTables>
where
    I: Iterator<Item = Result<Vec<ChannelTags<'a>>>>,
{
    Ok(driver::streamed(label, chunks, cfg)?.block(label, &cfg.delays, |b, rows| fill(b, cfg, rows)))
}

/// A counted block's own part: its window and coincidence rows.
pub fn fill(b: &mut BlockTables, cfg: &CountConfig, rows: Vec<CoincidenceRow>) {
    b.window_ps = Some(cfg.window_ps);
    b.coincidences = rows;
}

/// A count is the peak window and each off-peak window of every pair.
impl BlockPass for CountConfig {
    type Tables = Vec<CoincidenceRow>;
    fn task(&self) -> Result<PairTask> {
        check_count(self)?;
        Ok(count_task(self))
    }
    fn pairs(&self) -> &[(Channel, Channel)] {
        &self.pairs
    }
    fn delays(&self) -> &Delays {
        &self.delays
    }
    fn slice_ps(&self) -> Option<u64> {
        Some(self.slice_ps)
    }
    fn assemble(&self, span: Option<BlockSpan>, channels: &[ChannelSummary], results: &[PairOutcome]) -> Vec<CoincidenceRow> {
        let span = span.expect("a count needs events");
        results
            .iter()
            .map(|((a, b), delta, r)| {
                let PairResult::Count(v) = r else { unreachable!("count task gives counts") };
                let off: Vec<u64> = v[1..].iter().map(|c| c.pairs).collect();
                let products = pair_products(channels, *a, *b, span, self.slice_ps);
                coincidence_row((*a, *b), *delta, self.window_ps, v[0], &off, &self.offsets_ps, &products)
            })
            .collect()
    }
}

/// A pair, its δ and what its task accumulated.
pub type PairOutcome = ((Channel, Channel), i64, PairResult);

fn check_count(cfg: &CountConfig) -> Result<()> {
    rule::check_window(cfg.window_ps, "coincidence window")?;
    check_offsets(&cfg.offsets_ps, cfg.window_ps)
}

/// The peak window first, then each off-peak offset.
fn count_task(cfg: &CountConfig) -> PairTask {
    let mut centres_ps = vec![0];
    centres_ps.extend_from_slice(&cfg.offsets_ps);
    PairTask::Count { centres_ps, half_ps: rule::half_width_ps(cfg.window_ps) }
}

/// Singles rows from channel summaries.
pub fn singles_rows(channels: &[ChannelSummary], span: BlockSpan) -> Vec<SinglesRow> {
    let live_ps = span.duration_ps();
    channels
        .iter()
        .map(|c| SinglesRow {
            channel: c.channel,
            name: c.name.clone(),
            events: c.events,
            first_ps: c.first_ps.unwrap_or(0),
            last_ps: c.last_ps.unwrap_or(0),
            live_time_ps: live_ps,
            rate_hz: crate::tags::rate_hz(c.events, live_ps).unwrap_or(f64::NAN),
        })
        .collect()
}

/// Analytic-accidental products of a pair from its channels' slice counts.
pub fn pair_products(channels: &[ChannelSummary], a: Channel, b: Channel, span: BlockSpan, slice_ps: u64) -> SliceProducts {
    let counts = |c: Channel| channels.iter().find(|s| s.channel == c).map(|s| s.slice_counts.clone()).unwrap_or_default();
    accidentals::products(&counts(a), &counts(b), span, slice_ps)
}

/// Assemble a row from the raw counts.
pub fn coincidence_row(
    (a, b): (Channel, Channel),
    rel_delay_ps: i64,
    window_ps: u64,
    peak: WindowCount,
    offset_counts: &[u64],
    offsets_ps: &[i64],
    products: &SliceProducts,
) -> CoincidenceRow {
    let analytic = products.estimate(window_ps);
    let measured = accidentals::measured_estimate(offset_counts);
    let n = peak.pairs as f64;
    let net = Estimate { value: n - analytic.value, sigma: (n + analytic.sigma * analytic.sigma).sqrt() };
    let car = if analytic.value > 0.0 { n / analytic.value } else { f64::NAN };
    CoincidenceRow {
        a,
        b,
        rel_delay_ps,
        window_ps,
        coincidences: peak.pairs,
        heralded: peak.heralded,
        acc_analytic: analytic,
        acc_measured: measured,
        acc_offset_counts: offset_counts.to_vec(),
        acc_offsets_ps: offsets_ps.to_vec(),
        net,
        car,
        acc_agreement_sigma: accidentals::agreement_sigma(analytic, measured),
    }
}
