//! The coincidence engine: one integer rule ([`rule`]), delay histograms ([`scan`]),
//! window sweeps ([`sweep`]), accidentals ([`accidentals`]); parallel over fixed chunks of
//! A events ([`parallel`]) and bit-identical for any thread count.

pub mod accidentals;
pub mod count;
pub mod delays;
pub mod driver;
pub mod kernels;
pub mod lanes;
pub mod parallel;
pub mod rule;
pub mod scan;
pub mod search;
pub mod stream;
pub mod sweep;
pub mod tables;

pub use count::{count_block, CountConfig};
pub use delays::Delays;
pub use scan::{scan_block, ScanConfig};
pub use sweep::{sweep_block, Criterion};
