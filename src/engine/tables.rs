//! Plain result tables the engine hands to analysis and output. No formatting here.

use crate::Channel;

/// Per-channel singles of one block.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SinglesRow {
    pub channel: Channel,
    pub name: String,
    pub events: u64,
    pub first_ps: u64,
    pub last_ps: u64,
    /// Live time: the block's acquisition span (see [`BlockSpan`]) in ps.
    pub live_time_ps: u64,
    pub rate_hz: f64,
}

/// The block's acquisition interval: from the earliest to the latest tag of any channel.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub struct BlockSpan {
    pub start_ps: u64,
    /// Exclusive end: latest tag + 1 ps.
    pub end_ps: u64,
}

impl BlockSpan {
    pub fn duration_ps(&self) -> u64 {
        self.end_ps - self.start_ps
    }
}

/// An accidental-coincidence estimate with its one-standard-deviation uncertainty.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Estimate {
    pub value: f64,
    pub sigma: f64,
}

/// Coincidences of one channel pair at one window.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CoincidenceRow {
    pub a: Channel,
    pub b: Channel,
    /// d_B − d_A in ps.
    pub rel_delay_ps: i64,
    pub window_ps: u64,
    /// Pair count: every (a, b) with 2·|Δ| ≤ w counts once.
    pub coincidences: u64,
    /// A events with at least one partner (heralded count).
    pub heralded: u64,
    /// Σ_k n_A,k n_B,k (2⌊w/2⌋+1) / T_k over time slices.
    pub acc_analytic: Estimate,
    /// Mean count in K off-peak windows of the same width.
    pub acc_measured: Estimate,
    /// Raw counts in each off-peak window (offsets in `acc_offsets_ps`).
    pub acc_offset_counts: Vec<u64>,
    pub acc_offsets_ps: Vec<i64>,
    /// coincidences − acc_analytic, σ from Poisson on the raw count and the estimate's σ.
    pub net: Estimate,
    /// coincidences / acc_analytic (NaN when the estimate is 0).
    pub car: f64,
    /// (acc_analytic − acc_measured) / sqrt(σ_a² + σ_m²): agreement of the two estimates.
    pub acc_agreement_sigma: f64,
}

/// The fitted peak of a delay histogram.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct PeakFit {
    /// Δ at the peak centre (centroid of background-subtracted bins near the maximum), ps.
    pub delay_ps: f64,
    pub delay_sigma_ps: f64,
    pub fwhm_ps: f64,
    /// Peak height above background, counts per bin.
    pub height: f64,
    /// Flat background level, counts per bin (median of the outer bins).
    pub background: f64,
    /// Background-subtracted counts in the peak region.
    pub net_counts: f64,
}

/// Histogram of Δ = (b − d_B) − (a − d_A) for one pair.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ScanResult {
    pub a: Channel,
    pub b: Channel,
    pub rel_delay_ps: i64,
    /// Half-range: bin i covers [−half_range + i·bin, −half_range + (i+1)·bin) ps.
    pub half_range_ps: u64,
    pub bin_ps: u64,
    pub counts: Vec<u64>,
    pub peak: Option<PeakFit>,
}

impl ScanResult {
    /// Bin edges in ps, `counts.len() + 1` values.
    pub fn bin_edges_ps(&self) -> Vec<i64> {
        (0..=self.counts.len() as i64).map(|i| -(self.half_range_ps as i64) + i * self.bin_ps as i64).collect()
    }
}

/// One pair's window sweep.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SweepTable {
    pub a: Channel,
    pub b: Channel,
    pub rel_delay_ps: i64,
    pub rows: Vec<CoincidenceRow>,
    pub recommended_window_ps: u64,
    /// "max-net-significance" or "peak-fraction-0.99".
    pub criterion: String,
}

/// Everything computed for one block (one setting pair or one input set).
#[derive(Debug, Clone, PartialEq, Default, serde::Serialize)]
pub struct BlockTables {
    pub label: String,
    pub span: Option<BlockSpan>,
    pub singles: Vec<SinglesRow>,
    /// Delay per channel in ps, as used.
    pub delays_ps: Vec<(Channel, i64)>,
    pub window_ps: Option<u64>,
    pub coincidences: Vec<CoincidenceRow>,
    pub scans: Vec<ScanResult>,
    pub sweeps: Vec<SweepTable>,
}

/// Counts of one window position: pairs and heralded A events.
#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
pub struct WindowCount {
    pub pairs: u64,
    pub heralded: u64,
}

impl std::ops::Add for WindowCount {
    type Output = WindowCount;
    fn add(self, o: WindowCount) -> WindowCount {
        WindowCount { pairs: self.pairs + o.pairs, heralded: self.heralded + o.heralded }
    }
}
