//! Human units for display: durations from integer ps (ps/ns/µs/ms/s), rates (Hz/kHz/MHz/GHz)
//! and grouped counts. Display only: the engine keeps integer ps throughout.

/// Picoseconds per second.
pub const PS_PER_S: f64 = 1e12;

/// Integer ps → seconds (display and analysis only).
pub fn ps_to_s(ps: u64) -> f64 {
    ps as f64 / PS_PER_S
}

/// Pick the largest unit ≤ the value from `(scale, name)` (ascending) and print 4 significant digits.
fn scaled(value: f64, units: &[(f64, &str)]) -> String {
    let (scale, name) = units.iter().rev().find(|(s, _)| value.abs() >= *s).copied().unwrap_or(units[0]);
    let v = value / scale;
    let decimals = match v.abs() {
        a if a >= 100.0 => 1,
        a if a >= 10.0 => 2,
        _ => 3,
    };
    if value == value.trunc() && scale == units[0].0 {
        return format!("{value} {name}");
    }
    format!("{v:.decimals$} {name}")
}

/// A duration in ps as "812 ps", "41.25 ns", "1.500 µs", "2.000 s".
pub fn fmt_duration_ps(ps: f64) -> String {
    scaled(ps, &[(1.0, "ps"), (1e3, "ns"), (1e6, "µs"), (1e9, "ms"), (1e12, "s")])
}

/// A rate as "800.0 Hz", "250.0 kHz", "1.200 MHz".
pub fn fmt_rate_hz(hz: f64) -> String {
    scaled(hz, &[(1.0, "Hz"), (1e3, "kHz"), (1e6, "MHz"), (1e9, "GHz")])
}

/// A count with thin groups of three digits: 1 234 567.
pub fn fmt_count(n: u64) -> String {
    let s = n.to_string();
    let mut out = String::with_capacity(s.len() + s.len() / 3);
    for (i, c) in s.chars().enumerate() {
        if i > 0 && (s.len() - i).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(c);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_pick_the_unit() {
        assert_eq!(fmt_duration_ps(812.0), "812 ps");
        assert_eq!(fmt_duration_ps(41_250.0), "41.25 ns");
        assert_eq!(fmt_duration_ps(1.5e6), "1.500 µs");
        assert_eq!(fmt_duration_ps(2e12), "2.000 s");
        assert_eq!(fmt_duration_ps(0.0), "0 ps");
        assert_eq!(fmt_duration_ps(12.345), "12.35 ps");
    }

    #[test]
    fn rates_and_counts() {
        assert_eq!(fmt_rate_hz(800.0), "800 Hz");
        assert_eq!(fmt_rate_hz(250_000.0), "250.0 kHz");
        assert_eq!(fmt_rate_hz(1.2e6), "1.200 MHz");
        assert_eq!(fmt_count(1_234_567), "1 234 567");
        assert_eq!(fmt_count(999), "999");
        assert_eq!(ps_to_s(2_000_000_000_000), 2.0);
    }
}
