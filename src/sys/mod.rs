//! The floor under every layer: atomic writes, the SIGBUS guard, progress bars and
//! CPU-feature detection. Nothing here knows about tags, engines or documents, and
//! nothing here imports from any other part of the crate except [`crate::error`] and
//! [`crate::units`].

pub mod atomic;
pub mod cpu;
#[cfg(unix)]
pub mod guard;
pub mod progress;
