//! The data model every layer shares: a channel number and its time tags, sorted
//! ascending, in integer picoseconds; the time limit and the ordering predicates that
//! readers and engine both apply.

use std::borrow::Cow;

/// Largest timestamp accepted, exclusive: 2^62 ps (about 53 days). Readers refuse tags at
/// or past it, so the engine's signed differences of two tags and a delay cannot overflow.
pub const MAX_TIME_PS: u64 = 1 << 62;

pub mod clock;
pub mod order;
pub use order::{ascending_below_limit, descends};

/// A detector channel number as the time-to-digital converter reports it.
pub type Channel = u32;

/// One channel's time tags in integer picoseconds, ascending (equal values allowed).
///
/// `times_ps` borrows straight from a memory mapping for the per-channel array and
/// container formats (zero copy) and is owned after demultiplexing interleaved records.
#[derive(Debug, Clone)]
pub struct ChannelTags<'a> {
    pub channel: Channel,
    /// Human name (e.g. `larch_plus`); empty when the format carries none.
    pub name: String,
    pub times_ps: Cow<'a, [u64]>,
    /// Whether `times_ps` is known to be ascending and below [`MAX_TIME_PS`]. The
    /// readers check that as they open a file, except on the whole-file path of `count`,
    /// `sweep` and `scan`, where the check is left to the engine's first pass over the
    /// channel ([`crate::engine::parallel`]) so a large file is read once, not twice.
    pub order_checked: bool,
}

impl<'a> ChannelTags<'a> {
    pub fn owned(channel: Channel, name: impl Into<String>, times_ps: Vec<u64>) -> ChannelTags<'static> {
        ChannelTags { channel, name: name.into(), times_ps: Cow::Owned(times_ps), order_checked: true }
    }
    pub fn borrowed(channel: Channel, name: impl Into<String>, times_ps: &'a [u64]) -> Self {
        ChannelTags { channel, name: name.into(), times_ps: Cow::Borrowed(times_ps), order_checked: true }
    }
    pub fn len(&self) -> usize {
        self.times_ps.len()
    }
    pub fn is_empty(&self) -> bool {
        self.times_ps.is_empty()
    }
}

/// Live time of tags observed together (one block, or the inputs given to one command), ps:
/// from the earliest tag of any channel to the latest, counting the latest tick, so
/// `last_ps − first_ps + 1`. `inspect`, `count` and every singles table use this one
/// definition (README, "Rates").
pub fn live_time_ps(first_ps: u64, last_ps: u64) -> u64 {
    last_ps - first_ps + 1
}

/// Mean rate of `events` over a live time, Hz: `events / live time`; `None` for no live
/// time. The one rate definition of the project (see [`live_time_ps`]).
pub fn rate_hz(events: u64, live_time_ps: u64) -> Option<f64> {
    (live_time_ps > 0).then(|| events as f64 / (live_time_ps as f64 * 1e-12))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rate_is_events_over_the_inclusive_span() {
        // Definition (README, "Rates"): tags at 0 and 999 999 999 999 ps span 1 s of live
        // time, so 3 events give 3 Hz; common practice, no source.
        assert_eq!(live_time_ps(0, 999_999_999_999), 1_000_000_000_000);
        assert_eq!(rate_hz(3, live_time_ps(0, 999_999_999_999)), Some(3.0));
        assert_eq!(rate_hz(5, 0), None);
    }
}
