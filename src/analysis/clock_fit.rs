//! Fit the clock map between two recorders from the tags alone: a coarse search of offset and
//! frequency with no prior (FFT cross-correlation of binned streams), then the offset followed
//! through the run in segments sized by the pair rate. Strategy and cost model: docs/clocks.md.
//!
//! The coarse stage follows Ho, Lamas-Linares & Kurtsiefer, "Clock synchronization by remote
//! detection of correlated photon pairs", New J. Phys. 11, 045011 (2009): cross-correlate the
//! two sites' time-binned detection streams by FFT and refine on successively finer bins.

use crate::tags::clock::{ClockMap, Knot, LostSpan, Step, CLOCK_FILE_VERSION};
use crate::{Error, Result};
use rustfft::{num_complex::Complex, FftPlanner};

/// What to search and how finely.
#[derive(Debug, Clone, PartialEq)]
pub struct FitConfig {
    /// Offsets searched: ±this (ps). Default 1 s.
    pub offset_range_ps: u64,
    /// Frequency offsets searched: ±this (ppm). Default 50.
    pub ppm_range: f64,
    /// Bin width of the coarse cross-correlation (ps). Default 2 µs.
    pub coarse_bin_ps: u64,
    /// Frequency step of the coarse search (ppm): sets the stretch of first-site data
    /// correlated, L = bin / step. Default 5 ppm (L = 0.4 s at 2 µs bins).
    pub ppm_step: f64,
    /// Pairs wanted per tracking segment (sets the segment length from the pair rate).
    /// Default 400 (σ ≈ 70 ps / √400 ≈ 3.5 ps per knot at the scenario's jitter).
    pub pairs_per_segment: f64,
    /// Half-width of the window a segment's peak is looked for in, around the prediction (ps).
    pub track_window_ps: u64,
    /// Half-width of the window searched again when a segment's peak is missing (ps): the
    /// largest step that is found.
    pub reacquire_window_ps: u64,
    /// Smallest significance (σ above the background) a peak must have, beyond the largest
    /// background fluctuation expected among the cells searched, √(2 ln M).
    pub margin_sigma: f64,
}

impl Default for FitConfig {
    fn default() -> Self {
        FitConfig {
            offset_range_ps: 1_000_000_000_000,
            ppm_range: 50.0,
            coarse_bin_ps: 2_000_000,
            ppm_step: 5.0,
            pairs_per_segment: 400.0,
            track_window_ps: 2_000,
            reacquire_window_ps: 100_000_000,
            margin_sigma: 4.0,
        }
    }
}

/// One site's tags: merged times (ps) with each tag's channel delay (ps).
#[derive(Debug, Clone, Default)]
pub struct SiteTags {
    /// (time_ps, delay_ps), sorted by time.
    pub tags: Vec<(i64, i64)>,
}

impl SiteTags {
    /// Merge channels (each sorted) with their delays.
    pub fn merge(channels: &[(&[u64], i64)]) -> SiteTags {
        let mut tags: Vec<(i64, i64)> =
            channels.iter().flat_map(|(t, d)| t.iter().map(move |&x| (x.min(i64::MAX as u64) as i64, *d))).collect();
        tags.sort_unstable();
        SiteTags { tags }
    }
    fn span(&self) -> Option<(i64, i64)> {
        Some((self.tags.first()?.0, self.tags.last()?.0))
    }
}

/// The coarse stage's answer.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CoarseResult {
    /// Offset o with t_site ≈ t_first·(1 + ε) + o (ps), to within a bin.
    pub offset_ps: f64,
    /// ε (ppm), to within half a frequency step.
    pub ppm: f64,
    /// Significance of the best peak (σ above the mean of the correlation).
    pub significance: f64,
    /// Significance required (√(2 ln M) + margin, M = cells searched).
    pub threshold: f64,
    /// Coincidence excess in the peak bin over the background (≈ pairs in the stretch).
    pub excess: f64,
    /// Length of first-site data correlated (ps).
    pub stretch_ps: u64,
    /// First-site time where the stretch starts (ps).
    pub stretch_start_ps: i64,
    pub bin_ps: u64,
    /// Lag (in bins) of the best peak, B later than A.
    pub lag_bins: i64,
    pub cells: u64,
}

/// What was searched and not found.
fn no_peak(cfg: &FitConfig, c: &CoarseResult) -> Error {
    Error::Usage(format!(
        "clock fit: no significant correlation peak: searched offsets ±{} s and frequency offsets ±{} ppm \
         (steps of {} ppm) with {} bins over {} s of first-site data; best peak {:.1} σ, {:.1} σ required",
        cfg.offset_range_ps as f64 * 1e-12,
        cfg.ppm_range,
        cfg.ppm_step,
        crate::units::fmt_duration_ps(c.bin_ps as f64),
        c.stretch_ps as f64 * 1e-12,
        c.significance,
        c.threshold
    ))
}

/// Bin `times` (ps, already on the common scale) into `buf` over [origin, origin + n·bin).
fn bin_into(buf: &mut [Complex<f64>], times: impl Iterator<Item = f64>, origin: f64, bin_ps: f64) {
    buf.iter_mut().for_each(|c| *c = Complex::new(0.0, 0.0));
    let n = buf.len();
    for t in times {
        let k = ((t - origin) / bin_ps).floor();
        if k >= 0.0 && (k as usize) < n {
            buf[k as usize].re += 1.0;
        }
    }
}

/// Coarse search from no prior: for each trial ε on a grid of `ppm_step`, the second site's
/// times are scaled by 1/(1+ε) and binned; the circular cross-correlation with the binned
/// first-site stretch (zero-padded so lags within ±range never wrap) comes from one forward
/// and one inverse FFT. Returns the best (lag, ε) cell and its significance; an error naming
/// what was searched when the peak is not significant.
pub fn coarse_search(first: &SiteTags, second: &SiteTags, cfg: &FitConfig) -> Result<CoarseResult> {
    let (a0, a1) = first.span().ok_or_else(|| Error::Usage("clock fit: the first site has no tags".into()))?;
    second.span().ok_or_else(|| Error::Usage("clock fit: the second site has no tags".into()))?;
    let bin = cfg.coarse_bin_ps as f64;
    let want_stretch = (bin / (cfg.ppm_step * 1e-6)) as i64;
    let stretch = want_stretch.min(a1 - a0 + 1).max(1);
    // the stretch starts a third into the first site's data, so its partners lie inside
    // the second site's data for any offset the run's length allows
    let s0 = a0 + (a1 - a0 + 1 - stretch) / 3;
    let range = cfg.offset_range_ps as f64;
    let n = (((stretch as f64 + 2.0 * range) / bin).ceil() as usize + 2).next_power_of_two();
    let origin = s0 as f64 - range; // bin 0 of both arrays
    let mut planner = FftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(n);
    let inv = planner.plan_fft_inverse(n);
    let mut fa = vec![Complex::new(0.0, 0.0); n];
    bin_into(&mut fa, first.tags.iter().filter(|t| t.0 >= s0 && t.0 < s0 + stretch).map(|t| (t.0 - t.1) as f64), origin, bin);
    fwd.process(&mut fa);
    let steps = (cfg.ppm_range / cfg.ppm_step).ceil() as i64;
    let max_lag = (range / bin).ceil() as i64;
    let mut fb = vec![Complex::new(0.0, 0.0); n];
    let mut best: Option<CoarseResult> = None;
    for s in -steps..=steps {
        let ppm = s as f64 * cfg.ppm_step;
        let scale = 1.0 / (1.0 + ppm * 1e-6);
        // second-site time t2 ≈ t1·(1+ε) + o  →  t2/(1+ε) ≈ t1 + o/(1+ε)
        let lo = (origin - range) / scale;
        let hi = (origin + n as f64 * bin + range) / scale;
        let from = second.tags.partition_point(|t| (t.0 as f64) < lo);
        let to = second.tags.partition_point(|t| (t.0 as f64) < hi);
        bin_into(&mut fb, second.tags[from..to].iter().map(|t| (t.0 - t.1) as f64 * scale), origin, bin);
        fwd.process(&mut fb);
        for (b, a) in fb.iter_mut().zip(&fa) {
            *b *= a.conj();
        }
        inv.process(&mut fb);
        // c(k) = Σ_i a_i b_{i+k}, lag k in [−max_lag, max_lag] (circular index)
        let val = |k: i64| fb[k.rem_euclid(n as i64) as usize].re / n as f64;
        let (mut sum, mut sum2, mut top, mut top_k) = (0.0, 0.0, f64::MIN, 0i64);
        for k in -max_lag..=max_lag {
            let v = val(k);
            sum += v;
            sum2 += v * v;
            if v > top {
                top = v;
                top_k = k;
            }
        }
        let m = (2 * max_lag + 1) as f64;
        let mean = sum / m;
        let sd = (sum2 / m - mean * mean).max(1e-300).sqrt();
        let z = (top - mean) / sd;
        if best.as_ref().is_none_or(|b| z > b.significance) {
            best = Some(CoarseResult {
                offset_ps: (top_k as f64 + 0.5) * bin / scale,
                ppm,
                significance: z,
                threshold: 0.0,
                excess: top - mean,
                stretch_ps: stretch as u64,
                stretch_start_ps: s0,
                bin_ps: cfg.coarse_bin_ps,
                lag_bins: top_k,
                cells: 0,
            });
        }
    }
    let mut best = best.expect("at least one frequency trial");
    best.cells = (2 * max_lag as u64 + 1) * (2 * steps as u64 + 1);
    best.threshold = (2.0 * (best.cells as f64).ln()).sqrt() + cfg.margin_sigma;
    if best.significance < best.threshold {
        return Err(no_peak(cfg, &best));
    }
    Ok(best)
}

/// The offset of one segment: mean and standard error of the pair differences.
struct SegmentPeak {
    site_mean_ps: f64,
    resid_mean_ps: f64,
    resid_sd_ps: f64,
    pairs: usize,
}

/// Linear prediction f(t2) ≈ first + slope·(t2 − site), of the first-site time.
#[derive(Debug, Clone, Copy)]
struct Line {
    site_ps: f64,
    first_ps: f64,
    slope: f64,
}

impl Line {
    fn at(&self, t2: f64) -> f64 {
        self.first_ps + self.slope * (t2 - self.site_ps)
    }
}

/// Differences r = (t1 − d1) − (pred(t2) − d2) within ±window of 0 for the second-site tags
/// `seg`, histogrammed in 200 bins; the peak bin must stand `min_z` σ above the mean bin
/// (Poisson), then r is averaged within ±300 ps of the peak twice.
fn segment_peak(first: &[(i64, i64)], seg: &[(i64, i64)], pred: &Line, window_ps: f64, min_z: f64) -> Option<SegmentPeak> {
    let mut diffs: Vec<(f64, f64)> = Vec::new(); // (r, t2)
    let mut lo = 0usize;
    for &(t2, d2) in seg {
        let target = pred.at(t2 as f64) - d2 as f64; // expected t1 − d1
        let from = target - window_ps;
        while lo < first.len() && ((first[lo].0 - first[lo].1) as f64) < from - 1e6 {
            lo += 1; // first is sorted by t1; d1 spreads by < 1 µs here
        }
        let mut j = lo;
        while j < first.len() && ((first[j].0 - first[j].1) as f64) <= target + window_ps + 1e6 {
            let r = (first[j].0 - first[j].1) as f64 - target;
            if r.abs() <= window_ps {
                diffs.push((r, t2 as f64));
            }
            j += 1;
        }
    }
    let nbins = 200usize;
    let bw = 2.0 * window_ps / nbins as f64;
    let mut h = vec![0u32; nbins];
    for &(r, _) in &diffs {
        h[(((r + window_ps) / bw) as usize).min(nbins - 1)] += 1;
    }
    let (kmax, &top) = h.iter().enumerate().max_by_key(|(_, &c)| c)?;
    let mean = diffs.len() as f64 / nbins as f64;
    if top < 8 || (top as f64 - mean) / mean.max(1.0).sqrt() < min_z {
        return None;
    }
    let mut center = -window_ps + (kmax as f64 + 0.5) * bw;
    // shrink the averaging window by 4 each round down to ±300 ps (≈ 4.5 σ of the
    // scenario's pair jitter), then settle the centre with two more rounds there
    let mut half = (300.0f64).max(bw);
    let mut stats = (0.0, 0.0, 0.0, 0usize);
    let mut settled = 0;
    for _ in 0..16 {
        let sel: Vec<&(f64, f64)> = diffs.iter().filter(|(r, _)| (r - center).abs() <= half).collect();
        if sel.is_empty() {
            return None;
        }
        let n = sel.len() as f64;
        let m = sel.iter().map(|x| x.0).sum::<f64>() / n;
        let sd = (sel.iter().map(|x| (x.0 - m).powi(2)).sum::<f64>() / n).sqrt();
        let tm = sel.iter().map(|x| x.1).sum::<f64>() / n;
        stats = (m, sd, tm, sel.len());
        center = m;
        if half <= 300.0 {
            settled += 1;
            if settled == 3 {
                break;
            }
        }
        half = (half / 4.0).max(300.0);
    }
    Some(SegmentPeak { resid_mean_ps: stats.0, resid_sd_ps: stats.1, site_mean_ps: stats.2, pairs: stats.3 })
}

/// Least-squares line through the last few knots (at most 6) of the current piece.
fn line_from(knots: &[Knot], fallback_slope: f64) -> Line {
    let last = knots[knots.len() - 1];
    if knots.len() < 2 {
        return Line { site_ps: last.site_ps as f64, first_ps: last.first_ps as f64, slope: fallback_slope };
    }
    let tail = &knots[knots.len().saturating_sub(6)..];
    let n = tail.len() as f64;
    let ms = tail.iter().map(|k| k.site_ps as f64).sum::<f64>() / n;
    let mf = tail.iter().map(|k| k.first_ps as f64).sum::<f64>() / n;
    let sxx: f64 = tail.iter().map(|k| (k.site_ps as f64 - ms).powi(2)).sum();
    let sxy: f64 = tail.iter().map(|k| (k.site_ps as f64 - ms) * (k.first_ps as f64 - mf)).sum();
    Line { site_ps: ms, first_ps: mf, slope: sxy / sxx }
}

/// The whole fit: coarse search, then the offset followed segment by segment through the
/// run. Errors (exit 2) when the coarse peak is not significant.
pub fn fit_clock(first: &SiteTags, second: &SiteTags, site_channels: Vec<u32>, cfg: &FitConfig) -> Result<(ClockMap, CoarseResult)> {
    let coarse = coarse_search(first, second, cfg)?;
    let (a0, a1) = first.span().expect("checked by the coarse search");
    let pair_rate_hz = coarse.excess / (coarse.stretch_ps as f64 * 1e-12);
    let seg_ps = ((cfg.pairs_per_segment / pair_rate_hz.max(1e-3)) * 1e12).clamp(1e9, 1e13);
    // coarse model: f(t2) = (t2 − o)/(1 + ε)
    let scale = 1.0 / (1.0 + coarse.ppm * 1e-6);
    let mut line = Line { site_ps: coarse.offset_ps, first_ps: 0.0, slope: scale };
    let coarse_err = coarse.bin_ps as f64 * 2.0 + cfg.ppm_step * 1e-6 * seg_ps;
    let center = (coarse.stretch_start_ps as f64 + coarse.stretch_ps as f64 / 2.0) / scale + coarse.offset_ps;
    let (b0, b1) = (second.tags[0].0 as f64, second.tags[second.tags.len() - 1].0 as f64);
    // start where the first site's data start, in second-site time
    let start = (b0).max((a0 as f64 - line.first_ps) / line.slope + line.site_ps);
    let end = b1.min((a1 as f64 - line.first_ps) / line.slope + line.site_ps);
    // the coarse frequency's error, carried from the stretch to where tracking starts
    // bootstrap: from the coarse stretch (where the coarse line is best) a dozen segments
    // fix offset and frequency; then the whole run is followed from its start with that line
    let boot = track(first, second, center, (center + 12.0 * seg_ps).min(end), line, coarse_err.max(cfg.track_window_ps as f64), false, seg_ps, coarse_err, cfg);
    if boot.knots.len() >= 2 {
        line = boot.line;
    }
    let window = if boot.knots.len() >= 2 { cfg.reacquire_window_ps as f64 } else { (coarse_err + cfg.ppm_step * 1e-6 * (start - center).abs()).clamp(cfg.track_window_ps as f64, cfg.reacquire_window_ps as f64) };
    let Track { mut knots, lost, steps, sum_sd2, sum_n, .. } = track(first, second, start, end, line, window, boot.knots.len() >= 2, seg_ps, coarse_err, cfg);
    extend_to_edges(&mut knots, start, end, seg_ps);
    if knots.len() < 2 {
        return Err(Error::Usage(format!(
            "clock fit: the coarse peak ({:.1} σ at offset {:.6} s, {:+.1} ppm) could not be followed: {} segment(s) with a peak",
            coarse.significance,
            coarse.offset_ps * 1e-12,
            coarse.ppm,
            knots.len()
        )));
    }
    let map = ClockMap {
        clock_file_version: CLOCK_FILE_VERSION,
        description: format!(
            "fitted by tagsieve clock-fit: coarse offset {:.0} ps, {:+.3} ppm ({:.1} σ, {} ps bins); segments of {:.3} s (~{:.0} pairs/s)",
            coarse.offset_ps,
            coarse.ppm,
            coarse.significance,
            coarse.bin_ps,
            seg_ps * 1e-12,
            pair_rate_hz
        ),
        site_channels,
        residual_rms_ps: Some((sum_sd2 / sum_n.max(1.0)).sqrt()),
        knots,
        lost,
        steps,
    };
    Ok((map, coarse))
}


/// What one tracking pass found.
struct Track {
    knots: Vec<Knot>,
    lost: Vec<LostSpan>,
    steps: Vec<Step>,
    sum_sd2: f64,
    sum_n: f64,
    line: Line,
}

/// Follow the offset segment by segment over second-site time [start, end), from the
/// prediction `line`, looking first within ±`window`. `slope_trusted`: the line's slope is
/// already good to the tracking window over a segment (so a large jump is a step).
#[allow(clippy::too_many_arguments)]
fn track(first: &SiteTags, second: &SiteTags, start: f64, end: f64, mut line: Line, mut window: f64, slope_trusted: bool, seg_ps: f64, coarse_err: f64, cfg: &FitConfig) -> Track {

    let mut knots: Vec<Knot> = Vec::new();
    let mut piece_start = 0usize; // first knot of the current piece (after the last step)
    let mut lost: Vec<LostSpan> = Vec::new();
    let mut steps: Vec<Step> = Vec::new();
    let (mut sum_sd2, mut sum_n) = (0.0, 0.0);
    let mut s = start;
    let mut missed_since: Option<f64> = None;
    while s < end {
        // a short tail joins the segment before it
        let e = if end + 1.0 - (s + seg_ps) < seg_ps / 2.0 { end + 1.0 } else { s + seg_ps };
        let from = second.tags.partition_point(|t| (t.0 as f64) < s);
        let to = second.tags.partition_point(|t| (t.0 as f64) < e);
        let seg = &second.tags[from..to];
        let min_z = 5.0;
        let mut found = segment_peak(&first.tags, seg, &line, window, min_z);
        if found.is_none() && !knots.is_empty() {
            // a missing peak may be a step: look again over the wide window
            found = segment_peak(&first.tags, seg, &line, cfg.reacquire_window_ps as f64, min_z + 2.0);
        }
        match found {
            Some(p) => {
                let first_ps = line.at(p.site_mean_ps) + p.resid_mean_ps;
                let knot = Knot {
                    site_ps: p.site_mean_ps.round() as i64,
                    first_ps: first_ps.round() as i64,
                    sigma_ps: p.resid_sd_ps / (p.pairs as f64).sqrt(),
                };
                // until two knots fix the slope, the coarse frequency's error dominates
                let slope_known = slope_trusted || knots.len() - piece_start >= 2 || piece_start > 0;
                let big = slope_known && p.resid_mean_ps.abs() > (20.0 * knot.sigma_ps).max(1_000.0);
                if big && !knots.is_empty() {
                    let prev = knots[knots.len() - 1];
                    steps.push(Step { at_site_ps: s.round() as i64, size_ps: -p.resid_mean_ps });
                    lost.push(LostSpan { start_ps: prev.site_ps, end_ps: knot.site_ps });
                    piece_start = knots.len();
                }
                if let Some(m) = missed_since.take() {
                    if !big {
                        lost.push(LostSpan { start_ps: m.round() as i64, end_ps: s.round() as i64 });
                    }
                }
                if knots.last().is_none_or(|k| knot.site_ps > k.site_ps) {
                    sum_sd2 += p.resid_sd_ps.powi(2) * p.pairs as f64;
                    sum_n += p.pairs as f64;
                    knots.push(knot);
                }
                let slope = line.slope;
                line = line_from(&knots[piece_start..], slope);
                let slope_known = slope_trusted || knots.len() - piece_start >= 2 || piece_start > 0;
                window = if slope_known { cfg.track_window_ps as f64 } else { coarse_err.max(cfg.track_window_ps as f64) };
            }
            None => {
                if !knots.is_empty() && missed_since.is_none() {
                    missed_since = Some(s);
                }
                window = (window * 2.0).min(cfg.reacquire_window_ps as f64);
            }
        }
        s = e;
    }
    Track { knots, lost, steps, sum_sd2, sum_n, line }
}

/// Knots sit at the mean time of each segment's pairs; the end segments' data also cover the
/// half segment beyond them, so the map is carried to the tracked span's ends along the end
/// knots' line (when those ends are within one segment).
fn extend_to_edges(knots: &mut Vec<Knot>, start: f64, end: f64, seg_ps: f64) {
    if knots.len() < 2 {
        return;
    }
    let along = |a: Knot, b: Knot, t: f64| {
        let slope = (b.first_ps - a.first_ps) as f64 / (b.site_ps - a.site_ps) as f64;
        Knot { site_ps: t.round() as i64, first_ps: (a.first_ps as f64 + slope * (t.round() - a.site_ps as f64)).round() as i64, sigma_ps: a.sigma_ps }
    };
    let (k0, k1) = (knots[0], knots[1]);
    if (k0.site_ps as f64) - start > 1.0 && (k0.site_ps as f64) - start <= seg_ps {
        let k = along(k0, k1, start);
        if k.first_ps <= k0.first_ps {
            knots.insert(0, k);
        }
    }
    let n = knots.len();
    let (ka, kb) = (knots[n - 2], knots[n - 1]);
    if end - kb.site_ps as f64 > 1.0 && end - kb.site_ps as f64 <= seg_ps {
        let k = along(kb, ka, end);
        if k.first_ps >= kb.first_ps {
            knots.push(k);
        }
    }
}
