//! Tick and wrap arithmetic of interleaved records: ticks → ps exactly (round half up)
//! with a u64 fast path, counter masks and wrap periods, the epoch after wraps, and the
//! [`Clock`] that turns raw counters into absolute ticks for layouts with kinds, overflow
//! records and a reorder tolerance.

use super::super::layout::RecordLayout;
use super::super::MAX_PS;

/// See [`Demuxer::fast_ticks`]: min of the u64-overflow bound and the last tick count
/// whose ps (round half up) stays below 2^62.
pub(super) fn fast_ticks(tick_fs: u64) -> u64 {
    let overflow = (u64::MAX - 500) / tick_fs;
    let limit = (MAX_PS as u128 * 1000 - 501) / tick_fs as u128;
    overflow.min(limit.min(u64::MAX as u128) as u64)
}

/// ps of `raw` ticks after `epoch` ticks, exactly (round half up): u64 arithmetic up to
/// `fast_ticks` (1 ps ticks skip the multiply-divide; the test is loop-invariant), u128
/// past it; `None` at or past [`MAX_PS`].
#[inline(always)]
pub(super) fn ticks_to_ps(epoch: u64, raw: u64, fast_ticks: u64, fs: u64) -> Option<u64> {
    let ticks = epoch.wrapping_add(raw);
    if ticks <= fast_ticks && ticks >= epoch {
        Some(if fs == 1000 { ticks } else { (ticks * fs + 500) / 1000 })
    } else {
        slow_ps(epoch, raw, fs)
    }
}

/// ps for tick counts past the u64 fast path (u128); `None` at or past [`MAX_PS`].
#[cold]
pub(super) fn slow_ps(epoch: u64, raw: u64, fs: u64) -> Option<u64> {
    let ps = ((epoch as u128 + raw as u128) * fs as u128 + 500) / 1000;
    (ps < MAX_PS as u128).then_some(ps as u64)
}

/// The counter bits of the time field (after its shift): the field's bits, and of those
/// the low `wrap_bits` when the layout wraps.
pub(super) fn counter_mask(l: &RecordLayout) -> u64 {
    let wrap = match l.wrap_bits {
        Some(b) if b < 64 => (1u64 << b) - 1,
        _ => u64::MAX,
    };
    wrap & l.time.mask()
}

/// Ticks one wrap adds, 2^wrap_bits; 0 for a 64-bit wrap (a period past u64).
pub(super) fn wrap_period(l: &RecordLayout) -> u64 {
    l.wrap_bits.and_then(|b| 1u64.checked_shl(b)).unwrap_or(0)
}

/// The epoch after one more wrap; saturates at u64::MAX (every later time is then past
/// the 2^62 ps limit), as does a period past u64.
pub(super) fn next_epoch(epoch_ticks: u64, period: u64) -> u64 {
    epoch_ticks.checked_add(period).filter(|_| period > 0).unwrap_or(u64::MAX)
}

/// The epoch after `wraps` wraps from 0: `wraps` times [`next_epoch`] in one step.
pub(super) fn epoch_after(wraps: u64, period: u64) -> u64 {
    match wraps {
        0 => 0,
        _ if period == 0 => u64::MAX,
        _ => wraps.saturating_mul(period),
    }
}

/// A step from `prev` down to `raw` that looks like a counter wrap: `prev` in the top
/// eighth of the smallest power-of-two range holding it (2^B, B ≥ 8) and `raw` in the
/// bottom eighth. Returns B.
pub(super) fn wrap_guess(prev: u64, raw: u64) -> Option<u32> {
    let bits = 64 - prev.leading_zeros();
    let eighth = 1u64.checked_shl(bits)?.checked_shr(3)?;
    (bits >= 8 && prev >= 7 * eighth && raw < eighth).then_some(bits)
}

/// The ps of an absolute tick count, exactly (round half up); `None` at or past [`MAX_PS`].
#[inline]
pub(super) fn ticks_ps(ticks: u128, fs: u64) -> Option<u64> {
    let ps = ticks.checked_mul(fs as u128)?.checked_add(500)? / 1000;
    (ps < MAX_PS as u128).then_some(ps as u64)
}

/// How a [`Clock`] reads counters: a decrease means a wrap (`implicit`), the period in
/// ticks (0: none), the reorder tolerance in ticks, and lenient order.
#[derive(Debug, Clone, Copy)]
pub(super) struct ClockRules {
    pub implicit: bool,
    pub period: u128,
    pub tolerance: u128,
    pub lenient: bool,
}

impl ClockRules {
    pub(super) fn of(l: &RecordLayout, lenient: bool) -> ClockRules {
        let period = l.period_bits().map_or(0, |b| 1u128 << b);
        ClockRules { implicit: l.wrap_bits.is_some() && !l.has_overflow_kinds(), period, tolerance: l.reorder_ticks() as u128, lenient }
    }
}

/// A record's time went back further than the rules allow: its ticks and the latest ticks.
#[derive(Debug, Clone, Copy)]
pub(super) struct Back {
    pub ticks: u128,
    pub latest: u128,
}

/// Whether a tag read as `t` ticks in the current epoch is a late tag from before the
/// last wrap or overflow: its counter lies in the last `tolerance` ticks of a period, and
/// one period earlier it falls within the tolerance of the latest time `m`.
#[inline]
fn late(t: u128, raw: u64, m: u128, epoch: u128, r: &ClockRules) -> bool {
    let (p, tol) = (r.period, r.tolerance);
    epoch >= p && t >= p && raw as u128 + tol >= p && t - p + tol >= m
}

/// The counter state between records: the epoch (ticks added by wraps and overflow
/// records), the raw counter of the last time tag, and the latest absolute ticks.
///
/// Rules, per time tag with raw counter r and t = epoch + r (docs/formats.md):
/// - implicit wraps, no tolerance: r below the previous r adds one period (as always);
/// - implicit wraps with tolerance T: t more than T below the latest adds one period; a
///   counter in the last T ticks of the period whose time one period earlier lies within T
///   of the latest is a late tag from before the last wrap ([`late`]);
/// - otherwise t more than T below the latest is an error (strict), with the same late-tag
///   rule after an overflow record when T > 0.
#[derive(Debug, Clone, Copy, Default)]
pub(super) struct Clock {
    pub epoch: u128,
    pub prev_raw: u64,
    pub latest: Option<u128>,
}

impl Clock {
    /// Absolute ticks of a time tag with raw counter `raw`.
    #[inline]
    pub(super) fn tag(&mut self, raw: u64, r: &ClockRules) -> Result<u128, Back> {
        let (p, tol) = (r.period, r.tolerance);
        let mut t = self.epoch.saturating_add(raw as u128);
        if r.implicit {
            if tol == 0 {
                if raw < self.prev_raw {
                    self.epoch = self.epoch.saturating_add(p);
                    t = t.saturating_add(p);
                }
            } else if let Some(m) = self.latest {
                if t.saturating_add(tol) < m {
                    self.epoch = self.epoch.saturating_add(p);
                    t = t.saturating_add(p);
                } else if late(t, raw, m, self.epoch, r) {
                    t -= p;
                }
            }
            self.prev_raw = raw;
        } else if let Some(m) = self.latest {
            if tol > 0 && p > 0 && late(t, raw, m, self.epoch, r) {
                t -= p;
            }
            if t.saturating_add(tol) < m && !r.lenient {
                return Err(Back { ticks: t, latest: m });
            }
        }
        self.latest = Some(self.latest.map_or(t, |m| m.max(t)));
        Ok(t)
    }

    /// An overflow record: `count` periods more.
    #[inline]
    pub(super) fn overflow(&mut self, count: u64, r: &ClockRules) {
        self.epoch = self.epoch.saturating_add((count as u128).saturating_mul(r.period));
    }
}
