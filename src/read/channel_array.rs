//! Format (a): per-channel arrays of little-endian u64 ps timestamps, one channel per file (`CH=PATH`).

use crate::Result;
use std::path::Path;

/// Write one channel's timestamps as little-endian u64 (format a).
pub fn write_channel_array(path: &Path, times_ps: &[u64]) -> Result<()> {
    let _ = (path, times_ps);
    todo!("write_channel_array")
}
