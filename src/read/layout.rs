//! Record layouts for interleaved fixed-size records: TOML file or compact flag.

/// Where the time and channel fields sit in one record, and how ticks become ps.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordLayout {}
