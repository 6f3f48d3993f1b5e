//! One file per subcommand; each parses its arguments and calls the library.

pub mod chsh;
pub mod clock_fit;
pub mod common;
pub mod completions;
pub mod count;
pub mod demo;
pub mod import;
pub mod inspect;
pub mod scan;
pub mod simulate;
pub mod sweep;

use tagsieve::Error;

/// Options every subcommand takes.
#[derive(clap::Args, Debug, Clone)]
pub struct Global {
    /// No progress bars or chatter on stderr.
    #[arg(long, short, global = true)]
    pub quiet: bool,
    /// Machine-readable JSON on stdout instead of tables.
    #[arg(long, global = true)]
    pub json: bool,
}

/// Worker threads, for the commands that run parallel work (every one but `completions`).
#[derive(clap::Args, Debug, Clone)]
pub struct ThreadArgs {
    /// Worker threads (count); 0 = one per core.
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub threads: usize,
}

/// How input files are read, for the commands that read tag files (not `simulate`, `demo`
/// or `completions`).
#[derive(clap::Args, Debug, Clone)]
pub struct ReadArgs {
    #[command(flatten)]
    pub threads: ThreadArgs,
    /// Read inputs with buffered I/O instead of memory maps (safer on files that may change).
    #[arg(long)]
    pub no_mmap: bool,
}

impl ReadArgs {
    pub fn read_options(&self) -> tagsieve::read::ReadOptions {
        // mapping by default, as the README documents; --no-mmap for files that may change
        tagsieve::read::ReadOptions { mmap: !self.no_mmap, ..tagsieve::read::ReadOptions::mapped() }
    }
}

/// Size the worker pool once, before any work starts (0 keeps one thread per core).
pub fn configure_threads(threads: usize) {
    if threads > 0 {
        let _ = rayon::ThreadPoolBuilder::new().num_threads(threads).build_global();
    }
}

/// A deprecated spelling kept as a hidden alias: its value (if given) with a warning on
/// stderr naming the spelling to use instead. clap refuses both spellings together.
pub fn deprecated<T>(old_value: Option<T>, old_flag: &str, new_flag: &str) -> Option<T> {
    if old_value.is_some() {
        eprintln!("tagsieve: warning: {old_flag} is deprecated and will be removed; use {new_flag}");
    }
    old_value
}

/// Ctrl-C / SIGTERM: remove registered temporary outputs, then exit 130. SIGBUS from a
/// mapped input that shrank underneath us: a fixed message, temporaries unlinked, exit 1.
pub fn install_signal_handler() {
    #[cfg(unix)]
    tagsieve::guard::install_sigbus_handler();
    let _ = ctrlc::set_handler(|| {
        eprintln!("tagsieve: interrupted; no output was written");
        tagsieve::output::atomic::cleanup_all();
        exit_now(130);
    });
}

/// End the process at once, without atexit handlers: the HDF5 library's handler tears the
/// library down and must not run while another thread is still inside it writing a file.
#[cfg(unix)]
fn exit_now(code: i32) -> ! {
    extern "C" {
        fn _exit(status: i32) -> !;
    }
    // SAFETY: _exit only ends the process; it touches no Rust state.
    unsafe { _exit(code) }
}

#[cfg(not(unix))]
fn exit_now(code: i32) -> ! {
    std::process::exit(code)
}

/// Print an error as one readable line (plus a hint line) and return its exit code. A
/// refused setting is shown under the flag that sets it.
pub fn report_error(e: &Error) -> i32 {
    match e {
        Error::Setting { setting, value, message } => eprintln!("tagsieve: error: {} {value}: {message}", flag_of(setting)),
        _ => eprintln!("tagsieve: error: {e}"),
    }
    if let Some(h) = e.hint() {
        eprintln!("  hint: {h}");
    }
    e.exit_code()
}

/// The flag that sets a job setting (the names the library's [`Error::Setting`] uses).
pub fn flag_of(setting: &str) -> String {
    match setting {
        "reference" => "--reference".into(),
        "delay" => "--delay".into(),
        other => format!("--{}", other.replace('_', "-")),
    }
}

// ---- glue shared by the subcommands ----

use std::path::{Path, PathBuf};
use tagsieve::output::{self, Document};
use tagsieve::Result;

/// What every job is told: --quiet and the command line for provenance.
pub fn context(g: &Global) -> tagsieve::jobs::Context {
    tagsieve::jobs::Context { quiet: g.quiet, command_line: common::command_line() }
}

/// Whether the job builds its Document: a table file (`-o`) or `--json` wants it.
pub fn wants_document(out: &common::OutputArgs, g: &Global) -> bool {
    out.output.is_some() || g.json
}

/// A job's Document: to `-o` in the chosen format, and with `--json` the same Document as
/// JSON on stdout (unless `-o -` took stdout already).
pub fn emit_document(doc: Option<&Document>, args: &common::OutputArgs, g: &Global) -> Result<()> {
    let Some(doc) = doc else { return Ok(()) };
    if let Some(out) = &args.output {
        let dest = if out.as_os_str() == "-" { None } else { Some(out.as_path()) };
        output::write_document(doc, dest, args.format.into(), args.force)?;
    }
    if g.json && !args.to_stdout() {
        output::json::print_document(doc)?;
    }
    Ok(())
}

/// `plot.png` → `plot-1-3.png` when there are several pairs.
pub fn per_pair_path(base: &Path, a: tagsieve::Channel, b: tagsieve::Channel, n: usize) -> PathBuf {
    if n <= 1 {
        return base.to_path_buf();
    }
    let stem = base.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    let ext = base.extension().map(|s| format!(".{}", s.to_string_lossy())).unwrap_or_default();
    base.with_file_name(format!("{stem}-{a}-{b}{ext}"))
}
