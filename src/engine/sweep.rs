//! Window sweep: for each window, coincidences, accidentals, net counts, CAR, from one
//! profile pass per window position, and a recommended window by a documented criterion.

use super::count::{
    block_span, check_offsets, coincidence_row, finish_stream, pair_products, resolve_pairs, summaries, CountConfig,
    PairOutcome,
};
use super::kernels::WindowCount;
use super::rule;
use super::stream::{ChannelSummary, PairResult, PairTask, Streamer};
use super::tables::{BlockSpan, SweepTable};
use crate::{ChannelTags, Error, Result};

/// How the recommended window is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Criterion {
    /// The window with the largest net/σ_net (default); near-ties (within
    /// [`SIGNIFICANCE_TIE`]) go to the smallest window.
    MaxNetSignificance,
    /// The smallest window whose net count is ≥ `fraction` of the net count in the widest
    /// window swept (the peak's net counts).
    PeakFraction(f64),
}

impl Criterion {
    pub fn name(&self) -> String {
        match self {
            Criterion::MaxNetSignificance => "max-net-significance".into(),
            Criterion::PeakFraction(f) => format!("peak-fraction-{f}"),
        }
    }
}

/// Windows from `start` to `stop` (inclusive) in steps of `step`, ps.
pub fn window_range(start_ps: u64, stop_ps: u64, step_ps: u64) -> Result<Vec<u64>> {
    if step_ps == 0 || start_ps == 0 || stop_ps < start_ps {
        return Err(Error::Usage(format!(
            "window range {start_ps}..{stop_ps} step {step_ps} ps: need 0 < start ≤ stop and step > 0"
        )));
    }
    let n = (stop_ps - start_ps) / step_ps + 1;
    if n > 100_000 {
        return Err(Error::Usage(format!("window range gives {n} windows; at most 100000")));
    }
    Ok((0..n).map(|i| start_ps + i * step_ps).collect())
}

/// Sweep every pair of a block (whole-file path). `base.window_ps` is ignored.
pub fn sweep_block(tags: &[ChannelTags<'_>], base: &CountConfig, windows_ps: &[u64], criterion: Criterion) -> Result<Vec<SweepTable>> {
    let windows = check_windows(windows_ps, base)?;
    let span = block_span(tags).ok_or_else(|| Error::Usage("sweep: every channel is empty".into()))?;
    let pairs = resolve_pairs(tags, &base.pairs)?;
    let results = super::count::run_pairs(tags, &pairs, &base.delays, &profile_task(&windows, base))?;
    let channels = summaries(tags, span, base.slice_ps);
    Ok(results.iter().map(|r| sweep_table(r, &channels, span, base, &windows, criterion)).collect())
}

/// Sweep from chunks in time order (bounded memory); equal to [`sweep_block`].
pub fn sweep_stream<'a, I>(chunks: I, base: &CountConfig, windows_ps: &[u64], criterion: Criterion) -> Result<(BlockSpan, Vec<ChannelSummary>, Vec<SweepTable>)>
where
    I: Iterator<Item = Result<Vec<ChannelTags<'a>>>>,
{
    let windows = check_windows(windows_ps, base)?;
    let mut s = Streamer::new(profile_task(&windows, base), base.pairs.clone(), base.delays.clone(), base.slice_ps);
    for chunk in chunks {
        s.push(&chunk?)?;
    }
    let (span, channels, results) = finish_stream(s, "sweep", &base.pairs)?;
    let tables = results.iter().map(|r| sweep_table(r, &channels, span, base, &windows, criterion)).collect();
    Ok((span, channels, tables))
}

fn check_windows(windows_ps: &[u64], base: &CountConfig) -> Result<Vec<u64>> {
    let mut windows = windows_ps.to_vec();
    windows.sort_unstable();
    windows.dedup();
    let Some(&w_max) = windows.last() else {
        return Err(Error::Usage("sweep: no windows given".into()));
    };
    for &w in &windows {
        rule::check_window(w, "sweep window")?;
    }
    check_offsets(&base.offsets_ps, w_max)?;
    Ok(windows)
}

fn profile_task(windows: &[u64], base: &CountConfig) -> PairTask {
    let mut centres_ps = vec![0];
    centres_ps.extend_from_slice(&base.offsets_ps);
    PairTask::Profile { centres_ps, max_half_ps: rule::half_width_ps(*windows.last().unwrap_or(&0)) }
}

fn sweep_table(
    ((ca, cb), delta, result): &PairOutcome,
    channels: &[ChannelSummary],
    span: BlockSpan,
    base: &CountConfig,
    windows: &[u64],
    criterion: Criterion,
) -> SweepTable {
    let PairResult::Profile(profiles) = result else { unreachable!("profile task gives profiles") };
    let peak = Cumulative::new(&profiles[0]);
    let offs: Vec<Cumulative> = profiles[1..].iter().map(|p| Cumulative::new(p)).collect();
    let products = pair_products(channels, *ca, *cb, span, base.slice_ps);
    let rows: Vec<_> = windows
        .iter()
        .map(|&w| {
            let h = rule::half_width_ps(w) as usize;
            let off_counts: Vec<u64> = offs.iter().map(|c| c.at(h).pairs).collect();
            coincidence_row((*ca, *cb), *delta, w, peak.at(h), &off_counts, &base.offsets_ps, &products)
        })
        .collect();
    let recommended_window_ps = recommend(&rows, criterion);
    SweepTable { a: *ca, b: *cb, rel_delay_ps: *delta, rows, recommended_window_ps, criterion: criterion.name() }
}

/// Prefix sums of a profile: counts for every half-width at once.
struct Cumulative {
    pairs: Vec<u64>,
    heralded: Vec<u64>,
}

impl Cumulative {
    fn new(profile: &[u64]) -> Self {
        let p = profile.len() / 2;
        let prefix = |v: &[u64]| {
            v.iter()
                .scan(0u64, |s, &x| {
                    *s += x;
                    Some(*s)
                })
                .collect::<Vec<u64>>()
        };
        Cumulative { pairs: prefix(&profile[..p]), heralded: prefix(&profile[p..]) }
    }
    fn at(&self, half: usize) -> WindowCount {
        WindowCount { pairs: self.pairs[half], heralded: self.heralded[half] }
    }
}

/// Differences of net/σ_net below this are not meaningful; among windows that close to
/// the best, the smallest is recommended.
pub const SIGNIFICANCE_TIE: f64 = 0.1;

/// Apply the criterion to the swept rows (ordered by window).
pub fn recommend(rows: &[super::tables::CoincidenceRow], criterion: Criterion) -> u64 {
    match criterion {
        Criterion::MaxNetSignificance => {
            let z = |r: &super::tables::CoincidenceRow| if r.net.sigma > 0.0 { r.net.value / r.net.sigma } else { f64::NEG_INFINITY };
            let best = rows.iter().map(z).fold(f64::NEG_INFINITY, f64::max);
            rows.iter().find(|r| z(r) >= best - SIGNIFICANCE_TIE).map(|r| r.window_ps).unwrap_or(0)
        }
        Criterion::PeakFraction(f) => {
            let total = rows.last().map(|r| r.net.value).unwrap_or(0.0);
            rows.iter().find(|r| r.net.value >= f * total).map(|r| r.window_ps).unwrap_or(0)
        }
    }
}
