//! tagsieve: a time-tag stream processor for entangled-photon experiments.
//!
//! Data walks this crate once, left to right:
//! [`read`] (files → per-channel sorted picosecond slices) →
//! [`engine`] (coincidences, delay histograms, window sweeps, accidentals) →
//! [`analysis`] (CHSH, visibility, statistics) → [`output`] (HDF5, CSV, JSON, plots);
//! [`jobs`] (one file per command) puts the stages together. No module reaches back upstream.

pub mod analysis;
pub mod engine;
pub mod error;
pub mod jobs;
pub mod manifest;
pub mod output;
pub mod read;
pub mod simulate;
pub mod sys;
pub mod tags;
pub mod units;

pub use error::{Error, Result};
pub use tags::{Channel, ChannelTags};
/// Former homes of [`sys::guard`] and [`sys::progress`], kept while callers move.
#[cfg(unix)]
pub use sys::guard;
pub use sys::progress;
