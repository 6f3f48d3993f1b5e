//! Typed errors of the library. Each names the file, the record or byte offset,
//! what was found and what was expected; the CLI adds hints and maps them to exit codes.

use std::path::PathBuf;

pub type Result<T, E = Error> = std::result::Result<T, E>;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// Bad input data: a file that does not hold what its format promises.
    #[error("{path}: {location}: found {found}, expected {expected}")]
    BadInput {
        path: PathBuf,
        /// e.g. "record 1234 (byte offset 19744)", "byte offset 0", "whole file"
        location: String,
        found: String,
        expected: String,
        /// A likely fix, shown after the message ("records look byte-swapped: try ...").
        hint: Option<String>,
    },
    /// Timestamps of a channel handed to the engine unchecked
    /// ([`crate::ChannelTags::order_checked`] false) that go backwards or pass 2^62 ps.
    /// The block pass (`jobs::pass`) replaces it with the reader's located error
    /// ([`crate::read::locate_disorder`]).
    #[error("channel {channel}: timestamps go backwards or reach 2^62 ps; expected ascending timestamps below 2^62 ps")]
    Unordered { channel: u32 },
    /// A bad command-line value, layout or manifest entry (not file data).
    #[error("{0}")]
    Usage(String),
    /// A job setting's value refused. `setting` is the setting's own name (a job field such
    /// as `reference` or `delay`), never a flag: the command line shows it as its flag.
    #[error("{setting} {value}: {message}")]
    Setting { setting: &'static str, value: String, message: String },
    /// A configuration file (layout TOML, manifest, delays file) that does not parse.
    #[error("{path}: line {line}: {message}")]
    Config { path: PathBuf, line: usize, message: String },
    /// An operating-system error on a named file.
    #[error("{path}: {source}")]
    Io { path: PathBuf, #[source] source: std::io::Error },
    /// The output already exists and --force was not given.
    #[error("{0}: output exists; pass --force to replace it")]
    OutputExists(PathBuf),
    /// A file changed size while it was read (mapped input truncated or rewritten).
    #[error("{path}: file changed while it was read (size {before} bytes before, {after} after); rerun on a stable copy or with --no-mmap")]
    ChangedUnderneath { path: PathBuf, before: u64, after: u64 },
    /// Interrupted by a signal; no output was left behind.
    #[error("interrupted; no output was written")]
    Interrupted,
    /// Failure in the HDF5 library or another writer.
    #[error("{path}: {message}")]
    Output { path: PathBuf, message: String },
}

impl Error {
    /// Exit code: 2 for bad input or usage, 1 for runtime failures, 130 for interruption.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::BadInput { .. } | Error::Unordered { .. } | Error::Usage(_) | Error::Setting { .. } | Error::Config { .. } | Error::OutputExists(_) => 2,
            Error::Io { source, .. } => match source.kind() {
                std::io::ErrorKind::NotFound | std::io::ErrorKind::PermissionDenied => 2,
                std::io::ErrorKind::IsADirectory | std::io::ErrorKind::InvalidInput => 2,
                _ => 1,
            },
            Error::ChangedUnderneath { .. } => 1,
            Error::Interrupted => 130,
            Error::Output { .. } => 1,
        }
    }

    pub fn hint(&self) -> Option<&str> {
        match self {
            Error::BadInput { hint, .. } => hint.as_deref(),
            _ => None,
        }
    }

    /// A refused setting value (see [`Error::Setting`]).
    pub fn setting(setting: &'static str, value: impl ToString, message: impl Into<String>) -> Self {
        Error::Setting { setting, value: value.to_string(), message: message.into() }
    }

    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io { path: path.into(), source }
    }

    pub fn bad_input(
        path: impl Into<PathBuf>,
        location: impl Into<String>,
        found: impl Into<String>,
        expected: impl Into<String>,
    ) -> Self {
        Error::BadInput { path: path.into(), location: location.into(), found: found.into(), expected: expected.into(), hint: None }
    }

    pub fn with_hint(mut self, text: impl Into<String>) -> Self {
        if let Error::BadInput { hint, .. } = &mut self {
            *hint = Some(text.into());
        }
        self
    }
}
