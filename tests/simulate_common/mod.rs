//! Helpers for the simulator tests: model set-ups and an exact-delay coincidence count
//! written independently of the engine (two sorted lists, equal shifted stamps).
#![allow(dead_code)]

use tagsieve::manifest::{Port, Side};
use tagsieve::simulate::{DetectorModel, Setting};
use tagsieve::ChannelTags;

/// Four identical ideal-timing detectors (no jitter, dark counts or dead time) with
/// efficiency `eta` and the scenario's cable delays.
pub fn ideal_detectors(eta: f64) -> Vec<DetectorModel> {
    let mut d = tagsieve::simulate::scenario_detectors();
    for x in &mut d {
        x.efficiency = eta;
        x.dark_rate_hz = 0.0;
        x.jitter_sigma_ps = 0.0;
        x.dead_time_ps = 0;
    }
    d
}

pub fn deg(alpha_deg: f64, beta_deg: f64) -> Setting {
    Setting { alpha_deg, beta_deg }
}

pub fn tags_of<'a>(tags: &'a [ChannelTags<'static>], channel: u32) -> &'a [u64] {
    &tags.iter().find(|c| c.channel == channel).expect("channel present").times_ps
}

/// Pairs with (b − d_b) == (a − d_a) exactly, in two sorted lists.
pub fn exact_coincidences(a: &[u64], d_a: u64, b: &[u64], d_b: u64) -> u64 {
    let (mut i, mut j, mut n) = (0, 0, 0u64);
    while i < a.len() && j < b.len() {
        let (x, y) = (a[i] as i64 - d_a as i64, b[j] as i64 - d_b as i64);
        if x == y {
            n += 1;
            i += 1;
            j += 1;
        } else if x < y {
            i += 1;
        } else {
            j += 1;
        }
    }
    n
}

/// Exact-delay coincidence counts N(x, y) between the detectors behind each port pair,
/// indexed [alice port][bob port] (Plus = 0, Minus = 1); 0 where a detector is absent.
pub fn outcome_counts(dets: &[DetectorModel], tags: &[ChannelTags<'static>]) -> [[u64; 2]; 2] {
    let find = |side: Side, port: Port| dets.iter().find(|d| d.side == side && d.port == port);
    let mut n = [[0u64; 2]; 2];
    for pa in [Port::Plus, Port::Minus] {
        for pb in [Port::Plus, Port::Minus] {
            if let (Some(a), Some(b)) = (find(Side::Alice, pa), find(Side::Bob, pb)) {
                n[pa as usize][pb as usize] =
                    exact_coincidences(tags_of(tags, a.channel), a.delay_ps, tags_of(tags, b.channel), b.delay_ps);
            }
        }
    }
    n
}

/// E = (N++ + N−− − N+− − N−+)/N and its binomial standard error √((1 − E²)/N)
/// (common practice, no source).
pub fn correlation(n: [[u64; 2]; 2]) -> (f64, f64) {
    let same = (n[0][0] + n[1][1]) as f64;
    let diff = (n[0][1] + n[1][0]) as f64;
    let total = same + diff;
    let e = (same - diff) / total;
    (e, ((1.0 - e * e) / total).sqrt())
}
