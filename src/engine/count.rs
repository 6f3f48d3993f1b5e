//! Counting at one window: singles per channel and, per pair, coincidences, heralded
//! counts, both accidental estimates, net counts and CAR.

use super::accidentals::{self, SliceProducts};
use super::parallel::{self, Disorder, Unchecked};
use super::stream::{ChannelSummary, PairResult, PairTask, Streamer};
use super::delays::Delays;
use super::kernels::WindowCount;
use super::tables::{BlockSpan, BlockTables, CoincidenceRow, Estimate, SinglesRow};
use super::rule;
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

/// Singles of every channel over the block span, sorted by channel.
pub fn singles(tags: &[ChannelTags<'_>], span: BlockSpan) -> Vec<SinglesRow> {
    singles_rows(&summaries(tags, span, span.duration_ps().max(1)), span)
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
    check_count(cfg)?;
    let pairs = resolve_pairs(tags, &cfg.pairs)?;
    let span = block_span(tags).ok_or_else(|| Error::Usage(format!("block {label}: every channel is empty")))?;
    let results = run_pairs(tags, &pairs, &cfg.delays, &count_task(cfg))?;
    Ok(assemble_count(label, span, &summaries(tags, span, cfg.slice_ps), &results, cfg))
}

/// Run `task` over every pair of whole-file tags. Channels whose order is not yet checked
/// ([`ChannelTags::order_checked`] false) are checked during the first pass that reads
/// them, and those in no pair on their own, all before anything else reads them; a
/// channel that goes backwards gives [`Error::Unordered`].
pub fn run_pairs(tags: &[ChannelTags<'_>], pairs: &[(Channel, Channel)], delays: &Delays, task: &PairTask) -> Result<Vec<PairOutcome>> {
    let mut checked: std::collections::BTreeMap<Channel, bool> = tags.iter().map(|t| (t.channel, t.order_checked)).collect();
    let mut results = Vec::with_capacity(pairs.len());
    for &(ca, cb) in pairs {
        let delta = delays.relative(ca, cb);
        rule::check_shift(delta, "relative delay")?;
        let unchecked = Unchecked { a: !checked.get(&ca).copied().unwrap_or(true), b: !checked.get(&cb).copied().unwrap_or(true) };
        let r = task.run_whole_checked(channel(tags, ca)?, channel(tags, cb)?, delta, unchecked).map_err(|d| Error::Unordered {
            channel: match d {
                Disorder::A => ca,
                Disorder::B => cb,
            },
        })?;
        checked.insert(ca, true);
        checked.insert(cb, true);
        results.push(((ca, cb), delta, r));
    }
    for t in tags.iter().filter(|t| !checked.get(&t.channel).copied().unwrap_or(true)) {
        if !parallel::ascending(&t.times_ps) {
            return Err(Error::Unordered { channel: t.channel });
        }
    }
    Ok(results)
}

/// Count one block from chunks in time order (bounded-memory path); equal to
/// [`count_block`] on the same events.
pub fn count_stream<'a, I>(label: &str, chunks: I, cfg: &CountConfig) -> Result<BlockTables>
where
    I: Iterator<Item = Result<Vec<ChannelTags<'a>>>>,
{
    check_count(cfg)?;
    let mut s = Streamer::new(count_task(cfg), cfg.pairs.clone(), cfg.delays.clone(), cfg.slice_ps);
    for chunk in chunks {
        s.push(&chunk?)?;
    }
    let (span, channels, results) = finish_stream(s, label, &cfg.pairs)?;
    Ok(assemble_count(label, span, &channels, &results, cfg))
}

/// Finish a stream: its span, channel summaries and pair results in the configured order.
pub fn finish_stream(s: Streamer, label: &str, wanted: &[(Channel, Channel)]) -> Result<(BlockSpan, Vec<ChannelSummary>, Vec<PairOutcome>)> {
    let (start, channels, mut results) = s.finish();
    let end = channels.iter().filter_map(|c| c.last_ps).max();
    let (Some(start_ps), Some(last)) = (start, end) else {
        return Err(Error::Usage(format!("block {label}: every channel is empty")));
    };
    for &(a, b) in wanted {
        for c in [a, b] {
            if !channels.iter().any(|s| s.channel == c) {
                return Err(Error::Usage(format!("channel {c} is not in the inputs")));
            }
        }
    }
    if !wanted.is_empty() {
        results.sort_by_key(|r| wanted.iter().position(|p| *p == r.0));
    }
    Ok((BlockSpan { start_ps, end_ps: last + 1 }, channels, results))
}

/// A pair, its δ and what its task accumulated.
pub type PairOutcome = ((Channel, Channel), i64, PairResult);

fn check_count(cfg: &CountConfig) -> Result<()> {
    rule::check_window(cfg.window_ps, "--window-ps")?;
    check_offsets(&cfg.offsets_ps, cfg.window_ps)
}

/// The peak window first, then each off-peak offset.
fn count_task(cfg: &CountConfig) -> PairTask {
    let mut centres_ps = vec![0];
    centres_ps.extend_from_slice(&cfg.offsets_ps);
    PairTask::Count { centres_ps, half_ps: rule::half_width_ps(cfg.window_ps) }
}

/// Channel summaries of whole-file tags, sorted by channel.
pub fn summaries(tags: &[ChannelTags<'_>], span: BlockSpan, slice_ps: u64) -> Vec<ChannelSummary> {
    let mut v: Vec<ChannelSummary> = tags
        .iter()
        .map(|t| ChannelSummary {
            channel: t.channel,
            name: t.name.clone(),
            events: t.len() as u64,
            first_ps: t.times_ps.first().copied(),
            last_ps: t.times_ps.last().copied(),
            slice_counts: accidentals::slice_counts(&t.times_ps, span, slice_ps),
        })
        .collect();
    v.sort_by_key(|c| c.channel);
    v
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
            rate_hz: c.events as f64 / (live_ps as f64 * 1e-12),
        })
        .collect()
}

/// Analytic-accidental products of a pair from its channels' slice counts.
pub fn pair_products(channels: &[ChannelSummary], a: Channel, b: Channel, span: BlockSpan, slice_ps: u64) -> SliceProducts {
    let counts = |c: Channel| channels.iter().find(|s| s.channel == c).map(|s| s.slice_counts.clone()).unwrap_or_default();
    accidentals::products(&counts(a), &counts(b), span, slice_ps)
}

fn assemble_count(label: &str, span: BlockSpan, channels: &[ChannelSummary], results: &[PairOutcome], cfg: &CountConfig) -> BlockTables {
    let rows = results
        .iter()
        .map(|((a, b), delta, r)| {
            let PairResult::Count(v) = r else { unreachable!("count task gives counts") };
            let off: Vec<u64> = v[1..].iter().map(|c| c.pairs).collect();
            let products = pair_products(channels, *a, *b, span, cfg.slice_ps);
            coincidence_row((*a, *b), *delta, cfg.window_ps, v[0], &off, &cfg.offsets_ps, &products)
        })
        .collect();
    BlockTables {
        label: label.to_string(),
        span: Some(span),
        singles: singles_rows(channels, span),
        delays_ps: channels.iter().map(|c| (c.channel, cfg.delays.get(c.channel))).collect(),
        window_ps: Some(cfg.window_ps),
        coincidences: rows,
        scans: vec![],
        sweeps: vec![],
    }
}

/// Every present channel's delay as used.
pub fn delays_used(tags: &[ChannelTags<'_>], delays: &Delays) -> Vec<(Channel, i64)> {
    let mut v: Vec<(Channel, i64)> = tags.iter().map(|t| (t.channel, delays.get(t.channel))).collect();
    v.sort_unstable();
    v
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
