//! Shared helpers for the end-to-end tests.
#![allow(dead_code)]

use std::path::PathBuf;
use std::process::Command;

/// The built `tagsieve` binary.
pub fn tagsieve() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tagsieve"))
}

/// The project root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The Python interpreter with NumPy, SciPy and h5py (the outside references):
/// `$TAGSIEVE_PYTHON`, else `.venv/bin/python` made by `tools/setup.sh`.
/// Panics with a clear message when neither exists: these checks are not optional.
pub fn python() -> Command {
    let p = std::env::var_os("TAGSIEVE_PYTHON")
        .map(PathBuf::from)
        .unwrap_or_else(|| root().join(".venv/bin/python"));
    assert!(p.exists(), "no Python with NumPy/h5py at {}: run tools/setup.sh first", p.display());
    Command::new(p)
}
