//! Counting at one window: singles per channel and, per pair, coincidences, heralded
//! counts, both accidental estimates, net counts and CAR.

use super::accidentals::{self, SliceProducts};
use super::delays::Delays;
use super::kernels::WindowCount;
use super::tables::{BlockSpan, BlockTables, CoincidenceRow, Estimate, SinglesRow};
use super::{parallel, rule};
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

/// Singles of every channel over the block span.
pub fn singles(tags: &[ChannelTags<'_>], span: BlockSpan) -> Vec<SinglesRow> {
    let live_ps = span.duration_ps();
    tags.iter()
        .map(|t| SinglesRow {
            channel: t.channel,
            name: t.name.clone(),
            events: t.len() as u64,
            first_ps: t.times_ps.first().copied().unwrap_or(0),
            last_ps: t.times_ps.last().copied().unwrap_or(0),
            live_time_ps: live_ps,
            rate_hz: t.len() as f64 / (live_ps as f64 * 1e-12),
        })
        .collect()
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

/// Count one block.
pub fn count_block(label: &str, tags: &[ChannelTags<'_>], cfg: &CountConfig) -> Result<BlockTables> {
    rule::check_window(cfg.window_ps, "--window-ps")?;
    check_offsets(&cfg.offsets_ps, cfg.window_ps)?;
    let pairs = resolve_pairs(tags, &cfg.pairs)?;
    let span = block_span(tags).ok_or_else(|| Error::Usage(format!("block {label}: every channel is empty")))?;
    let mut rows = Vec::with_capacity(pairs.len());
    for &(ca, cb) in &pairs {
        let (a, b) = (channel(tags, ca)?, channel(tags, cb)?);
        let delta = cfg.delays.relative(ca, cb);
        rule::check_shift(delta, "relative delay")?;
        let half = rule::half_width_ps(cfg.window_ps);
        let peak = parallel::count_window(a, b, delta, half);
        let off: Vec<u64> = cfg.offsets_ps.iter().map(|&o| parallel::count_window(a, b, delta + o, half).pairs).collect();
        let products = accidentals::slice_products(a, b, delta, span, cfg.slice_ps);
        rows.push(coincidence_row((ca, cb), delta, cfg.window_ps, peak, &off, &cfg.offsets_ps, &products));
    }
    Ok(BlockTables {
        label: label.to_string(),
        span: Some(span),
        singles: singles(tags, span),
        delays_ps: delays_used(tags, &cfg.delays),
        window_ps: Some(cfg.window_ps),
        coincidences: rows,
        scans: vec![],
        sweeps: vec![],
    })
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
