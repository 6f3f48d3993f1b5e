//! Format (c): our columnar container. Header, channel table, 8-byte aligned u64 sections.

use crate::{ChannelTags, Result};
use std::path::Path;

/// Write a container (format c) holding `channels`; `tick_ps` records the source's tick length.
pub fn write_container(path: &Path, channels: &[ChannelTags<'_>], tick_ps: f64, creator: &str) -> Result<()> {
    let _ = (path, channels, tick_ps, creator);
    todo!("write_container")
}
