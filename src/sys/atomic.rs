//! Atomic writes: every output is written to a temporary file in the target directory
//! and renamed into place only when complete. Temporaries are removed on error, on drop
//! and (through [`cleanup_all`]) from the Ctrl-C/SIGTERM handler. An [`OutputBatch`] holds
//! the renames of a multi-file job (a simulated run) until the whole job is done. Each
//! temporary being written is also on the SIGBUS guard's lock-free list ([`super::guard`]),
//! which unlinks it from a signal handler.

use crate::{Error, Result};
use std::cell::RefCell;
use std::path::{Path, PathBuf};
use std::sync::{Mutex, MutexGuard};

/// Temporary paths of outputs still being written (or finished but held by a batch), and
/// whether the process is being interrupted. Creating, renaming and cleaning up all happen
/// under this one lock, so no temporary escapes the signal handler and no output is renamed
/// into place once it has started.
static PENDING: Mutex<Pending> = Mutex::new(Pending { temps: Vec::new(), interrupted: false });

struct Pending {
    temps: Vec<PathBuf>,
    interrupted: bool,
}

fn pending() -> MutexGuard<'static, Pending> {
    PENDING.lock().unwrap_or_else(|p| p.into_inner())
}

thread_local! {
    /// (temporary, final) renames held back by this thread's open [`OutputBatch`].
    static BATCH: RefCell<Option<Vec<(PathBuf, PathBuf)>>> = const { RefCell::new(None) };
}

/// An output being written: a temporary file beside `final_path`.
#[derive(Debug)]
pub struct AtomicOutput {
    final_path: PathBuf,
    temp_path: PathBuf,
    committed: bool,
    /// Keeps the temporary on the SIGBUS guard's unlink list until commit or drop.
    #[cfg(unix)]
    _guard: super::guard::TempToken,
}

impl AtomicOutput {
    /// Check the destination (its directory exists; it does not exist unless `force`)
    /// and create an empty temporary file beside it.
    pub fn prepare(final_path: &Path, force: bool) -> Result<Self> {
        let dir = output_parent(final_path)?;
        if final_path.is_dir() {
            return Err(Error::Usage(format!("{}: output path is a directory", final_path.display())));
        }
        if final_path.exists() && !force {
            return Err(Error::OutputExists(final_path.to_path_buf()));
        }
        let mut p = pending();
        if p.interrupted {
            return Err(Error::Interrupted);
        }
        let tmp = tempfile::Builder::new()
            .prefix(&temp_prefix(final_path))
            .suffix(".partial")
            .tempfile_in(&dir)
            .map_err(|e| Error::io(final_path, e))?;
        let (_file, temp_path) = tmp.keep().map_err(|e| Error::io(final_path, e.error))?;
        p.temps.push(temp_path.clone());
        Ok(AtomicOutput {
            final_path: final_path.to_path_buf(),
            #[cfg(unix)]
            _guard: super::guard::register_temp(&temp_path),
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

    /// Flush the temporary to disk and rename it to the final name (or, inside an
    /// [`OutputBatch`] on this thread, leave the rename to the batch).
    pub fn commit(mut self) -> Result<()> {
        let f = std::fs::OpenOptions::new().read(true).open(&self.temp_path).map_err(|e| Error::io(&self.temp_path, e))?;
        f.sync_all().map_err(|e| Error::io(&self.final_path, e))?;
        set_readable(&self.temp_path);
        let held = BATCH.with(|b| match b.borrow_mut().as_mut() {
            Some(v) => {
                v.push((self.temp_path.clone(), self.final_path.clone()));
                true
            }
            None => false,
        });
        if !held {
            rename_into_place(&self.temp_path, &self.final_path)?;
        }
        self.committed = true;
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

/// The directory an output goes into; it must exist.
fn output_parent(final_path: &Path) -> Result<PathBuf> {
    let dir = match final_path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !dir.is_dir() {
        return Err(Error::Usage(format!("{}: output directory {} does not exist", final_path.display(), dir.display())));
    }
    Ok(dir)
}

/// Temporaries are named `.NAME.XXXXXX.partial` beside the output: this is `.NAME.`.
fn temp_prefix(final_path: &Path) -> String {
    let stem = final_path.file_name().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    format!(".{stem}.")
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
    pending().temps.retain(|q| q != p);
}

/// Rename a finished temporary into place, unless an interruption has begun.
fn rename_into_place(temp: &Path, final_path: &Path) -> Result<()> {
    let mut p = pending();
    if p.interrupted {
        return Err(Error::Interrupted);
    }
    std::fs::rename(temp, final_path).map_err(|e| Error::io(final_path, e))?;
    p.temps.retain(|q| q != temp);
    Ok(())
}

/// Remove every temporary output registered by this process and refuse any further output
/// (called from the signal handler). A temporary that a writer re-creates by name in the
/// moment between this call and the process exit can survive; so can any temporary of a
/// process killed with SIGKILL (`.NAME.*.partial` beside the output: safe to delete).
pub fn cleanup_all() {
    let mut p = pending();
    p.interrupted = true;
    for t in p.temps.iter() {
        if std::fs::remove_file(t).is_err() {
            // A directory output being written ([`AtomicDir`]).
            let _ = std::fs::remove_dir_all(t);
        }
    }
}

/// Renames of a multi-file job held back until [`OutputBatch::commit`]: outputs finished
/// while the batch is open on this thread stay temporaries (removed on interrupt, error or
/// drop), so an interrupted job leaves none of its files under their final names.
#[derive(Debug)]
pub struct OutputBatch {
    /// False for a batch opened inside another one (it leaves the renames to the outer).
    owner: bool,
    _not_send: std::marker::PhantomData<*const ()>,
}

impl OutputBatch {
    pub fn begin() -> Self {
        let owner = BATCH.with(|b| {
            let mut b = b.borrow_mut();
            let fresh = b.is_none();
            if fresh {
                *b = Some(Vec::new());
            }
            fresh
        });
        OutputBatch { owner, _not_send: std::marker::PhantomData }
    }

    /// Rename every held output into place, in the order they were finished.
    pub fn commit(self) -> Result<()> {
        if !self.owner {
            return Ok(());
        }
        let held = BATCH.with(|b| b.borrow_mut().take()).unwrap_or_default();
        for (k, (temp, final_path)) in held.iter().enumerate() {
            if let Err(e) = rename_into_place(temp, final_path) {
                for (rest, _) in &held[k..] {
                    let _ = std::fs::remove_file(rest);
                    forget_pending(rest);
                }
                return Err(e);
            }
        }
        Ok(())
    }
}

impl Drop for OutputBatch {
    fn drop(&mut self) {
        if !self.owner {
            return;
        }
        for (temp, _) in BATCH.with(|b| b.borrow_mut().take()).unwrap_or_default() {
            let _ = std::fs::remove_file(&temp);
            forget_pending(&temp);
        }
    }
}

/// A directory output being written (one file per table): a temporary directory beside
/// `final_path`, renamed into place when complete. An existing directory is replaced only
/// with `force`, and only when it holds `marker` (a file every such output has), so that
/// `--force` never deletes a directory we did not write.
#[derive(Debug)]
pub struct AtomicDir {
    final_path: PathBuf,
    temp_path: PathBuf,
    committed: bool,
}

impl AtomicDir {
    pub fn prepare(final_path: &Path, force: bool, marker: &str) -> Result<Self> {
        let dir = output_parent(final_path)?;
        if final_path.exists() || final_path.is_symlink() {
            if !force {
                return Err(Error::OutputExists(final_path.to_path_buf()));
            }
            if !final_path.is_dir() || final_path.is_symlink() || !final_path.join(marker).is_file() {
                return Err(Error::Usage(format!(
                    "{}: exists and is not a table directory written by tagsieve (no {marker} in it); not replacing it, even with --force",
                    final_path.display()
                )));
            }
        }
        let mut p = pending();
        if p.interrupted {
            return Err(Error::Interrupted);
        }
        let temp_path = tempfile::Builder::new()
            .prefix(&temp_prefix(final_path))
            .suffix(".partial")
            .tempdir_in(&dir)
            .map_err(|e| Error::io(final_path, e))?
            .keep();
        p.temps.push(temp_path.clone());
        Ok(AtomicDir { final_path: final_path.to_path_buf(), temp_path, committed: false })
    }

    /// Where the writer puts its files.
    pub fn temp_path(&self) -> &Path {
        &self.temp_path
    }

    /// Flush every file, then rename the directory into place (moving an old one aside
    /// first and removing it after).
    pub fn commit(mut self) -> Result<()> {
        sync_tree(&self.temp_path).map_err(|e| Error::io(&self.final_path, e))?;
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let _ = std::fs::set_permissions(&self.temp_path, std::fs::Permissions::from_mode(0o755));
        }
        let mut p = pending();
        if p.interrupted {
            return Err(Error::Interrupted);
        }
        let old = if self.final_path.exists() {
            let aside = self.temp_path.with_extension("old");
            std::fs::rename(&self.final_path, &aside).map_err(|e| Error::io(&self.final_path, e))?;
            Some(aside)
        } else {
            None
        };
        if let Err(e) = std::fs::rename(&self.temp_path, &self.final_path) {
            if let Some(old) = &old {
                let _ = std::fs::rename(old, &self.final_path);
            }
            return Err(Error::io(&self.final_path, e));
        }
        p.temps.retain(|q| q != &self.temp_path);
        self.committed = true;
        drop(p);
        if let Some(old) = old {
            let _ = std::fs::remove_dir_all(old);
        }
        Ok(())
    }
}

impl Drop for AtomicDir {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.temp_path);
            forget_pending(&self.temp_path);
        }
    }
}

/// fsync every file under `dir`.
fn sync_tree(dir: &Path) -> std::io::Result<()> {
    for e in std::fs::read_dir(dir)? {
        let p = e?.path();
        if p.is_dir() {
            sync_tree(&p)?;
        } else {
            std::fs::File::open(&p)?.sync_all()?;
        }
    }
    Ok(())
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
    fn batch_holds_renames_until_commit_and_drop_removes_them() {
        let d = tempfile::tempdir().unwrap();
        let (p, q) = (d.path().join("a.tsieve"), d.path().join("run.toml"));
        let batch = OutputBatch::begin();
        write_bytes(&p, b"a", false).unwrap();
        write_bytes(&q, b"b", false).unwrap();
        assert!(!p.exists() && !q.exists(), "nothing under a final name before the batch ends");
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 2, "two held temporaries");
        batch.commit().unwrap();
        assert_eq!((std::fs::read(&p).unwrap(), std::fs::read(&q).unwrap()), (b"a".to_vec(), b"b".to_vec()));

        let e = tempfile::tempdir().unwrap();
        let batch = OutputBatch::begin();
        write_bytes(&e.path().join("x"), b"x", false).unwrap();
        drop(batch);
        assert_eq!(std::fs::read_dir(e.path()).unwrap().count(), 0, "an abandoned batch leaves nothing");
    }

    #[test]
    fn missing_directory_is_a_usage_error() {
        let e = AtomicOutput::prepare(Path::new("/nonexistent-dir-xyz/out.h5"), false).unwrap_err();
        assert_eq!(e.exit_code(), 2);
    }
}
