//! One file per subcommand; each parses its arguments and calls the library.

pub mod chsh;
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
    /// Worker threads (count); 0 = one per core.
    #[arg(long, global = true, default_value_t = 0, value_name = "N")]
    pub threads: usize,
    /// Read inputs with buffered I/O instead of memory maps (safer on files that may change).
    #[arg(long, global = true)]
    pub no_mmap: bool,
}

impl Global {
    pub fn read_options(&self) -> tagsieve::read::ReadOptions {
        tagsieve::read::ReadOptions { mmap: !self.no_mmap, ..Default::default() }
    }
}

pub fn configure_threads(g: &Global) {
    if g.threads > 0 {
        let _ = rayon::ThreadPoolBuilder::new().num_threads(g.threads).build_global();
    }
}

/// Ctrl-C / SIGTERM: remove registered temporary outputs, then exit 130.
pub fn install_signal_handler() {
    let _ = ctrlc::set_handler(|| {
        tagsieve::output::atomic::cleanup_all();
        eprintln!("tagsieve: interrupted; no output was written");
        std::process::exit(130);
    });
}

/// Print an error as one readable line (plus a hint line) and return its exit code.
pub fn report_error(e: &Error) -> i32 {
    eprintln!("tagsieve: error: {e}");
    if let Some(h) = e.hint() {
        eprintln!("  hint: {h}");
    }
    e.exit_code()
}
