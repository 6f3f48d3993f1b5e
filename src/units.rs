//! Human units for display: ps/ns/µs/s and Hz/kHz/MHz.
