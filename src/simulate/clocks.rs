//! Two recorders: the second site's channels re-stamped on their own free-running clock,
//! t_site = t_true·(1 + ε) + start offset + wander(t_true) (+ an optional step), where the
//! wander is a random walk in frequency sized by its Allan deviation at 1 s.

use super::rng::{mix_seed, Rng};
use crate::tags::clock::{ClockMap, Knot, CLOCK_FILE_VERSION};
use crate::{Channel, ChannelTags, Error, Result};

/// Spacing of the simulated clock's path (true time, ps): 10 ms. Between samples the path
/// is linear; with σ_y(1 s) = 1e-9 the curvature left out is below 0.1 ps.
pub const PATH_SPACING_PS: u64 = 10_000_000_000;

/// The second recorder's clock.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteClock {
    /// Frequency offset ε (ppm; positive: the second clock runs fast).
    pub ppm: f64,
    /// Second-site time at true time 0 (ps; may be negative: tags mapped below 0 are lost).
    pub start_offset_ps: f64,
    /// Allan deviation of the wander at τ = 1 s (dimensionless; 0: no wander).
    pub adev_1s: f64,
    /// Optional jump of the second clock (a recorder restart).
    pub step: Option<ClockStep>,
    pub seed: u64,
}

/// A forward jump of the second clock by `size_ps` at true time `at_s`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ClockStep {
    pub at_s: f64,
    /// Size (ps); must be ≥ 0 so the map stays monotone.
    pub size_ps: f64,
}

impl SiteClock {
    fn validate(&self) -> Result<()> {
        let bad = |m: String| Err(Error::Usage(format!("simulate: two-site clock: {m}")));
        if !(self.ppm.is_finite() && self.ppm.abs() < 1e4) {
            return bad(format!("ppm = {}, expected |ε| < 10⁴ ppm", self.ppm));
        }
        if !self.start_offset_ps.is_finite() {
            return bad("start offset is not a number".into());
        }
        if !(self.adev_1s.is_finite() && (0.0..1e-3).contains(&self.adev_1s)) {
            return bad(format!("Allan deviation = {}, expected a number in [0, 1e-3)", self.adev_1s));
        }
        if let Some(s) = self.step {
            if !(s.at_s.is_finite() && s.at_s >= 0.0 && s.size_ps.is_finite() && s.size_ps >= 0.0) {
                return bad(format!("step at {} s of {} ps: expected a time ≥ 0 and a size ≥ 0 ps", s.at_s, s.size_ps));
            }
        }
        Ok(())
    }
}

/// The clock's smooth path: second-site time (f64 ps) at true times k·PATH_SPACING_PS,
/// k = 0..n, without the step. Random-walk frequency: y gains √(q·h)·N(0,1) per sample, with
/// q = 3·σ_y(1 s)²/s, for which σ_y²(τ) = q·τ/3 (random-walk FM; Barnes et al., IEEE Trans.
/// Instrum. Meas. IM-20, 105 (1971), from memory); the phase integrates y.
fn smooth_path(clock: &SiteClock, n: usize) -> Vec<f64> {
    let h_s = PATH_SPACING_PS as f64 * 1e-12;
    let q_per_s = 3.0 * clock.adev_1s * clock.adev_1s;
    let mut rng = Rng::new(mix_seed(&[clock.seed, 0x0063_6c6f_636b]));
    let (mut y, mut x_ps) = (0.0f64, 0.0f64);
    (0..=n)
        .map(|k| {
            let t = (k as u64 * PATH_SPACING_PS) as f64;
            let site = t * (1.0 + clock.ppm * 1e-6) + clock.start_offset_ps + x_ps;
            x_ps += y * PATH_SPACING_PS as f64;
            y += (q_per_s * h_s).sqrt() * rng.normal();
            site
        })
        .collect()
}

/// Second-site time of true time `t_ps` (f64 ps), from the path and the step.
fn site_time(clock: &SiteClock, path: &[f64], t_ps: u64) -> f64 {
    let k = ((t_ps / PATH_SPACING_PS) as usize).min(path.len() - 2);
    let frac = (t_ps - k as u64 * PATH_SPACING_PS) as f64 / PATH_SPACING_PS as f64;
    let mut s = path[k] + frac * (path[k + 1] - path[k]);
    if let Some(st) = clock.step {
        if t_ps as f64 >= st.at_s * 1e12 {
            s += st.size_ps;
        }
    }
    s
}

/// Re-stamp the channels listed in `site_channels` on the second clock (rounded to whole ps;
/// tags that land below 0 are dropped), leaving the others as they are. The map is
/// non-decreasing, so each channel keeps its order. Returns the true map (second-site time →
/// true time = first-site time) as knots over [0, duration_ps], the clock's path samples.
pub fn restamp_second_site(
    tags: &mut [ChannelTags<'static>],
    site_channels: &[Channel],
    clock: &SiteClock,
    duration_ps: u64,
) -> Result<ClockMap> {
    clock.validate()?;
    let n = (duration_ps / PATH_SPACING_PS + 2) as usize;
    let path = smooth_path(clock, n);
    for c in tags.iter_mut().filter(|c| site_channels.contains(&c.channel)) {
        let mapped: Vec<u64> = c
            .times_ps
            .iter()
            .map(|&t| site_time(clock, &path, t).round())
            .filter(|&s| s >= 0.0)
            .map(|s| s as u64)
            .collect();
        debug_assert!(mapped.windows(2).all(|w| w[0] <= w[1]));
        c.times_ps = mapped.into();
    }
    Ok(true_map(clock, &path, site_channels, duration_ps))
}

/// Knots of the inverse map at every path sample (and on both sides of a step).
fn true_map(clock: &SiteClock, path: &[f64], site_channels: &[Channel], duration_ps: u64) -> ClockMap {
    let mut knots: Vec<Knot> = Vec::with_capacity(path.len() + 2);
    let mut push = |t_ps: u64, s: f64| {
        let site_ps = s.round() as i64;
        if knots.last().is_none_or(|k| site_ps > k.site_ps) {
            knots.push(Knot { site_ps, first_ps: t_ps as i64, sigma_ps: 0.0 });
        }
    };
    let step_ps = clock.step.map(|s| (s.at_s * 1e12).round() as u64);
    for k in 0..path.len() {
        let t = k as u64 * PATH_SPACING_PS;
        if let Some(ts) = step_ps.filter(|&ts| ts > t.saturating_sub(PATH_SPACING_PS) && ts <= t && k > 0) {
            let before = site_time(&SiteClock { step: None, ..clock.clone() }, path, ts);
            push(ts, before - 0.5);
            push(ts, site_time(clock, path, ts));
        }
        push(t, site_time(clock, path, t));
        if t > duration_ps {
            break;
        }
    }
    let step = clock.step.map(|s| crate::tags::clock::Step { at_site_ps: 0, size_ps: s.size_ps });
    ClockMap {
        clock_file_version: CLOCK_FILE_VERSION,
        description: format!(
            "true map of a simulated second recorder: {} ppm, start offset {} ps, Allan deviation {} at 1 s, seed {}",
            clock.ppm, clock.start_offset_ps, clock.adev_1s, clock.seed
        ),
        site_channels: site_channels.to_vec(),
        residual_rms_ps: None,
        knots,
        lost: vec![],
        steps: step
            .map(|mut s| {
                s.at_site_ps = step_ps.map_or(0, |ts| site_time(clock, path, ts).round() as i64);
                vec![s]
            })
            .unwrap_or_default(),
    }
}

/// True time → second-site time (f64 ps) of a clock over `duration_ps`, for tests and plots.
pub fn site_time_fn(clock: &SiteClock, duration_ps: u64) -> impl Fn(u64) -> f64 + '_ {
    let path = smooth_path(clock, (duration_ps / PATH_SPACING_PS + 2) as usize);
    move |t| site_time(clock, &path, t)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn clock(ppm: f64, adev: f64, seed: u64) -> SiteClock {
        SiteClock { ppm, start_offset_ps: 4.0e11, adev_1s: adev, step: None, seed }
    }

    /// Without wander the map is the straight line t·(1+ε)+offset, rounded to whole ps.
    #[test]
    fn no_wander_is_a_straight_line() {
        let c = clock(7.3, 0.0, 1);
        let times: Vec<u64> = (0..1000u64).map(|i| i * 1_234_567_891).collect();
        let mut tags = vec![ChannelTags::owned(3, "b", times.clone()), ChannelTags::owned(1, "a", times.clone())];
        restamp_second_site(&mut tags, &[3], &c, 2_000_000_000_000).unwrap();
        for (i, &t) in times.iter().enumerate() {
            let want = (t as f64 * (1.0 + 7.3e-6) + 4.0e11).round() as u64;
            assert!(tags[0].times_ps[i].abs_diff(want) <= 1, "tag {i}");
        }
        assert_eq!(tags[1].times_ps.as_ref(), &times[..]);
    }

    /// Overlapping Allan variance of the simulated phase at τ = 1 s against the requested
    /// σ_y(1 s) (random-walk FM: σ_y²(τ) = q·τ/3; Barnes et al. 1971, from memory). Averaged
    /// over 8 seeds of 400 s each; the estimate's scatter is ~10 % (common practice, no source).
    #[test]
    fn wander_has_the_requested_allan_deviation() {
        let adev = 1e-9;
        let mut sum = 0.0;
        let seeds = 8;
        for seed in 0..seeds {
            let c = clock(0.0, adev, seed);
            let path = smooth_path(&c, 40_000);
            let m = 100; // τ = 1 s in samples of 10 ms
            let x: Vec<f64> = path.iter().enumerate().map(|(k, s)| s - (k as u64 * PATH_SPACING_PS) as f64 - c.start_offset_ps).collect();
            let n = x.len() - 2 * m;
            let avar: f64 = (0..n).map(|i| (x[i + 2 * m] - 2.0 * x[i + m] + x[i]).powi(2)).sum::<f64>() / (2.0 * n as f64 * 1e24);
            sum += avar;
        }
        let adev_est = (sum / seeds as f64).sqrt();
        assert!((adev_est / adev - 1.0).abs() < 0.15, "Allan deviation at 1 s: {adev_est:e}, wanted {adev:e}");
    }

    #[test]
    fn order_is_kept_and_step_is_in_the_true_map() {
        let mut c = clock(-30.0, 1e-9, 3);
        c.step = Some(ClockStep { at_s: 0.5, size_ps: 3.0e6 });
        let times: Vec<u64> = (0..200_000u64).map(|i| i * 5_000_003).collect();
        let mut tags = vec![ChannelTags::owned(3, "b", times)];
        let map = restamp_second_site(&mut tags, &[3], &c, 1_000_000_000_000).unwrap();
        assert!(tags[0].times_ps.windows(2).all(|w| w[0] <= w[1]));
        map.validate(std::path::Path::new("true.toml")).unwrap();
        // the inverse map sends each re-stamped tag back to its true time within 1 ps
        let mut p = 0;
        for (i, &s) in tags[0].times_ps.iter().enumerate().step_by(997) {
            let back = map.map_ps(s as i64, &mut p).unwrap();
            assert!((back - (i as i64 * 5_000_003)).abs() <= 2, "tag {i}: {back}");
        }
    }
}
