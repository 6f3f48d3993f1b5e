//! Interrupted runs: SIGINT or SIGTERM in the middle of any long command (simulate, import,
//! count, sweep, scan, chsh) exits 130, leaves the inputs byte for byte as they were and
//! leaves no output behind: nothing under the final name, no `.partial` temporary. SIGKILL
//! while an output is being written leaves nothing under the final name; its temporary
//! (`.NAME.*.partial` beside the output) cannot be removed by a killed process and is the
//! one leftover allowed.
//!
//! A signal is sent at a moment read off the running process, never after a fixed sleep:
//! once it has mapped its input (so it is computing), or once its output temporary exists
//! (so it is writing).

mod common;

use common::tagsieve;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

const DELAYS: [&str; 6] = ["--delay", "2=850", "--delay", "3=41250", "--delay", "4=40600"];

/// Inputs shared by every test: a busy simulated run (four 2 s blocks at 5·10^6 pairs/s,
/// about 3.7·10^6 tags each) and two per-channel arrays for `import`.
struct Inputs {
    _dir: tempfile::TempDir,
    run: PathBuf,
    arrays: [PathBuf; 2],
    sums: BTreeMap<PathBuf, u64>,
}

fn inputs() -> &'static Inputs {
    static INPUTS: OnceLock<Inputs> = OnceLock::new();
    INPUTS.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let run = dir.path().join("run");
        let st = tagsieve()
            .args(["--quiet", "simulate", "--pair-rate-hz", "5e6", "--duration-s", "2", "-o"])
            .arg(&run)
            .stdout(Stdio::null())
            .status()
            .unwrap();
        assert!(st.success(), "simulate for the fixture failed");
        let arrays = [dir.path().join("ch1.u64"), dir.path().join("ch2.u64")];
        for (k, p) in arrays.iter().enumerate() {
            // 4·10^6 ascending timestamps per channel, 250 ns apart
            let bytes: Vec<u8> = (0..4_000_000u64).flat_map(|i| (i * 250_000 + k as u64 * 77).to_le_bytes()).collect();
            std::fs::write(p, bytes).unwrap();
        }
        let sums = checksums(dir.path());
        assert!(sums.len() >= 7, "four blocks, run.toml and two arrays");
        Inputs { _dir: dir, run, arrays, sums }
    })
}

/// XXH3-64 of every file under `dir`.
fn checksums(dir: &Path) -> BTreeMap<PathBuf, u64> {
    let mut out = BTreeMap::new();
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            out.extend(checksums(&p));
        } else {
            out.insert(p.clone(), xxhash_rust::xxh3::xxh3_64(&std::fs::read(&p).unwrap()));
        }
    }
    out
}

fn assert_inputs_untouched() {
    let i = inputs();
    assert_eq!(checksums(i._dir.path()), i.sums, "an input changed");
}

/// When to send the signal.
#[derive(Clone, Copy)]
enum Moment<'a> {
    /// The process has mapped this input: it is reading and computing.
    Mapped(&'a Path),
    /// A temporary exists in this directory: an output is being written.
    Writing(&'a Path),
    /// Two temporaries exist in this directory (a second file of a multi-file job is being
    /// written), or a file under a final name appeared there.
    SecondFile(&'a Path),
}

fn partials(dir: &Path) -> Vec<String> {
    let Ok(rd) = std::fs::read_dir(dir) else { return vec![] };
    rd.filter_map(|e| e.ok()).map(|e| e.file_name().to_string_lossy().into_owned()).filter(|n| n.contains(".partial")).collect()
}

fn finals(dir: &Path) -> Vec<String> {
    let Ok(rd) = std::fs::read_dir(dir) else { return vec![] };
    rd.filter_map(|e| e.ok()).map(|e| e.file_name().to_string_lossy().into_owned()).filter(|n| !n.contains(".partial")).collect()
}

fn reached(child: &Child, m: Moment) -> bool {
    match m {
        Moment::Mapped(p) => {
            let maps = std::fs::read_to_string(format!("/proc/{}/maps", child.id())).unwrap_or_default();
            let p = p.canonicalize().unwrap();
            maps.lines().any(|l| l.ends_with(&*p.to_string_lossy()))
        }
        Moment::Writing(d) => !partials(d).is_empty(),
        Moment::SecondFile(d) => partials(d).len() >= 2 || !finals(d).is_empty(),
    }
}

/// Start `args`, wait for the moment, send `signal` ("INT", "TERM" or "KILL"), wait for the
/// exit (a process still running 120 s later has hung: killed, and the test fails).
fn interrupt(args: &[&str], moment: Moment, signal: &str) -> ExitStatus {
    let mut child = tagsieve().args(args).stdout(Stdio::null()).stderr(Stdio::null()).spawn().unwrap();
    let t0 = Instant::now();
    while !reached(&child, moment) {
        if let Some(st) = child.try_wait().unwrap() {
            panic!("{args:?} ended ({st}) before the moment to interrupt it came");
        }
        assert!(t0.elapsed() < Duration::from_secs(300), "{args:?}: the moment never came");
        std::thread::sleep(Duration::from_millis(1));
    }
    if signal == "KILL" {
        child.kill().unwrap();
    } else {
        let st = Command::new("kill").args(["-s", signal, &child.id().to_string()]).status().unwrap();
        assert!(st.success(), "kill -s {signal} failed");
    }
    let t1 = Instant::now();
    loop {
        if let Some(st) = child.try_wait().unwrap() {
            return st;
        }
        if t1.elapsed() > Duration::from_secs(120) {
            let _ = child.kill();
            panic!("{args:?} still running 120 s after SIG{signal}");
        }
        std::thread::sleep(Duration::from_millis(5));
    }
}

/// Interrupt `args` (whose output goes to `out_dir`) with SIGINT, then SIGTERM; each time
/// exit code 130, nothing left in `out_dir` and the inputs unchanged. Then the same command
/// uninterrupted must write `expect` in `out_dir` (so the interrupted runs had output to lose).
fn check_command(args: &[&str], moment: impl Fn(&Path) -> Moment<'static>, out_dir: &Path, expect: &[&str]) {
    for signal in ["INT", "TERM"] {
        let st = interrupt(args, moment(out_dir), signal);
        assert_eq!(st.code(), Some(130), "{args:?} after SIG{signal}: {st}");
        assert_eq!(partials(out_dir), Vec::<String>::new(), "{args:?}: temporaries left after SIG{signal}");
        let left: Vec<String> = finals(out_dir).into_iter().filter(|n| expect.contains(&n.as_str())).collect();
        assert!(left.is_empty(), "{args:?}: {left:?} written although interrupted by SIG{signal}");
        assert_inputs_untouched();
    }
    let st = tagsieve().args(args).stdout(Stdio::null()).stderr(Stdio::null()).status().unwrap();
    assert!(st.success(), "{args:?} uninterrupted: {st}");
    for f in expect {
        assert!(out_dir.join(f).is_file(), "{args:?} uninterrupted did not write {f}");
    }
    assert_eq!(partials(out_dir), Vec::<String>::new());
    assert_inputs_untouched();
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Leak a path so a `Moment` can borrow it for the test's whole life.
fn keep(p: &Path) -> &'static Path {
    Box::leak(p.to_path_buf().into_boxed_path())
}

fn block(name: &str) -> &'static Path {
    keep(&inputs().run.join(format!("{name}.tsieve")))
}

#[test]
fn count_interrupted_while_counting() {
    let out = tempfile::tempdir().unwrap();
    let h5 = out.path().join("ab.h5");
    let mut args = vec!["--quiet", "count", s(block("ab")), "-w", "500", "-o", s(&h5)];
    args.extend(DELAYS);
    check_command(&args, |_| Moment::Mapped(block("ab")), out.path(), &["ab.h5"]);
}

#[test]
fn sweep_interrupted_while_sweeping() {
    let out = tempfile::tempdir().unwrap();
    let h5 = out.path().join("sweep.h5");
    let mut args = vec!["--quiet", "sweep", s(block("abp")), "--pass", "stream", "-o", s(&h5)];
    args.extend(DELAYS);
    check_command(&args, |_| Moment::Mapped(block("abp")), out.path(), &["sweep.h5"]);
}

#[test]
fn scan_interrupted_while_scanning() {
    let out = tempfile::tempdir().unwrap();
    let h5 = out.path().join("scan.h5");
    let args = ["--quiet", "scan", s(block("apb")), "-o", s(&h5)];
    check_command(&args, |_| Moment::Mapped(block("apb")), out.path(), &["scan.h5"]);
}

#[test]
fn chsh_interrupted_while_counting_the_run() {
    let out = tempfile::tempdir().unwrap();
    let h5 = out.path().join("chsh.h5");
    let manifest = keep(&inputs().run.join("run.toml"));
    let args = ["--quiet", "chsh", s(manifest), "-w", "500", "-o", s(&h5)];
    check_command(&args, |_| Moment::Mapped(block("ab")), out.path(), &["chsh.h5"]);
}

#[test]
fn import_interrupted_while_converting() {
    let out = tempfile::tempdir().unwrap();
    let i = inputs();
    let (a, b) = (format!("1={}", s(&i.arrays[0])), format!("2={}", s(&i.arrays[1])));
    let sieve = out.path().join("both.tsieve");
    let args = ["--quiet", "import", &a, &b, "-o", s(&sieve)];
    check_command(&args, |_| Moment::Mapped(keep(&i.arrays[0])), out.path(), &["both.tsieve"]);
}

/// A simulated run is one job: interrupted after its first block file is finished, it
/// leaves no block file and no run.toml (the files are renamed into place together).
#[test]
fn simulate_interrupted_between_blocks_leaves_no_block() {
    let out = tempfile::tempdir().unwrap();
    let run = keep(&out.path().join("sim"));
    let args = ["--quiet", "simulate", "--pair-rate-hz", "1e6", "--duration-s", "1", "-o", s(run)];
    check_command(&args, |_| Moment::SecondFile(run), run, &["ab.tsieve", "abp.tsieve", "apb.tsieve", "apbp.tsieve", "run.toml"]);
}

/// A large delay histogram (2·10^6 bins of 1 ps) takes long enough to write that the
/// signal lands inside the HDF5 library.
fn big_scan(h5: &Path) -> Vec<String> {
    let args = ["--quiet", "scan", s(block("ab")), "--pairs", "1:3", "--delay", "3=41250", "--half-range-ps", "1000000", "--bin-ps", "1", "-o", s(h5)];
    args.iter().map(|a| a.to_string()).collect()
}

#[test]
fn interrupted_while_the_hdf5_file_is_written() {
    let out = tempfile::tempdir().unwrap();
    let h5 = out.path().join("scan.h5");
    let args = big_scan(&h5);
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    check_command(&args, |d| Moment::Writing(keep(d)), out.path(), &["scan.h5"]);
}

#[test]
fn sigkill_while_writing_leaves_nothing_under_the_final_name() {
    let out = tempfile::tempdir().unwrap();
    let h5 = out.path().join("scan.h5");
    let args = big_scan(&h5);
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let st = interrupt(&args, Moment::Writing(keep(out.path())), "KILL");
    assert!(!st.success(), "SIGKILL must end the run: {st}");
    assert!(!h5.exists(), "a killed write left a file under the final name");
    // The only allowed leftover: the hidden temporary, which a later run does not mistake
    // for the output and which is safe to delete.
    assert!(partials(out.path()).iter().all(|n| n.starts_with(".scan.h5.") && n.ends_with(".partial")));
    assert_inputs_untouched();
}
