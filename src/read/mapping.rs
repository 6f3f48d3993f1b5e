//! One place that says what a mapping assumes: memory maps with sequential read-ahead, and a buffered-read fallback.
