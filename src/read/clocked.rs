//! An input whose second-site channels are mapped onto first-site time through a clock map
//! ([`crate::tags::clock`]) as they are read.

use crate::tags::clock::{ClockMap, MapTally};
use crate::{Error, Result};

/// A caller's report of what mapping dropped.
pub type TallyReport = Box<dyn Fn(&MapTally) + Send + Sync>;

/// An input whose second-site channels are mapped onto first-site time as they are read
/// (whole passes only): each listed channel becomes an owned, sorted vector, so the extra
/// memory is 8 bytes per second-site tag; the other channels pass through untouched.
pub struct ClockedSource {
    pub inner: Box<dyn super::TagSource>,
    pub map: std::sync::Arc<ClockMap>,
    /// What mapping dropped, summed over every read of this source.
    pub tally: std::sync::Arc<std::sync::Mutex<MapTally>>,
    /// Called with the tally when this source is dropped (the caller's report).
    pub on_drop: Option<TallyReport>,
}

impl Drop for ClockedSource {
    fn drop(&mut self) {
        if let (Some(f), Ok(t)) = (&self.on_drop, self.tally.lock()) {
            f(&t);
        }
    }
}

impl super::TagSource for ClockedSource {
    fn file(&self) -> super::InputFile {
        self.inner.file()
    }
    fn channels(&self) -> Result<Vec<crate::ChannelTags<'_>>> {
        let mut tags = self.inner.channels()?;
        for c in tags.iter_mut().filter(|c| self.map.site_channels.contains(&c.channel)) {
            let (mapped, t) = self.map.map_channel(&c.times_ps);
            if let Ok(mut sum) = self.tally.lock() {
                sum.add(&t);
            }
            c.times_ps = mapped.into();
            c.order_checked = true;
        }
        Ok(tags)
    }
    fn chunks(&self, _events_per_chunk: usize) -> Result<Box<dyn Iterator<Item = Result<Vec<crate::ChannelTags<'static>>>> + Send + '_>> {
        Err(Error::Usage(format!(
            "{}: a clock map moves the second site's tags by up to the recorders' offset, so it needs a whole pass: use --pass whole",
            self.inner.file().path.display()
        )))
    }
    fn check_unchanged(&self) -> Result<()> {
        self.inner.check_unchanged()
    }
    fn event_count(&self) -> u64 {
        self.inner.event_count()
    }
    fn declared_channels(&self) -> Option<Vec<crate::Channel>> {
        self.inner.declared_channels()
    }
}

