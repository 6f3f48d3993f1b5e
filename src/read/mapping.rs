//! One place that says what a mapping assumes: memory maps with sequential read-ahead,
//! and a buffered-read fallback. Every reader gets its bytes through [`Mapping`]; the
//! size and modification time recorded at open let a pass check the file did not change.

use super::ReadOptions;
use crate::{Error, Result};
use memmap2::Mmap;
use std::borrow::Cow;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::time::SystemTime;

/// An opened input file: either memory-mapped or read on demand with positioned reads.
#[derive(Debug)]
pub struct Mapping {
    path: PathBuf,
    size_bytes: u64,
    mtime: Option<SystemTime>,
    /// Keeps the mapped range on the SIGBUS guard's list (dropped before the map).
    #[cfg(unix)]
    _guard: Option<crate::sys::guard::MapToken>,
    backing: Backing,
}

#[derive(Debug)]
enum Backing {
    Mapped(Mmap),
    Buffered(File),
}

impl Mapping {
    /// Open `path` as `opts` says: mapped (the default) or buffered (`--no-mmap`).
    /// A mapping that the OS refuses falls back to buffered reads.
    pub fn open(path: &Path, opts: ReadOptions) -> Result<Self> {
        if !opts.mmap {
            return Self::open_buffered(path);
        }
        // SAFETY: the contract of `open_mapped` (no truncation or rewrite while we read)
        // is the documented assumption of every mapped reader; `check_unchanged` after
        // each pass catches the size/mtime changes we can see, and `--no-mmap` is the
        // escape hatch for files that may change.
        unsafe { Self::open_mapped(path) }
    }

    /// Map `path` read-only and ask the kernel for sequential read-ahead (and, on Linux,
    /// huge page-cache folios).
    ///
    /// # Safety
    /// The caller promises that no process truncates, shrinks or rewrites the file while
    /// the mapping (or any slice borrowed from it) is alive. Truncation would make page
    /// accesses fault (SIGBUS); rewriting would change bytes we already validated. Appending
    /// is harmless (we only look at the first `size_bytes` recorded here). The mapped range
    /// is registered with [`crate::sys::guard`], so when the CLI has installed its SIGBUS handler
    /// a broken promise ends the process with a clear message and exit code 1, not a crash.
    pub unsafe fn open_mapped(path: &Path) -> Result<Self> {
        let (file, size_bytes, mtime) = open_regular(path)?;
        if size_bytes == 0 {
            // Zero-length mappings are an error on some systems; nothing to map anyway.
            return Ok(Mapping::new(path, size_bytes, mtime, Backing::Buffered(file)));
        }
        // SAFETY: forwarded to our caller, see above.
        let map = match unsafe { Mmap::map(&file) } {
            Ok(m) => m,
            Err(_) => return Ok(Mapping::new(path, size_bytes, mtime, Backing::Buffered(file))),
        };
        #[cfg(unix)]
        let _ = map.advise(memmap2::Advice::Sequential);
        // Huge-page advice: on Linux, pages this mapping reads in from disk come as 2 MiB
        // page-cache folios mapped whole, so the first touch and the unmapping at the end
        // cost a few ms per GB instead of ~60 ms per GB with 4 KiB pages (the unmapping
        // is serial and used to be a quarter of a `scan`; docs/benchmarks.md). Advice only:
        // refused or ignored, nothing changes but the speed.
        #[cfg(target_os = "linux")]
        let _ = map.advise(memmap2::Advice::HugePage);
        let mut m = Mapping::new(path, size_bytes, mtime, Backing::Mapped(map));
        #[cfg(unix)]
        if let Backing::Mapped(map) = &m.backing {
            m._guard = Some(crate::sys::guard::register_mapping(map.as_ptr(), map.len(), path));
        }
        Ok(m)
    }

    /// Open `path` for positioned buffered reads (no mapping; safe on files that change).
    pub fn open_buffered(path: &Path) -> Result<Self> {
        let (file, size_bytes, mtime) = open_regular(path)?;
        Ok(Mapping::new(path, size_bytes, mtime, Backing::Buffered(file)))
    }

    fn new(path: &Path, size_bytes: u64, mtime: Option<SystemTime>, backing: Backing) -> Self {
        Mapping {
            path: path.to_path_buf(),
            size_bytes,
            mtime,
            #[cfg(unix)]
            _guard: None,
            backing,
        }
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Size recorded at open.
    pub fn size_bytes(&self) -> u64 {
        self.size_bytes
    }

    pub fn is_mapped(&self) -> bool {
        matches!(self.backing, Backing::Mapped(_))
    }

    /// The whole mapped file, when mapped.
    pub fn mapped_bytes(&self) -> Option<&[u8]> {
        match &self.backing {
            Backing::Mapped(m) => Some(&m[..self.size_bytes as usize]),
            Backing::Buffered(_) => None,
        }
    }

    /// `len` bytes at `offset`: borrowed from the mapping, or read into a new buffer.
    pub fn bytes(&self, offset: u64, len: usize) -> Result<Cow<'_, [u8]>> {
        let end = offset.checked_add(len as u64).filter(|&e| e <= self.size_bytes);
        let Some(end) = end else {
            return Err(Error::bad_input(
                &self.path,
                format!("byte offset {offset}"),
                format!("a read of {len} bytes past the end of the {}-byte file", self.size_bytes),
                "a read inside the file",
            ));
        };
        match &self.backing {
            Backing::Mapped(m) => Ok(Cow::Borrowed(&m[offset as usize..end as usize])),
            Backing::Buffered(f) => {
                let mut buf = vec![0u8; len];
                read_exact_at(f, &mut buf, offset).map_err(|e| self.read_error(e))?;
                Ok(Cow::Owned(buf))
            }
        }
    }

    /// `count` little-endian u64 values at `offset`: zero-copy when mapped, aligned and on
    /// a little-endian host; otherwise decoded into an owned vector.
    pub fn u64s_le(&self, offset: u64, count: usize) -> Result<Cow<'_, [u64]>> {
        let len = count.checked_mul(8).ok_or_else(|| Error::Usage(format!("{}: section too large", self.path.display())))?;
        match self.bytes(offset, len)? {
            Cow::Borrowed(b) => Ok(borrow_u64s_le(b)),
            Cow::Owned(b) => Ok(Cow::Owned(decode_u64s_le(&b))),
        }
    }

    /// A short read inside the size recorded at open means the file shrank underneath us.
    fn read_error(&self, e: std::io::Error) -> Error {
        if e.kind() != std::io::ErrorKind::UnexpectedEof {
            return Error::io(&self.path, e);
        }
        let after = std::fs::metadata(&self.path).map_or(0, |m| m.len());
        Error::ChangedUnderneath { path: self.path.clone(), before: self.size_bytes, after }
    }

    /// Compare the file's size and modification time with those recorded at open.
    pub fn check_unchanged(&self) -> Result<()> {
        let meta = std::fs::metadata(&self.path).map_err(|e| Error::io(&self.path, e))?;
        let changed_mtime = meta.modified().ok() != self.mtime;
        if meta.len() != self.size_bytes || changed_mtime {
            return Err(Error::ChangedUnderneath { path: self.path.clone(), before: self.size_bytes, after: meta.len() });
        }
        Ok(())
    }
}

/// Open a regular file, refusing directories and other non-files with a clear error.
/// The type is checked with stat before opening: opening a FIFO would block until a
/// writer appears.
fn open_regular(path: &Path) -> Result<(File, u64, Option<SystemTime>)> {
    let meta = std::fs::metadata(path).map_err(|e| open_error(path, e))?;
    if meta.is_dir() {
        let e = std::io::Error::new(std::io::ErrorKind::IsADirectory, "is a directory, expected a tag file");
        return Err(Error::io(path, e));
    }
    if !meta.is_file() {
        let what = "is not a regular file (a FIFO, socket or device), expected a tag file; copy the data into a file first";
        return Err(Error::io(path, std::io::Error::new(std::io::ErrorKind::InvalidInput, what)));
    }
    let file = File::open(path).map_err(|e| open_error(path, e))?;
    let meta = file.metadata().map_err(|e| Error::io(path, e))?;
    Ok((file, meta.len(), meta.modified().ok()))
}

/// Say what was expected for the two common failures; keep the OS text otherwise.
fn open_error(path: &Path, e: std::io::Error) -> Error {
    let expected = match e.kind() {
        std::io::ErrorKind::NotFound => "expected an existing tag file",
        std::io::ErrorKind::PermissionDenied => "expected a file this user may read",
        _ => return Error::io(path, e),
    };
    Error::io(path, std::io::Error::new(e.kind(), format!("{e}, {expected}")))
}

#[cfg(unix)]
fn read_exact_at(f: &File, buf: &mut [u8], offset: u64) -> std::io::Result<()> {
    std::os::unix::fs::FileExt::read_exact_at(f, buf, offset)
}

#[cfg(not(unix))]
fn read_exact_at(f: &File, buf: &mut [u8], offset: u64) -> std::io::Result<()> {
    use std::io::{Read, Seek, SeekFrom};
    let mut f = f.try_clone()?;
    f.seek(SeekFrom::Start(offset))?;
    f.read_exact(buf)
}

/// Reinterpret little-endian bytes as u64 without copying where the host allows.
pub fn borrow_u64s_le(b: &[u8]) -> Cow<'_, [u64]> {
    if cfg!(target_endian = "little") {
        // SAFETY: every bit pattern is a valid u64; align_to only hands out the aligned middle.
        let (head, mid, tail) = unsafe { b.align_to::<u64>() };
        if head.is_empty() && tail.is_empty() {
            return Cow::Borrowed(mid);
        }
    }
    Cow::Owned(decode_u64s_le(b))
}

/// Decode little-endian u64 values (copying; any alignment, any host).
pub fn decode_u64s_le(b: &[u8]) -> Vec<u64> {
    b.chunks_exact(8).map(|c| u64::from_le_bytes(c.try_into().expect("8-byte chunk"))).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mapped_and_buffered_agree_and_detect_change() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("x.u64");
        let vals: Vec<u8> = [1u64, 2, 300].iter().flat_map(|v| v.to_le_bytes()).collect();
        std::fs::write(&p, &vals).unwrap();
        for mmap in [true, false] {
            let m = Mapping::open(&p, ReadOptions { mmap, ..Default::default() }).unwrap();
            assert_eq!(m.is_mapped(), mmap);
            assert_eq!(&*m.u64s_le(8, 2).unwrap(), &[2, 300]);
            assert!(m.bytes(20, 8).is_err());
            m.check_unchanged().unwrap();
        }
        let m = Mapping::open_buffered(&p).unwrap();
        std::fs::write(&p, &vals[..16]).unwrap();
        assert!(matches!(m.check_unchanged(), Err(Error::ChangedUnderneath { before: 24, after: 16, .. })));
    }

    #[test]
    fn directory_is_refused_with_exit_code_2() {
        let d = tempfile::tempdir().unwrap();
        let e = Mapping::open(d.path(), ReadOptions::mapped()).unwrap_err();
        assert!(e.to_string().contains("is a directory"), "{e}");
        assert_eq!(e.exit_code(), 2);
    }
}
