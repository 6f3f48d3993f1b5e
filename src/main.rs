//! The `tagsieve` command line: clap parsing and dispatch only; the work lives in the library.

mod cli;

use clap::{Parser, Subcommand};
use std::process::ExitCode;

/// Time-tag stream processor for entangled-photon experiments.
///
/// Exit codes: 0 done; 1 runtime failure; 2 bad input or usage; 130 interrupted.
#[derive(Parser, Debug)]
#[command(
    name = "tagsieve",
    version,
    about,
    long_about = None,
    propagate_version = true,
    after_help = "Exit codes: 0 done; 1 runtime failure (I/O, full disk, input changed while read); 2 bad input or usage; 130 interrupted (no output left behind)."
)]
pub(crate) struct Cli {
    #[command(flatten)]
    global: cli::Global,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
pub(crate) enum Command {
    /// Check tag files: per-channel events, span, rates, gaps, order problems.
    Inspect(cli::inspect::Args),
    /// Convert per-channel arrays or interleaved records into a container file.
    Import(cli::import::Args),
    /// Simulate a run of the entangled-pair source and four detectors.
    Simulate(cli::simulate::Args),
    /// Delay scan: histogram of arrival-time differences per pair; propose delays.
    Scan(cli::scan::Args),
    /// Window sweep: coincidences, accidentals, CAR against window; recommend one.
    Sweep(cli::sweep::Args),
    /// Count coincidences and accidentals at one window; write the tables.
    Count(cli::count::Args),
    /// CHSH analysis of a run manifest: E per setting pair, S, σ_S, significance.
    Chsh(cli::chsh::Args),
    /// Fit the clock map between two recorders from the tags alone; write a clock file.
    ClockFit(cli::clock_fit::Args),
    /// The whole pipeline on simulated demo data, into one folder.
    Demo(cli::demo::Args),
    /// Print a shell completion script.
    Completions(cli::completions::Args),
}

impl Command {
    /// The worker-thread count asked for; 0 (one per core) where the command takes none.
    fn threads(&self) -> usize {
        match self {
            Command::Inspect(a) => a.read.threads.threads,
            Command::Import(a) => a.read.threads.threads,
            Command::Simulate(a) => a.threads.threads,
            Command::Scan(a) => a.input.read.threads.threads,
            Command::Sweep(a) => a.input.read.threads.threads,
            Command::Count(a) => a.input.read.threads.threads,
            Command::Chsh(a) => a.read.threads.threads,
            Command::ClockFit(a) => a.read.threads.threads,
            Command::Demo(a) => a.threads.threads,
            Command::Completions(_) => 0,
        }
    }
}

fn main() -> ExitCode {
    // A closed pipe on stdout (`tagsieve inspect --json | head`) ends the process quietly,
    // as for other Unix filters, instead of a panic in println!.
    #[cfg(unix)]
    // SAFETY: restoring the default disposition of SIGPIPE before any thread starts.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    cli::install_signal_handler();
    cli::configure_threads(cli.command.threads());
    let result = match cli.command {
        Command::Inspect(a) => cli::inspect::run(a, &cli.global),
        Command::Import(a) => cli::import::run(a, &cli.global),
        Command::Simulate(a) => cli::simulate::run(a, &cli.global),
        Command::Scan(a) => cli::scan::run(a, &cli.global),
        Command::Sweep(a) => cli::sweep::run(a, &cli.global),
        Command::Count(a) => cli::count::run(a, &cli.global),
        Command::Chsh(a) => cli::chsh::run(a, &cli.global),
        Command::ClockFit(a) => cli::clock_fit::run(a, &cli.global),
        Command::Demo(a) => cli::demo::run(a, &cli.global),
        Command::Completions(a) => cli::completions::run::<Cli>(a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => ExitCode::from(cli::report_error(&e) as u8),
    }
}
