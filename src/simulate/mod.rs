//! The source model: a polarization-entangled pair source ((|HH⟩+|VV⟩)/√2, visibility V)
//! or a local-hidden-variable stand-in, read by up to four detectors with efficiency,
//! dark counts, jitter, cable delay and dead time. Deterministic per seed, whatever the thread count.

pub mod clocks;
pub mod plan;
pub mod run;
pub mod rng;

use crate::manifest::{Port, Side};
use crate::{Channel, ChannelTags, Error, Result};
use rayon::prelude::*;
use rng::{mix_seed, Rng};

pub use plan::{chsh_labels, plan_blocks, BlockPlan, SettingLabel};
pub use run::{write_run, write_run_two_site, RunConfig, RunSummary, SecondSite};

/// What decides the two outcomes of a pair.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Correlation {
    /// P(x,y|α,β) = (1 + x·y·V·cos 2(α−β))/4 for the state (|HH⟩+|VV⟩)/√2.
    Quantum,
    /// Each pair carries one shared random polarization λ (uniform on [0°, 180°)); each
    /// analyzer answers sign(cos 2(λ − angle)). With probability 1 − V a pair's outcomes
    /// are instead independent fair coins, so E = V·(1 − 4|Δ|/180°) for |Δ| ≤ 90°.
    LocalHiddenVariable,
}

/// The pair source.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceModel {
    /// Mean pair emission rate (pairs per second); emissions form a Poisson process.
    pub pair_rate_hz: f64,
    /// Visibility V in [0, 1].
    pub visibility: f64,
    pub correlation: Correlation,
}

impl SourceModel {
    /// The Larch–Rowan source: 250 000 pairs/s, V = 0.95, quantum correlations.
    pub fn scenario() -> Self {
        SourceModel { pair_rate_hz: 250_000.0, visibility: 0.95, correlation: Correlation::Quantum }
    }

    fn validate(&self) -> Result<()> {
        check_range("pair_rate_hz", self.pair_rate_hz, 0.0, f64::MAX)?;
        check_range("visibility", self.visibility, 0.0, 1.0)
    }
}

/// One detector behind one analyzer output.
#[derive(Debug, Clone, PartialEq)]
pub struct DetectorModel {
    pub channel: Channel,
    pub name: String,
    pub side: Side,
    pub port: Port,
    /// Detection probability of a photon that reaches this output, in [0, 1].
    pub efficiency: f64,
    /// Dark counts per second (Poisson, uniform in time).
    pub dark_rate_hz: f64,
    /// Standard deviation of the Gaussian timing jitter (ps).
    pub jitter_sigma_ps: f64,
    /// Non-paralyzable dead time (ps): a tag closer than this to the previous kept tag is lost.
    pub dead_time_ps: u64,
    /// Cable + fiber delay from emission to this detector's time stamp (ps).
    pub delay_ps: u64,
}

impl DetectorModel {
    fn validate(&self) -> Result<()> {
        let what = |f: &str| format!("detector {} ({}): {f}", self.channel, self.name);
        check_range(&what("efficiency"), self.efficiency, 0.0, 1.0)?;
        check_range(&what("dark_rate_hz"), self.dark_rate_hz, 0.0, f64::MAX)?;
        check_range(&what("jitter_sigma_ps"), self.jitter_sigma_ps, 0.0, f64::MAX)
    }
}

/// The four Larch–Rowan detectors (channels 1–4, values of the demo scenario).
pub fn scenario_detectors() -> Vec<DetectorModel> {
    let d = |channel, name: &str, side, port, efficiency, dark_rate_hz, jitter_sigma_ps, delay_ps| DetectorModel {
        channel,
        name: name.to_string(),
        side,
        port,
        efficiency,
        dark_rate_hz,
        jitter_sigma_ps,
        dead_time_ps: 22_000,
        delay_ps,
    };
    vec![
        d(1, "larch_plus", Side::Alice, Port::Plus, 0.18, 800.0, 45.0, 0),
        d(2, "larch_minus", Side::Alice, Port::Minus, 0.17, 650.0, 50.0, 850),
        d(3, "rowan_plus", Side::Bob, Port::Plus, 0.20, 1100.0, 40.0, 41_250),
        d(4, "rowan_minus", Side::Bob, Port::Minus, 0.19, 900.0, 55.0, 40_600),
    ]
}

/// Analyzer angles of one block (degrees): α on Alice's (Larch's) side, β on Bob's (Rowan's).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Setting {
    pub alpha_deg: f64,
    pub beta_deg: f64,
}

/// The correlation E(α, β) = P(same) − P(different) the model produces (before detection).
pub fn model_correlation(source: &SourceModel, setting: Setting) -> f64 {
    let delta_deg = setting.alpha_deg - setting.beta_deg;
    match source.correlation {
        Correlation::Quantum => source.visibility * (2.0 * delta_deg.to_radians()).cos(),
        Correlation::LocalHiddenVariable => {
            let d = delta_deg.rem_euclid(180.0);
            let d = d.min(180.0 - d);
            source.visibility * (1.0 - 4.0 * d / 180.0)
        }
    }
}

/// The seed of block `block_index` of a run seeded with `run_seed`.
pub fn block_seed(run_seed: u64, block_index: u64) -> u64 {
    mix_seed(&[run_seed, block_index])
}

/// Simulate one block of `duration_ps` at `setting`: the detectors' tags, one
/// [`ChannelTags`] per detector ordered by channel number, each sorted ascending, all in
/// [0, duration_ps). Emission starts at t = 0 (so a channel with delay d sees no pair
/// photons before d). Same inputs → same tags, on any number of threads.
pub fn simulate_block(
    source: &SourceModel,
    detectors: &[DetectorModel],
    setting: Setting,
    duration_ps: u64,
    seed: u64,
) -> Result<Vec<ChannelTags<'static>>> {
    simulate_block_reporting(source, detectors, setting, duration_ps, seed, &|_| {})
}

/// [`simulate_block`], calling `on_progress(ms)` with each simulated millisecond count as
/// chunks finish (from worker threads; the sum over a block is ⌊duration_ps / 10⁹⌋).
pub fn simulate_block_reporting(
    source: &SourceModel,
    detectors: &[DetectorModel],
    setting: Setting,
    duration_ps: u64,
    seed: u64,
    on_progress: &(dyn Fn(u64) + Sync),
) -> Result<Vec<ChannelTags<'static>>> {
    source.validate()?;
    let ports = PortMap::new(detectors)?;
    let model = PairModel::new(source, setting);
    let chunk_ps = chunk_length_ps(source, detectors);
    let n_chunks = duration_ps.div_ceil(chunk_ps);
    let chunks: Vec<Vec<Vec<u64>>> = (0..n_chunks)
        .into_par_iter()
        .map(|k| {
            let (t0, t1) = (k * chunk_ps, ((k + 1) * chunk_ps).min(duration_ps));
            let mut rng = Rng::new(mix_seed(&[seed, k]));
            let tags = simulate_chunk(&model, detectors, &ports, t0, t1, duration_ps, &mut rng);
            on_progress(t1 / 1_000_000_000 - t0 / 1_000_000_000);
            tags
        })
        .collect();
    let mut out: Vec<ChannelTags<'static>> = detectors
        .par_iter()
        .enumerate()
        .map(|(i, det)| {
            let mut times = concat_chunks(&chunks, i);
            settle_nearly_sorted(&mut times);
            apply_dead_time(&mut times, det.dead_time_ps);
            ChannelTags::owned(det.channel, det.name.clone(), times)
        })
        .collect();
    out.sort_by_key(|c| c.channel);
    Ok(out)
}

/// Pair kernel for one block: how to draw the two outcomes of a pair.
struct PairModel {
    correlation: Correlation,
    visibility: f64,
    /// P(x = y) for the quantum model.
    p_same: f64,
    alpha_rad: f64,
    beta_rad: f64,
    mean_gap_ps: f64,
}

impl PairModel {
    fn new(source: &SourceModel, setting: Setting) -> Self {
        let e = model_correlation(&SourceModel { correlation: Correlation::Quantum, ..source.clone() }, setting);
        PairModel {
            correlation: source.correlation,
            visibility: source.visibility,
            p_same: (1.0 + e) / 2.0,
            alpha_rad: setting.alpha_deg.to_radians(),
            beta_rad: setting.beta_deg.to_radians(),
            mean_gap_ps: if source.pair_rate_hz > 0.0 { 1e12 / source.pair_rate_hz } else { f64::INFINITY },
        }
    }

    /// The outcomes (Alice, Bob) of one pair.
    #[inline]
    fn outcomes(&self, rng: &mut Rng) -> (Port, Port) {
        match self.correlation {
            Correlation::Quantum => {
                let x = port_of(rng.next_u64() & 1 == 0);
                let same = rng.uniform() < self.p_same;
                (x, if same { x } else { x.other() })
            }
            Correlation::LocalHiddenVariable => {
                if rng.uniform() < self.visibility {
                    let lambda = std::f64::consts::PI * rng.uniform();
                    let answer = |angle: f64| port_of((2.0 * (lambda - angle)).cos() >= 0.0);
                    (answer(self.alpha_rad), answer(self.beta_rad))
                } else {
                    let bits = rng.next_u64();
                    (port_of(bits & 1 == 0), port_of(bits & 2 == 0))
                }
            }
        }
    }
}

fn port_of(plus: bool) -> Port {
    if plus {
        Port::Plus
    } else {
        Port::Minus
    }
}

/// Which detector (index into the detector list) sits behind each (side, port).
struct PortMap([[Option<usize>; 2]; 2]);

impl PortMap {
    fn new(detectors: &[DetectorModel]) -> Result<Self> {
        let mut map = [[None; 2]; 2];
        for (i, d) in detectors.iter().enumerate() {
            d.validate()?;
            if detectors[..i].iter().any(|o| o.channel == d.channel) {
                return Err(Error::Usage(format!("simulate: channel {} is given twice", d.channel)));
            }
            let slot = &mut map[d.side as usize][d.port as usize];
            if slot.is_some() {
                return Err(Error::Usage(format!("simulate: two detectors behind {:?} {:?}", d.side, d.port)));
            }
            *slot = Some(i);
        }
        Ok(PortMap(map))
    }
    #[inline]
    fn get(&self, side: Side, port: Port) -> Option<usize> {
        self.0[side as usize][port as usize]
    }
}

/// Chunk length (ps): about 2¹⁶ pairs per chunk, at least 1 µs. A function of the model
/// only, so the random streams (one per chunk) never depend on the thread count.
fn chunk_length_ps(source: &SourceModel, detectors: &[DetectorModel]) -> u64 {
    let dark_hz: f64 = detectors.iter().map(|d| d.dark_rate_hz).sum();
    let events_per_ps = (source.pair_rate_hz + dark_hz) * 1e-12;
    let ps = if events_per_ps > 0.0 { 65_536.0 / events_per_ps } else { 1e15 };
    (ps.min(1e15) as u64).max(1_000_000)
}

/// Tags of one chunk of emission time [t0, t1), per detector, each sorted.
///
/// Hot loop: one pass over the pairs in emission order (exponential gaps keep it sorted
/// without a sort), with per-pair work limited to a few draws and at most two pushes.
fn simulate_chunk(
    model: &PairModel,
    detectors: &[DetectorModel],
    ports: &PortMap,
    t0: u64,
    t1: u64,
    duration_ps: u64,
    rng: &mut Rng,
) -> Vec<Vec<u64>> {
    let mut tags: Vec<Vec<u64>> = vec![Vec::new(); detectors.len()];
    let end = t1 as f64;
    let mut t = t0 as f64 + rng.exponential(model.mean_gap_ps);
    while t < end {
        let (x, y) = model.outcomes(rng);
        for (side, port) in [(Side::Alice, x), (Side::Bob, y)] {
            if let Some(i) = ports.get(side, port) {
                detect(&detectors[i], t, duration_ps, rng, &mut tags[i]);
            }
        }
        t += rng.exponential(model.mean_gap_ps);
    }
    for (det, out) in detectors.iter().zip(tags.iter_mut()) {
        add_dark_counts(det, t0, t1, rng, out);
        out.sort_unstable();
    }
    tags
}

/// A photon emitted at `t_ps` reaching `det`: detected with its efficiency, stamped at
/// emission + delay + jitter rounded to whole ps; stamps outside [0, duration) are not recorded.
#[inline]
fn detect(det: &DetectorModel, t_ps: f64, duration_ps: u64, rng: &mut Rng, out: &mut Vec<u64>) {
    if !rng.bernoulli(det.efficiency) {
        return;
    }
    let mut stamp = t_ps + det.delay_ps as f64;
    if det.jitter_sigma_ps > 0.0 {
        stamp += det.jitter_sigma_ps * rng.normal();
    }
    let stamp = stamp.round();
    if stamp >= 0.0 && stamp < duration_ps as f64 {
        out.push(stamp as u64);
    }
}

/// Dark counts of `det` in [t0, t1): a Poisson process with the detector's dark rate.
fn add_dark_counts(det: &DetectorModel, t0: u64, t1: u64, rng: &mut Rng, out: &mut Vec<u64>) {
    if det.dark_rate_hz <= 0.0 {
        return;
    }
    let mean_gap_ps = 1e12 / det.dark_rate_hz;
    let mut t = t0 as f64 + rng.exponential(mean_gap_ps);
    while t < t1 as f64 {
        let stamp = t.floor() as u64;
        if stamp < t1 {
            out.push(stamp);
        }
        t += rng.exponential(mean_gap_ps);
    }
}

fn concat_chunks(chunks: &[Vec<Vec<u64>>], detector: usize) -> Vec<u64> {
    let n: usize = chunks.iter().map(|c| c[detector].len()).sum();
    let mut v = Vec::with_capacity(n);
    for c in chunks {
        v.extend_from_slice(&c[detector]);
    }
    v
}

/// Sort a concatenation of sorted chunks. Only tags within a cable delay plus a few jitter
/// σ of a chunk boundary can be out of order, so an insertion pass costs O(n + displaced);
/// past a budget of moves (pathological jitter) it falls back to a full sort.
fn settle_nearly_sorted(v: &mut [u64]) {
    let budget = 8 * v.len() + 1024;
    let mut moves = 0usize;
    for i in 1..v.len() {
        if v[i] >= v[i - 1] {
            continue;
        }
        let x = v[i];
        let mut j = i;
        while j > 0 && v[j - 1] > x {
            v[j] = v[j - 1];
            j -= 1;
            moves += 1;
        }
        v[j] = x;
        if moves > budget {
            v.sort_unstable();
            return;
        }
    }
}

/// Non-paralyzable dead time on sorted tags: drop every tag less than `dead_time_ps`
/// after the previous kept one (one sequential pass; the channel's own history decides).
fn apply_dead_time(v: &mut Vec<u64>, dead_time_ps: u64) {
    if dead_time_ps == 0 {
        return;
    }
    let mut last_kept: Option<u64> = None;
    v.retain(|&t| {
        let keep = last_kept.is_none_or(|l| t - l >= dead_time_ps);
        if keep {
            last_kept = Some(t);
        }
        keep
    });
}

fn check_range(what: &str, value: f64, lo: f64, hi: f64) -> Result<()> {
    if value.is_finite() && value >= lo && value <= hi {
        Ok(())
    } else {
        Err(Error::Usage(format!("simulate: {what} = {value}, expected a number in [{lo}, {hi}]")))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dead_time_keeps_first_of_a_burst() {
        let mut v = vec![0, 5, 10, 25, 26, 60];
        apply_dead_time(&mut v, 20);
        assert_eq!(v, vec![0, 25, 60]);
    }

    #[test]
    fn settling_sorts_boundary_overlap_and_falls_back() {
        let mut v = vec![1, 3, 9, 2, 4, 10, 12];
        settle_nearly_sorted(&mut v);
        assert_eq!(v, vec![1, 2, 3, 4, 9, 10, 12]);
        let mut w: Vec<u64> = (0..5000).rev().collect();
        settle_nearly_sorted(&mut w);
        assert!(w.windows(2).all(|p| p[0] <= p[1]));
    }

    #[test]
    fn bad_parameters_are_usage_errors() {
        let mut dets = scenario_detectors();
        dets[1].efficiency = 1.5;
        let e = simulate_block(&SourceModel::scenario(), &dets, Setting { alpha_deg: 0.0, beta_deg: 0.0 }, 1000, 1);
        assert!(matches!(e, Err(Error::Usage(m)) if m.contains("efficiency")));
        let mut dets = scenario_detectors();
        dets[3].channel = 1;
        assert!(simulate_block(&SourceModel::scenario(), &dets, Setting { alpha_deg: 0.0, beta_deg: 0.0 }, 1000, 1).is_err());
    }
}
