//! Atomic writes: every output is written to a temporary file in the target directory
//! and renamed into place only when complete. Temporaries are removed on error, on drop
//! and (through [`cleanup_all`]) from the Ctrl-C/SIGTERM handler; each is also on the
//! SIGBUS guard's lock-free list ([`crate::guard`]), which unlinks it from a signal handler.

use crate::{Error, Result};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// Temporary paths of outputs still being written, for the signal handler.
static PENDING: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

/// An output being written: a temporary file beside `final_path`.
#[derive(Debug)]
pub struct AtomicOutput {
    final_path: PathBuf,
    temp_path: PathBuf,
    committed: bool,
    /// Keeps the temporary on the SIGBUS handler's unlink list until commit or drop.
    #[cfg(unix)]
    _guard: crate::guard::TempToken,
}

impl AtomicOutput {
    /// Check the destination (its directory exists; it does not exist unless `force`)
    /// and create an empty temporary file beside it.
    pub fn prepare(final_path: &Path, force: bool) -> Result<Self> {
        let dir = match final_path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        if !dir.is_dir() {
            return Err(Error::Usage(format!(
                "{}: output directory {} does not exist",
                final_path.display(),
                dir.display()
            )));
        }
        if final_path.is_dir() {
            return Err(Error::Usage(format!("{}: output path is a directory", final_path.display())));
        }
        if final_path.exists() && !force {
            return Err(Error::OutputExists(final_path.to_path_buf()));
        }
        let stem = final_path.file_name().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
        let tmp = tempfile::Builder::new()
            .prefix(&format!(".{stem}."))
            .suffix(".partial")
            .tempfile_in(&dir)
            .map_err(|e| Error::io(final_path, e))?;
        let (_file, temp_path) = tmp.keep().map_err(|e| Error::io(final_path, e.error))?;
        PENDING.lock().unwrap_or_else(|p| p.into_inner()).push(temp_path.clone());
        Ok(AtomicOutput {
            final_path: final_path.to_path_buf(),
            #[cfg(unix)]
            _guard: crate::guard::register_temp(&temp_path),
            temp_path,
            committed: false,
        })
    }

    /// Where the writer puts its bytes.
    pub fn temp_path(&self) -> &Path {
        &self.temp_path
    }

    pub fn final_path(&self) -> &Path {
        &self.final_path
    }

    /// Flush the temporary to disk and rename it to the final name.
    pub fn commit(mut self) -> Result<()> {
        let f = std::fs::OpenOptions::new().read(true).open(&self.temp_path).map_err(|e| Error::io(&self.temp_path, e))?;
        f.sync_all().map_err(|e| Error::io(&self.final_path, e))?;
        set_readable(&self.temp_path);
        std::fs::rename(&self.temp_path, &self.final_path).map_err(|e| Error::io(&self.final_path, e))?;
        self.committed = true;
        forget_pending(&self.temp_path);
        Ok(())
    }
}

impl Drop for AtomicOutput {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_file(&self.temp_path);
            forget_pending(&self.temp_path);
        }
    }
}

/// Temporaries are created 0600; a finished output gets the usual 0644.
fn set_readable(p: &Path) {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let _ = std::fs::set_permissions(p, std::fs::Permissions::from_mode(0o644));
    }
    #[cfg(not(unix))]
    let _ = p;
}

fn forget_pending(p: &Path) {
    let mut v = PENDING.lock().unwrap_or_else(|p| p.into_inner());
    v.retain(|q| q != p);
}

/// Remove every temporary output registered by this process (called from the signal handler).
pub fn cleanup_all() {
    let v = PENDING.lock().unwrap_or_else(|p| p.into_inner());
    for p in v.iter() {
        let _ = std::fs::remove_file(p);
    }
}

/// Write `bytes` to `final_path` atomically.
pub fn write_bytes(final_path: &Path, bytes: &[u8], force: bool) -> Result<()> {
    let out = AtomicOutput::prepare(final_path, force)?;
    std::fs::write(out.temp_path(), bytes).map_err(|e| Error::io(final_path, e))?;
    out.commit()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_file_under_final_name_until_commit() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("x.h5");
        let o = AtomicOutput::prepare(&p, false).unwrap();
        std::fs::write(o.temp_path(), b"abc").unwrap();
        assert!(!p.exists());
        o.commit().unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"abc");
        assert!(matches!(AtomicOutput::prepare(&p, false), Err(Error::OutputExists(_))));
        let o = AtomicOutput::prepare(&p, true).unwrap();
        let t = o.temp_path().to_path_buf();
        drop(o);
        assert!(!t.exists());
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 1);
    }

    #[test]
    fn missing_directory_is_a_usage_error() {
        let e = AtomicOutput::prepare(Path::new("/nonexistent-dir-xyz/out.h5"), false).unwrap_err();
        assert_eq!(e.exit_code(), 2);
    }
}
