//! The SIGBUS guard: a mapped input truncated while we read it makes page accesses fault
//! with SIGBUS. This module keeps lock-free lists of live mappings and pending temporary
//! outputs, and a handler that turns such a fault into a clear message and exit code 1.
//!
//! Everything the handler touches is async-signal-safe: fixed arrays of atomics, `write(2)`,
//! `unlink(2)` on C strings built before the signal, and `_exit(2)`. A SIGBUS whose address
//! lies outside every registered mapping is not ours: the default action is restored and
//! the fault repeats as an ordinary crash.

use std::ffi::{c_char, CString};
use std::path::Path;
use std::sync::atomic::{AtomicBool, AtomicPtr, AtomicUsize, Ordering};

/// The fixed message written to stderr when a mapped input faults.
pub const MESSAGE: &str =
    "tagsieve: error: input file changed size while mapped; rerun on a stable copy or with --no-mmap\n";

/// Mapped ranges tracked at once; a mapping beyond these is still read, only unguarded.
const MAP_SLOTS: usize = 256;
/// Pending temporary outputs tracked at once.
const TEMP_SLOTS: usize = 64;

#[allow(clippy::declare_interior_mutable_const)]
const ZERO: AtomicUsize = AtomicUsize::new(0);
#[allow(clippy::declare_interior_mutable_const)]
const NULL: AtomicPtr<c_char> = AtomicPtr::new(std::ptr::null_mut());

/// (start, length) of each live mapping; start 0 marks a free slot.
static MAP_START: [AtomicUsize; MAP_SLOTS] = [ZERO; MAP_SLOTS];
static MAP_LEN: [AtomicUsize; MAP_SLOTS] = [ZERO; MAP_SLOTS];
/// NUL-terminated paths of temporaries to unlink; null marks a free slot.
static TEMPS: [AtomicPtr<c_char>; TEMP_SLOTS] = [NULL; TEMP_SLOTS];
static INSTALLED: AtomicBool = AtomicBool::new(false);

/// A registered mapping; dropping it takes the range off the list.
#[derive(Debug)]
pub struct MapToken(Option<usize>);

impl Drop for MapToken {
    fn drop(&mut self) {
        if let Some(i) = self.0 {
            MAP_START[i].store(0, Ordering::SeqCst);
        }
    }
}

/// Record that `len` bytes at `start` are a mapped input file.
pub fn register_mapping(start: *const u8, len: usize) -> MapToken {
    let start = start as usize;
    if start == 0 || len == 0 {
        return MapToken(None);
    }
    for i in 0..MAP_SLOTS {
        // Length first, then claim the slot: the handler reads start, then length.
        if MAP_START[i].load(Ordering::SeqCst) == 0 {
            MAP_LEN[i].store(len, Ordering::SeqCst);
            if MAP_START[i].compare_exchange(0, start, Ordering::SeqCst, Ordering::SeqCst).is_ok() {
                return MapToken(Some(i));
            }
        }
    }
    MapToken(None)
}

/// A registered temporary output; dropping it takes the path off the list.
#[derive(Debug)]
pub struct TempToken(Option<usize>);

impl Drop for TempToken {
    fn drop(&mut self) {
        if let Some(i) = self.0 {
            // The string is leaked on purpose (a few bytes per output): the handler may
            // have loaded the pointer just before this swap, so it must stay valid.
            TEMPS[i].store(std::ptr::null_mut(), Ordering::SeqCst);
        }
    }
}

/// Add a temporary output path for the handler to unlink.
pub fn register_temp(path: &Path) -> TempToken {
    use std::os::unix::ffi::OsStrExt;
    let Ok(c) = CString::new(path.as_os_str().as_bytes()) else { return TempToken(None) };
    let raw = c.into_raw();
    for (i, slot) in TEMPS.iter().enumerate() {
        if slot.compare_exchange(std::ptr::null_mut(), raw, Ordering::SeqCst, Ordering::SeqCst).is_ok() {
            return TempToken(Some(i));
        }
    }
    // SAFETY: `raw` came from `into_raw` just above and was not published.
    drop(unsafe { CString::from_raw(raw) });
    TempToken(None)
}

/// Whether `addr` lies in a registered mapping.
fn in_mapping(addr: usize) -> bool {
    (0..MAP_SLOTS).any(|i| {
        let start = MAP_START[i].load(Ordering::SeqCst);
        start != 0 && addr >= start && addr - start < MAP_LEN[i].load(Ordering::SeqCst)
    })
}

extern "C" fn on_sigbus(sig: libc::c_int, info: *mut libc::siginfo_t, _ctx: *mut libc::c_void) {
    // SAFETY: the kernel hands a valid siginfo to an SA_SIGINFO handler.
    let addr = unsafe { (*info).si_addr() } as usize;
    if !in_mapping(addr) {
        // Not a mapped input: restore the default action; returning re-runs the faulting
        // access, which now ends the process as an ordinary SIGBUS.
        // SAFETY: signal(2) is async-signal-safe.
        unsafe { libc::signal(sig, libc::SIG_DFL) };
        return;
    }
    // SAFETY: write, unlink and _exit are async-signal-safe; the paths are NUL-terminated
    // strings that are never freed.
    unsafe {
        libc::write(2, MESSAGE.as_ptr().cast(), MESSAGE.len());
        for slot in &TEMPS {
            let p = slot.load(Ordering::SeqCst);
            if !p.is_null() {
                libc::unlink(p);
            }
        }
        libc::_exit(1);
    }
}

/// Install the SIGBUS handler (once; later calls do nothing). Unix only.
pub fn install_sigbus_handler() {
    if INSTALLED.swap(true, Ordering::SeqCst) {
        return;
    }
    // SAFETY: a zeroed sigaction is a valid starting value; the handler only does
    // async-signal-safe work (see `on_sigbus`).
    unsafe {
        let mut sa: libc::sigaction = std::mem::zeroed();
        let handler: extern "C" fn(libc::c_int, *mut libc::siginfo_t, *mut libc::c_void) = on_sigbus;
        sa.sa_sigaction = handler as usize;
        sa.sa_flags = libc::SA_SIGINFO;
        libc::sigemptyset(&mut sa.sa_mask);
        libc::sigaction(libc::SIGBUS, &sa, std::ptr::null_mut());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ranges_are_found_while_registered_only() {
        let buf = vec![0u8; 4096];
        let t = register_mapping(buf.as_ptr(), buf.len());
        let a = buf.as_ptr() as usize;
        assert!(in_mapping(a) && in_mapping(a + 4095) && !in_mapping(a + 4096));
        drop(t);
        assert!(!in_mapping(a));
    }

    #[test]
    fn temp_slots_fill_and_free() {
        let t = register_temp(Path::new("/tmp/x.partial"));
        let i = t.0.expect("a free slot");
        assert!(!TEMPS[i].load(Ordering::SeqCst).is_null());
        drop(t);
        assert!(TEMPS[i].load(Ordering::SeqCst).is_null());
    }
}
