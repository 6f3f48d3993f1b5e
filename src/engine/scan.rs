//! Delay scan: the histogram of Δ per pair, its peak (delay estimate with σ, FWHM, height,
//! background), and delays proposed for every channel relative to a reference.

use super::count::PairOutcome;
use super::delays::Delays;
use super::driver::{self, BlockPass};
use super::rule;
use super::stream::{ChannelSummary, PairResult, PairTask};
use super::tables::{BlockSpan, PeakFit, ScanResult};
use crate::{Channel, ChannelTags, Error, Result};

/// Histogram range and resolution.
#[derive(Debug, Clone)]
pub struct ScanConfig {
    pub pairs: Vec<(Channel, Channel)>,
    pub delays: Delays,
    /// Half-range of the histogram: Δ from −half_range_ps to +half_range_ps, ps.
    pub half_range_ps: u64,
    pub bin_ps: u64,
}

/// FWHM of a Gaussian in units of σ: 2√(2 ln 2).
pub const FWHM_PER_SIGMA: f64 = 2.354_820_045_030_949;

/// Scan every pair of a block (whole-file path).
pub fn scan_block(tags: &[ChannelTags<'_>], cfg: &ScanConfig) -> Result<Vec<ScanResult>> {
    Ok(driver::whole("scan", tags, cfg)?.tables)
}

/// Scan from chunks in time order (bounded memory); equal to [`scan_block`].
pub fn scan_stream<'a, I>(chunks: I, cfg: &ScanConfig) -> Result<(BlockSpan, Vec<ChannelSummary>, Vec<ScanResult>)>
where
    I: Iterator<Item = Result<Vec<ChannelTags<'a>>>>,
{
    let out = driver::streamed("scan", chunks, cfg)?;
    Ok((out.span.expect("a stream has events"), out.channels, out.tables))
}

/// A scan is one delay histogram per pair; an empty block gives empty histograms.
impl BlockPass for ScanConfig {
    type Tables = Vec<ScanResult>;
    fn task(&self) -> Result<PairTask> {
        check_scan(self)
    }
    fn pairs(&self) -> &[(Channel, Channel)] {
        &self.pairs
    }
    fn delays(&self) -> &Delays {
        &self.delays
    }
    fn slice_ps(&self) -> Option<u64> {
        None
    }
    fn needs_events(&self) -> bool {
        false
    }
    fn assemble(&self, _: Option<BlockSpan>, _: &[ChannelSummary], results: &[PairOutcome]) -> Vec<ScanResult> {
        results.iter().map(|r| scan_result(r, self)).collect()
    }
}

fn check_scan(cfg: &ScanConfig) -> Result<PairTask> {
    if cfg.half_range_ps == 0 || cfg.bin_ps == 0 {
        return Err(Error::Usage(format!("scan: half-range {} ps and bin {} ps must both be > 0", cfg.half_range_ps, cfg.bin_ps)));
    }
    if cfg.half_range_ps > rule::MAX_SPAN_PS {
        return Err(Error::setting("half_range_ps", cfg.half_range_ps, format!("exceeds the limit of {} ps", rule::MAX_SPAN_PS)));
    }
    let nbins = (2 * cfg.half_range_ps).div_ceil(cfg.bin_ps);
    if nbins > 50_000_000 {
        return Err(Error::setting("bin_ps", cfg.bin_ps, format!("{nbins} bins is too many; expected at most 50000000 (widen the bins or narrow the half-range)")));
    }
    Ok(PairTask::Histogram { half_range_ps: cfg.half_range_ps, bin_ps: cfg.bin_ps })
}

fn scan_result(((ca, cb), delta, r): &PairOutcome, cfg: &ScanConfig) -> ScanResult {
    let PairResult::Histogram(counts) = r else { unreachable!("histogram task gives a histogram") };
    let peak = fit_peak(counts, cfg.half_range_ps, cfg.bin_ps);
    ScanResult { a: *ca, b: *cb, rel_delay_ps: *delta, half_range_ps: cfg.half_range_ps, bin_ps: cfg.bin_ps, counts: counts.clone(), peak }
}

/// Centre of bin i's integer support: Δ from −half_range + i·bin to −half_range + (i+1)·bin − 1.
fn bin_centre(i: usize, half_range_ps: u64, bin_ps: u64) -> f64 {
    -(half_range_ps as f64) + (i as f64) * bin_ps as f64 + (bin_ps as f64 - 1.0) / 2.0
}

/// A peak's highest bin must stand this many Poisson σ of the background above it …
pub const PEAK_MIN_SIGMA: f64 = 5.0;
/// … and at least this many counts.
pub const PEAK_MIN_COUNTS: f64 = 10.0;

/// Find the coincidence peak.
///
/// Background: the median bin (robust while the peak fills under half the bins). Peak:
/// the highest bin, accepted when it stands ≥ [`PEAK_MIN_SIGMA`] σ (Poisson σ of the
/// background, √max(background, 1)) and ≥ [`PEAK_MIN_COUNTS`] counts above the
/// background. FWHM: linear interpolation of the half-height crossings. Delay: centroid of
/// background-subtracted bins within ±1.5 FWHM (at least ±2 bins) of the maximum; its σ is
/// max(FWHM/2.355, bin/√12)/√(net counts).
pub fn fit_peak(counts: &[u64], half_range_ps: u64, bin_ps: u64) -> Option<PeakFit> {
    if counts.len() < 3 {
        return None;
    }
    let mut sorted: Vec<u64> = counts.to_vec();
    sorted.sort_unstable();
    let background = sorted[sorted.len() / 2] as f64;
    let (imax, &cmax) = counts.iter().enumerate().max_by_key(|&(i, &c)| (c, std::cmp::Reverse(i)))?;
    let height = cmax as f64 - background;
    if height < PEAK_MIN_COUNTS || height < PEAK_MIN_SIGMA * background.max(1.0).sqrt() {
        return None;
    }
    let half = background + height / 2.0;
    let x = |i: usize| bin_centre(i, half_range_ps, bin_ps);
    let level = |i: usize| counts[i] as f64;
    let mut l = imax;
    while l > 0 && level(l - 1) > half {
        l -= 1;
    }
    let left = if l == 0 { x(0) } else { x(l - 1) + (half - level(l - 1)) / (level(l) - level(l - 1)) * bin_ps as f64 };
    let mut r = imax;
    while r + 1 < counts.len() && level(r + 1) > half {
        r += 1;
    }
    let right = if r + 1 == counts.len() { x(r) } else { x(r) + (level(r) - half) / (level(r) - level(r + 1)) * bin_ps as f64 };
    let fwhm_ps = (right - left).max(0.0);
    let reach = ((1.5 * fwhm_ps / bin_ps as f64).ceil() as usize).max(2);
    let (lo, hi) = (imax.saturating_sub(reach), (imax + reach).min(counts.len() - 1));
    let (mut sw, mut swx) = (0.0, 0.0);
    for i in lo..=hi {
        let w = level(i) - background;
        sw += w;
        swx += w * x(i);
    }
    if sw <= 0.0 {
        return None;
    }
    let width_sigma = (fwhm_ps / FWHM_PER_SIGMA).max(bin_ps as f64 / 12f64.sqrt());
    Some(PeakFit {
        delay_ps: swx / sw,
        delay_sigma_ps: width_sigma / sw.sqrt(),
        fwhm_ps,
        height,
        background,
        net_counts: sw,
    })
}

/// Propose a delay for every channel relative to `reference` (whose delay becomes 0).
///
/// Each pair with a peak ([`fit_peak`]'s criterion) links two channels: d_B − d_A =
/// (current δ) + (peak Δ). Starting from the reference, the link with the most net counts
/// to a channel not yet placed is taken first (a maximum spanning tree), so a channel
/// without a direct peak to the reference (the other output of the same analyzer) is
/// placed through one that has. `channels` are all the block's channels: each one no peak
/// reaches is returned in [`Delays::not_found`] with the reason, never with a delay.
pub fn propose_delays(scans: &[ScanResult], reference: Channel, channels: &[Channel]) -> Delays {
    let mut placed = std::collections::BTreeMap::from([(reference, 0i64)]);
    let mut obtained = std::collections::BTreeMap::from([(reference, "reference channel".to_string())]);
    loop {
        let mut best: Option<(f64, Channel, i64, &ScanResult)> = None;
        for s in scans {
            let Some(p) = s.peak else { continue };
            let rel = s.rel_delay_ps as f64 + p.delay_ps; // measured d_B − d_A
            let cand = match (placed.get(&s.a), placed.get(&s.b)) {
                (Some(&da), None) => Some((s.b, da as f64 + rel)),
                (None, Some(&db)) => Some((s.a, db as f64 - rel)),
                _ => None,
            };
            if let Some((ch, d)) = cand {
                if best.map_or(true, |(n, ..)| p.net_counts > n) {
                    best = Some((p.net_counts, ch, d.round() as i64, s));
                }
            }
        }
        let Some((net, ch, d, s)) = best else { break };
        placed.insert(ch, d);
        let p = s.peak.expect("chosen links have a peak");
        obtained.insert(ch, format!("scan: peak of pair {}:{} ({net:.0} net counts, σ {:.1} ps)", s.a, s.b, p.delay_sigma_ps));
    }
    let mut all: std::collections::BTreeSet<Channel> = channels.iter().copied().collect();
    all.extend(scans.iter().flat_map(|s| [s.a, s.b]));
    let not_found = all.into_iter().filter(|c| !placed.contains_key(c)).map(|c| (c, why_not_found(scans, c, reference))).collect();
    Delays { by_channel: placed, reference: Some(reference), obtained, not_found, file: None }
}

/// The peak criterion in words, for messages and the delays file.
pub fn peak_criterion(half_range_ps: u64) -> String {
    format!(
        "no peak within ±{half_range_ps} ps whose highest bin stands ≥ {PEAK_MIN_SIGMA} σ (Poisson σ of the median bin) and ≥ {PEAK_MIN_COUNTS} counts above the background"
    )
}

fn why_not_found(scans: &[ScanResult], c: Channel, reference: Channel) -> String {
    let mine: Vec<&ScanResult> = scans.iter().filter(|s| s.a == c || s.b == c).collect();
    let list = |v: &[&ScanResult]| v.iter().map(|s| format!("{}:{}", s.a, s.b)).collect::<Vec<_>>().join(", ");
    let with_peak: Vec<&ScanResult> = mine.iter().copied().filter(|s| s.peak.is_some()).collect();
    match (mine.first(), with_peak.is_empty()) {
        (None, _) => "in no scanned pair".into(),
        (Some(s), true) => format!("{} in pair(s) {}", peak_criterion(s.half_range_ps), list(&mine)),
        (Some(_), false) => format!(
            "no pair with the reference {reference}: its peaks (pair(s) {}) link it only to channels that no peak links to the reference",
            list(&with_peak)
        ),
    }
}
