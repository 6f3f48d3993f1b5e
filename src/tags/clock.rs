//! The clock map between two recorders: knots (second-site time → first-site time, integer
//! ps), the spans where it is not known (lost segments), and its exact integer evaluation,
//! which is monotone, so a mapped channel stays in order. File format: docs/clocks.md.
//! A foundation: readers apply it ([`crate::read::clocked`]), the fit writes it.

use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Schema version written into every clock file.
pub const CLOCK_FILE_VERSION: u32 = 1;

/// One knot of the map: at second-site time `site_ps` the first-site time is `first_ps`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Knot {
    pub site_ps: i64,
    pub first_ps: i64,
    /// Standard error of `first_ps` (ps); 0 for a true (simulated) map.
    pub sigma_ps: f64,
}

/// A span of second-site time [start_ps, end_ps) where the map is not known; tags there are
/// not mapped (reported, not counted).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LostSpan {
    pub start_ps: i64,
    pub end_ps: i64,
}

/// A jump of the map found between two knots (e.g. a recorder restart).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Step {
    /// Second-site time of the first segment after the jump (ps).
    pub at_site_ps: i64,
    /// Change of (site − first) offset across the jump (ps).
    pub size_ps: f64,
}

/// The map from second-site time to first-site time, and what is known about it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClockMap {
    pub clock_file_version: u32,
    /// Free text: how the map was obtained.
    pub description: String,
    /// Channels recorded on the second site's clock.
    pub site_channels: Vec<u32>,
    /// RMS of the knots' residuals about a smooth fit (ps); absent for a true map.
    pub residual_rms_ps: Option<f64>,
    pub knots: Vec<Knot>,
    #[serde(default)]
    pub lost: Vec<LostSpan>,
    #[serde(default)]
    pub steps: Vec<Step>,
}

/// Where a second-site tag went when mapped.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct MapTally {
    pub mapped: u64,
    /// Before the first knot or after the last.
    pub outside_span: u64,
    /// In a lost span.
    pub in_lost_span: u64,
    /// Mapped before first-site time 0.
    pub below_zero: u64,
}

impl ClockMap {
    /// Check the knots: at least two, site times strictly increasing, first times not
    /// decreasing (so the map is monotone), lost spans non-empty.
    pub fn validate(&self, path: &Path) -> Result<()> {
        let bad = |loc: String, found: String, expected: &str| Error::bad_input(path, loc, found, expected);
        if self.clock_file_version != CLOCK_FILE_VERSION {
            return Err(bad("clock_file_version".into(), self.clock_file_version.to_string(), "1"));
        }
        if self.knots.len() < 2 {
            return Err(bad("knots".into(), format!("{} knots", self.knots.len()), "at least 2 knots"));
        }
        for (i, w) in self.knots.windows(2).enumerate() {
            if w[1].site_ps <= w[0].site_ps || w[1].first_ps < w[0].first_ps {
                return Err(bad(
                    format!("knot {}", i + 1),
                    format!("site_ps {} first_ps {} after site_ps {} first_ps {}", w[1].site_ps, w[1].first_ps, w[0].site_ps, w[0].first_ps),
                    "site_ps strictly increasing and first_ps not decreasing (a monotone map)",
                ));
            }
        }
        for (i, s) in self.lost.iter().enumerate() {
            if s.end_ps <= s.start_ps {
                return Err(bad(format!("lost span {i}"), format!("[{}, {})", s.start_ps, s.end_ps), "start_ps < end_ps"));
            }
        }
        Ok(())
    }

    pub fn load(path: &Path) -> Result<ClockMap> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let map: ClockMap = toml::from_str(&text).map_err(|e| Error::bad_input(path, "TOML", e.to_string(), "a clock file (docs/clocks.md)"))?;
        map.validate(path)?;
        Ok(map)
    }

    pub fn to_toml_string(&self) -> Result<String> {
        let body = toml::to_string(self).map_err(|e| Error::Usage(format!("clock file: cannot write TOML: {e}")))?;
        Ok(format!("# tagsieve clock map: second-site time -> first-site time, integer ps (docs/clocks.md)\n{body}"))
    }

    /// Write atomically (refusing to replace `path` unless `force`).
    pub fn save(&self, path: &Path, force: bool) -> Result<()> {
        crate::sys::atomic::write_bytes(path, self.to_toml_string()?.as_bytes(), force)
    }

    /// First-site time of second-site time `t_ps`, or `None` outside the knots or in a lost
    /// span. Exact rounding: between knots k and k+1,
    /// f(t) = first_k + ⌊((t − site_k)·(first_{k+1} − first_k) + ⌊span/2⌋) / span⌋ with
    /// span = site_{k+1} − site_k, in i128 (round half up). Each piece is non-decreasing in t
    /// and the pieces meet exactly at the knots, so f keeps every channel's order.
    #[inline]
    pub fn map_ps(&self, t_ps: i64, piece: &mut usize) -> Option<i64> {
        let k = &self.knots;
        if t_ps < k[0].site_ps || t_ps > k[k.len() - 1].site_ps {
            return None;
        }
        // tags arrive in order: walk the piece index forward (binary search on a jump back)
        if *piece + 1 >= k.len() || k[*piece].site_ps > t_ps {
            *piece = k.partition_point(|x| x.site_ps <= t_ps).saturating_sub(1).min(k.len() - 2);
        }
        while *piece + 2 < k.len() && k[*piece + 1].site_ps <= t_ps {
            *piece += 1;
        }
        let (a, b) = (k[*piece], k[*piece + 1]);
        let span = (b.site_ps - a.site_ps) as i128;
        let num = (t_ps - a.site_ps) as i128 * (b.first_ps - a.first_ps) as i128 + span / 2;
        Some(a.first_ps + num.div_euclid(span) as i64)
    }

    fn in_lost(&self, t_ps: i64, span_ix: &mut usize) -> bool {
        while *span_ix < self.lost.len() && self.lost[*span_ix].end_ps <= t_ps {
            *span_ix += 1;
        }
        self.lost.get(*span_ix).is_some_and(|s| s.start_ps <= t_ps)
    }

    /// Map one sorted channel onto first-site time: a new, sorted vector (one u64 per kept
    /// tag: the memory cost is that of the channel), with a tally of what was dropped.
    pub fn map_channel(&self, times_ps: &[u64]) -> (Vec<u64>, MapTally) {
        let mut lost: Vec<LostSpan> = self.lost.clone();
        lost.sort_by_key(|s| s.start_ps);
        let sorted = ClockMap { lost, ..self.clone() };
        let mut out = Vec::with_capacity(times_ps.len());
        let mut tally = MapTally::default();
        let (mut piece, mut span_ix) = (0usize, 0usize);
        for &t in times_ps {
            let t = t.min(i64::MAX as u64) as i64;
            if sorted.in_lost(t, &mut span_ix) {
                tally.in_lost_span += 1;
                continue;
            }
            match sorted.map_ps(t, &mut piece) {
                None => tally.outside_span += 1,
                Some(f) if f < 0 => tally.below_zero += 1,
                Some(f) => {
                    tally.mapped += 1;
                    out.push(f as u64);
                }
            }
        }
        (out, tally)
    }
}

impl MapTally {
    pub fn add(&mut self, o: &MapTally) {
        self.mapped += o.mapped;
        self.outside_span += o.outside_span;
        self.in_lost_span += o.in_lost_span;
        self.below_zero += o.below_zero;
    }
    pub fn dropped(&self) -> u64 {
        self.outside_span + self.in_lost_span + self.below_zero
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn map(knots: &[(i64, i64)]) -> ClockMap {
        ClockMap {
            clock_file_version: 1,
            description: String::new(),
            site_channels: vec![3],
            residual_rms_ps: None,
            knots: knots.iter().map(|&(s, f)| Knot { site_ps: s, first_ps: f, sigma_ps: 0.0 }).collect(),
            lost: vec![],
            steps: vec![],
        }
    }

    /// Round-half-up of the exact rational (t − s)·Δf/Δs, checked against f64 arithmetic on
    /// small numbers (exact there): common practice, no source.
    #[test]
    fn rounding_is_exact_and_monotone() {
        let m = map(&[(100, 0), (1100, 999), (2100, 2000)]);
        let mut p = 0;
        let mut last = i64::MIN;
        for t in 100..=2100 {
            let f = m.map_ps(t, &mut p).unwrap();
            let (s0, f0, s1, f1) = if t < 1100 { (100.0, 0.0, 1100.0, 999.0) } else { (1100.0, 999.0, 2100.0, 2000.0) };
            let want = f0 + (((t as f64 - s0) * (f1 - f0)) / (s1 - s0) + 0.5).floor();
            assert_eq!(f as f64, want, "t = {t}");
            assert!(f >= last);
            last = f;
        }
        assert_eq!(m.map_ps(99, &mut p), None);
        assert_eq!(m.map_ps(2101, &mut p), None);
    }

    #[test]
    fn lost_spans_and_edges_are_tallied() {
        let mut m = map(&[(0, 10), (1000, 1010)]);
        m.lost.push(LostSpan { start_ps: 200, end_ps: 300 });
        let (v, t) = m.map_channel(&[0, 199, 200, 299, 300, 1000, 1001]);
        assert_eq!(v, vec![10, 209, 310, 1010]);
        assert_eq!((t.mapped, t.in_lost_span, t.outside_span), (4, 2, 1));
    }

    #[test]
    fn a_decreasing_map_is_refused() {
        let m = map(&[(0, 10), (1000, 5)]);
        assert!(matches!(m.validate(Path::new("c.toml")), Err(Error::BadInput { .. })));
    }
}
