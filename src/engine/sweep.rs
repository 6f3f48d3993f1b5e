//! Window sweep: for each window, coincidences, accidentals, net counts, CAR, from one
//! profile pass per window position, and a recommended window by a documented criterion.

use super::count::{check_offsets, coincidence_row, pair_products, CountConfig, PairOutcome};
use super::delays::Delays;
use super::driver::{self, BlockPass};
use super::kernels::WindowCount;
use super::{accidentals, rule};
use super::stream::{ChannelSummary, PairResult, PairTask};
use super::tables::{BlockSpan, SweepTable};
use crate::{Channel, ChannelTags, Error, Result};

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

/// Where each swept window's off-peak windows sit.
#[derive(Debug, Clone, PartialEq)]
pub enum OffPeak {
    /// Each window w at its own default offsets, [`accidentals::default_offsets_ps`]`(w)`:
    /// ±(max(2 µs, 2W) + k·W), k = 0…4, W = 2⌊w/2⌋+1. A row then equals `count` at that
    /// window, and its K = 10 off-peak windows tile a stretch of background side by side
    /// as the count's do (the default).
    PerWindow,
    /// The same offsets for every row (given by the user; empty = no measured accidentals).
    Fixed(Vec<i64>),
}

impl OffPeak {
    /// The offsets a row of window `window_ps` uses.
    pub fn offsets_ps(&self, window_ps: u64) -> Vec<i64> {
        match self {
            OffPeak::PerWindow => accidentals::default_offsets_ps(window_ps),
            OffPeak::Fixed(v) => v.clone(),
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

/// Sweep every pair of a block (whole-file path). `base.window_ps` and `base.offsets_ps`
/// are ignored: `offpeak` places each row's off-peak windows.
pub fn sweep_block(
    tags: &[ChannelTags<'_>],
    base: &CountConfig,
    windows_ps: &[u64],
    offpeak: &OffPeak,
    criterion: Criterion,
) -> Result<Vec<SweepTable>> {
    let pass = SweepPass { base, windows_ps: windows_ps.to_vec(), offpeak, criterion };
    Ok(driver::whole("sweep", tags, &pass)?.tables)
}

/// Sweep from chunks in time order (bounded memory); equal to [`sweep_block`].
pub fn sweep_stream<'a, I>(
    chunks: I,
    base: &CountConfig,
    windows_ps: &[u64],
    offpeak: &OffPeak,
    criterion: Criterion,
) -> Result<(BlockSpan, Vec<ChannelSummary>, Vec<SweepTable>)>
where
    I: Iterator<Item = Result<Vec<ChannelTags<'a>>>>,
{
    let pass = SweepPass { base, windows_ps: windows_ps.to_vec(), offpeak, criterion };
    let out = driver::streamed("sweep", chunks, &pass)?;
    Ok((out.span.expect("a stream has events"), out.channels, out.tables))
}

/// A sweep's settings as one pass: the pairs, delays and slice of `base`, the windows
/// (sorted and deduplicated when checked), where their off-peak windows sit and the criterion.
#[derive(Debug, Clone)]
pub struct SweepPass<'a> {
    pub base: &'a CountConfig,
    pub windows_ps: Vec<u64>,
    pub offpeak: &'a OffPeak,
    pub criterion: Criterion,
}

impl BlockPass for SweepPass<'_> {
    type Tables = Vec<SweepTable>;
    fn task(&self) -> Result<PairTask> {
        Ok(sweep_task(&check_windows(&self.windows_ps, self.offpeak)?, self.offpeak))
    }
    fn pairs(&self) -> &[(Channel, Channel)] {
        &self.base.pairs
    }
    fn delays(&self) -> &Delays {
        &self.base.delays
    }
    fn slice_ps(&self) -> Option<u64> {
        Some(self.base.slice_ps)
    }
    fn assemble(&self, span: Option<BlockSpan>, channels: &[ChannelSummary], results: &[PairOutcome]) -> Vec<SweepTable> {
        let span = span.expect("a sweep needs events");
        let windows = check_windows(&self.windows_ps, self.offpeak).expect("checked by task()");
        results.iter().map(|r| sweep_table(r, channels, span, self.base, &windows, self.offpeak, self.criterion)).collect()
    }
}

fn check_windows(windows_ps: &[u64], offpeak: &OffPeak) -> Result<Vec<u64>> {
    let mut windows = windows_ps.to_vec();
    windows.sort_unstable();
    windows.dedup();
    if windows.is_empty() {
        return Err(Error::Usage("sweep: no windows given".into()));
    }
    for &w in &windows {
        rule::check_window(w, "sweep window")?;
        check_offsets(&offpeak.offsets_ps(w), w)?;
    }
    Ok(windows)
}

/// Fixed offsets: one profile per centre (peak first), read at every half-width. Per-window
/// offsets: the peak's profile, then one count pass per window at that window's own
/// offsets (side by side, so each pass costs about two windows' work).
fn sweep_task(windows: &[u64], offpeak: &OffPeak) -> PairTask {
    let max_half_ps = rule::half_width_ps(*windows.last().unwrap_or(&0));
    match offpeak {
        OffPeak::Fixed(offsets_ps) => {
            let mut centres_ps = vec![0];
            centres_ps.extend_from_slice(offsets_ps);
            PairTask::Profile { centres_ps, max_half_ps }
        }
        OffPeak::PerWindow => {
            let mut tasks = vec![PairTask::Profile { centres_ps: vec![0], max_half_ps }];
            tasks.extend(
                windows.iter().map(|&w| PairTask::Count { centres_ps: offpeak.offsets_ps(w), half_ps: rule::half_width_ps(w) }),
            );
            PairTask::Several(tasks)
        }
    }
}

fn sweep_table(
    ((ca, cb), delta, result): &PairOutcome,
    channels: &[ChannelSummary],
    span: BlockSpan,
    base: &CountConfig,
    windows: &[u64],
    offpeak: &OffPeak,
    criterion: Criterion,
) -> SweepTable {
    let products = pair_products(channels, *ca, *cb, span, base.slice_ps);
    let row = |w: u64, peak: &Cumulative, off_counts: &[u64]| {
        coincidence_row((*ca, *cb), *delta, w, peak.at(rule::half_width_ps(w) as usize), off_counts, &offpeak.offsets_ps(w), &products)
    };
    let rows: Vec<_> = match result {
        PairResult::Profile(profiles) => {
            let peak = Cumulative::new(&profiles[0]);
            let offs: Vec<Cumulative> = profiles[1..].iter().map(|p| Cumulative::new(p)).collect();
            windows
                .iter()
                .map(|&w| {
                    let h = rule::half_width_ps(w) as usize;
                    let off_counts: Vec<u64> = offs.iter().map(|c| c.at(h).pairs).collect();
                    row(w, &peak, &off_counts)
                })
                .collect()
        }
        PairResult::Several(parts) => {
            let [PairResult::Profile(peak), counts @ ..] = &parts[..] else { unreachable!("sweep task: peak profile first") };
            let peak = Cumulative::new(&peak[0]);
            windows
                .iter()
                .zip(counts)
                .map(|(&w, c)| {
                    let PairResult::Count(c) = c else { unreachable!("sweep task: one count per window") };
                    let off_counts: Vec<u64> = c.iter().map(|x| x.pairs).collect();
                    row(w, &peak, &off_counts)
                })
                .collect()
        }
        _ => unreachable!("sweep task gives profiles"),
    };
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
