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

/// The fixed message written to stderr when a mapped input faults, after
/// `tagsieve: error: PATH: ` naming the file.
pub const MESSAGE: &str = "input file changed size while mapped; rerun on a stable copy or with --no-mmap\n";
const PREFIX: &str = "tagsieve: error: ";

/// Mapped ranges tracked at once; a mapping beyond these is still read, only unguarded.
const MAP_SLOTS: usize = 256;
/// Pending temporary outputs tracked at once.
const TEMP_SLOTS: usize = 64;

#[allow(clippy::declare_interior_mutable_const)]
const ZERO: AtomicUsize = AtomicUsize::new(0);
#[allow(clippy::declare_interior_mutable_const)]
const NULL: AtomicPtr<c_char> = AtomicPtr::new(std::ptr::null_mut());

/// A slot being filled in (no mapping starts at address 1).
const CLAIMED: usize = 1;

/// (start, length) of each live mapping; start 0 marks a free slot, [`CLAIMED`] a busy one.
static MAP_START: [AtomicUsize; MAP_SLOTS] = [ZERO; MAP_SLOTS];
static MAP_LEN: [AtomicUsize; MAP_SLOTS] = [ZERO; MAP_SLOTS];
/// NUL-terminated path of each mapping's file (for the message); never freed.
static MAP_PATH: [AtomicPtr<c_char>; MAP_SLOTS] = [NULL; MAP_SLOTS];
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

/// Record that `len` bytes at `start` are the mapped input file `path`.
pub fn register_mapping(start: *const u8, len: usize, path: &Path) -> MapToken {
    let start = start as usize;
    if start == 0 || len == 0 {
        return MapToken(None);
    }
    for i in 0..MAP_SLOTS {
        // Claim the slot, then fill in the length, then publish the start: the handler
        // skips claimed-but-unpublished slots, and two threads never share a slot.
        if MAP_START[i].compare_exchange(0, CLAIMED, Ordering::SeqCst, Ordering::SeqCst).is_ok() {
            MAP_LEN[i].store(len, Ordering::SeqCst);
            // Leaked on purpose (a few bytes per input): the handler may still hold it.
            MAP_PATH[i].store(c_path(path).map_or(std::ptr::null_mut(), CString::into_raw), Ordering::SeqCst);
            MAP_START[i].store(start, Ordering::SeqCst);
            return MapToken(Some(i));
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
    let Some(c) = c_path(path) else { return TempToken(None) };
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

fn c_path(path: &Path) -> Option<CString> {
    use std::os::unix::ffi::OsStrExt;
    CString::new(path.as_os_str().as_bytes()).ok()
}

/// The slot of the registered mapping holding `addr`.
fn mapping_at(addr: usize) -> Option<usize> {
    (0..MAP_SLOTS).find(|&i| {
        let start = MAP_START[i].load(Ordering::SeqCst);
        start > CLAIMED && addr >= start && addr - start < MAP_LEN[i].load(Ordering::SeqCst)
    })
}

extern "C" fn on_sigbus(sig: libc::c_int, info: *mut libc::siginfo_t, _ctx: *mut libc::c_void) {
    // SAFETY: the kernel hands a valid siginfo to an SA_SIGINFO handler.
    let addr = unsafe { (*info).si_addr() } as usize;
    let Some(slot) = mapping_at(addr) else {
        // Not a mapped input: restore the default action; returning re-runs the faulting
        // access, which now ends the process as an ordinary SIGBUS.
        // SAFETY: signal(2) is async-signal-safe.
        unsafe { libc::signal(sig, libc::SIG_DFL) };
        return;
    };
    // SAFETY: write, unlink and _exit are async-signal-safe; the paths are NUL-terminated
    // strings that are never freed.
    unsafe {
        libc::write(2, PREFIX.as_ptr().cast(), PREFIX.len());
        let path = MAP_PATH[slot].load(Ordering::SeqCst);
        if !path.is_null() {
            libc::write(2, path.cast(), libc::strlen(path));
            libc::write(2, b": ".as_ptr().cast(), 2);
        }
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
        let t = register_mapping(buf.as_ptr(), buf.len(), Path::new("/tmp/x.u64"));
        let a = buf.as_ptr() as usize;
        let i = mapping_at(a).expect("registered");
        assert_eq!(mapping_at(a + 4095), Some(i));
        assert_eq!(mapping_at(a + 4096), None);
        assert!(!MAP_PATH[i].load(Ordering::SeqCst).is_null());
        drop(t);
        assert_eq!(mapping_at(a), None);
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
