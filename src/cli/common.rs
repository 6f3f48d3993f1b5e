//! Argument groups several subcommands share, and the small glue between them and the
//! library (opening inputs, delays, output destinations, printing).

use std::path::{Path, PathBuf};
use tagsieve::engine::count::DEFAULT_SLICE_PS;
use tagsieve::jobs::count::OffPeakChoice;
use tagsieve::jobs::inputs::{BlockInputs, DelaySources};
use tagsieve::jobs::pass::PassMode;
use tagsieve::{Channel, Error, Result};

/// Input files of one block.
#[derive(clap::Args, Debug, Clone)]
pub struct InputArgs {
    /// Inputs: CH=PATH or CH:NAME=PATH for a per-channel u64 array (ps), a container
    /// file, or an interleaved-record file (needs --layout).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<String>,
    /// Record layout for interleaved-record inputs: a layout TOML file or a compact spec
    /// (see docs/formats.md).
    #[arg(long, value_name = "FILE|SPEC")]
    pub layout: Option<String>,
    /// Pass over the data: `auto` (stream a single record file with bounded memory, map
    /// everything else whole), `whole` or `stream`.
    #[arg(long = "pass", default_value = "auto", value_name = "MODE")]
    pub pass: String,
    /// Clock file from `clock-fit`: map its second-site channels onto the first site's time
    /// before the coincidence rule (whole passes only; docs/clocks.md).
    #[arg(long, value_name = "FILE")]
    pub clock: Option<PathBuf>,
    #[command(flatten)]
    pub read: super::ReadArgs,
}

impl InputArgs {
    /// The inputs as a job takes them.
    pub fn block_inputs(&self) -> BlockInputs {
        BlockInputs { inputs: self.inputs.clone(), layout: self.layout.clone(), read: self.read.read_options(), clock: self.clock.clone() }
    }
    /// `--pass` as a mode (a clock map turns `auto` into `whole`: [`BlockInputs::mode`]).
    pub fn pass(&self) -> Result<PassMode> {
        pass_mode(&self.pass)
    }
}

/// A `--pass` value.
pub fn pass_mode(s: &str) -> Result<PassMode> {
    PassMode::from_name(s).ok_or_else(|| Error::Usage(format!("--pass {s}: expected auto, whole or stream")))
}

/// Channel pairs and delays.
#[derive(clap::Args, Debug, Clone)]
pub struct PairArgs {
    /// Channel pairs A:B (comma-separated, e.g. `1:3,1:4`); default: every pair.
    #[arg(long, value_delimiter = ',', value_name = "A:B")]
    pub pairs: Vec<String>,
    /// Delay of a channel in ps (how late its signals arrive), `CH=PS`; repeatable.
    #[arg(long = "delay", value_name = "CH=PS")]
    pub delay: Vec<String>,
    /// Delays file written by `tagsieve scan --reference` (flags given with --delay override it).
    #[arg(long, value_name = "FILE")]
    pub delays: Option<PathBuf>,
}

impl PairArgs {
    pub fn pairs(&self) -> Result<Vec<(Channel, Channel)>> {
        parse_pairs(&self.pairs)
    }
    /// The delays file and `--delay` flags, resolved by the job ([`DelaySources::resolve`]).
    pub fn delays(&self) -> DelaySources {
        DelaySources { file: self.delays.clone(), flags: self.delay.clone() }
    }
}

/// `A:B` pairs; a channel paired with itself, or a pair given twice (in either order),
/// is refused.
pub fn parse_pairs(specs: &[String]) -> Result<Vec<(Channel, Channel)>> {
    let mut pairs: Vec<(Channel, Channel)> = Vec::with_capacity(specs.len());
    for s in specs {
        let (a, b) = s.split_once(':').ok_or_else(|| Error::Usage(format!("--pairs {s}: expected A:B, e.g. 1:3")))?;
        let p = |x: &str| x.trim().parse::<Channel>().map_err(|_| Error::Usage(format!("--pairs {s}: '{x}' is not a channel number")));
        let (a, b) = (p(a)?, p(b)?);
        if a == b {
            return Err(Error::Usage(format!("--pairs {s}: a channel cannot be paired with itself; expected two different channels")));
        }
        if let Some(&(x, y)) = pairs.iter().find(|&&(x, y)| (x, y) == (a, b) || (x, y) == (b, a)) {
            return Err(Error::Usage(format!("--pairs {s}: the pair {x}:{y} is given twice; expected each pair once")));
        }
        pairs.push((a, b));
    }
    Ok(pairs)
}

/// Accidental-estimate settings.
#[derive(clap::Args, Debug, Clone)]
pub struct AccidentalArgs {
    /// Offsets from the peak of the off-peak windows for the measured accidentals, ps
    /// (comma-separated); default ten windows side by side, five each side, centred at
    /// ±(max(2 µs, 2W) + k·W), k = 0…4, W = 2⌊w/2⌋+1 ps (so the nearest sits 2 µs away
    /// for w < 1 µs and 2W away above); `sweep` places each window's own.
    #[arg(long, value_delimiter = ',', allow_hyphen_values = true, value_name = "PS")]
    pub acc_offsets_ps: Vec<i64>,
    /// Count no off-peak windows: no measured accidentals (NaN in tables, null in JSON),
    /// only the analytic estimate; a count then takes about half as long.
    #[arg(long, conflicts_with = "acc_offsets_ps")]
    pub no_offpeak: bool,
    /// Time-slice length for the analytic accidentals, s (rates may drift between slices).
    #[arg(long, default_value_t = DEFAULT_SLICE_PS as f64 / 1e12, value_name = "S")]
    pub slice_s: f64,
}

impl AccidentalArgs {
    /// Where the off-peak windows sit: the offsets given, none, or the defaults.
    pub fn offpeak(&self) -> OffPeakChoice {
        if self.no_offpeak {
            OffPeakChoice::None
        } else if self.acc_offsets_ps.is_empty() {
            OffPeakChoice::Default
        } else {
            OffPeakChoice::Given(self.acc_offsets_ps.clone())
        }
    }
    pub fn slice_ps(&self) -> Result<u64> {
        if !(self.slice_s.is_finite() && self.slice_s > 0.0) {
            return Err(Error::Usage(format!("--slice-s {}: must be > 0 s", self.slice_s)));
        }
        Ok((self.slice_s * 1e12).round().max(1.0) as u64)
    }
}

/// The table formats `--format` offers, one for each [`tagsieve::output::Format`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FormatArg {
    /// HDF5 file (groups, one dataset per column, `units` attributes).
    Hdf5,
    /// CSV sections in one file, one per table, attributes as `#` comment lines.
    Csv,
    /// A directory (`-o DIR`) of plain CSV files, one per table at the table's path
    /// (`blocks/ab/coincidences.csv`): one header line of column names, no comments; units,
    /// attributes and provenance in `attributes.json` beside them. Opens as it is in
    /// pandas or a spreadsheet.
    CsvDir,
    /// One JSON object: nested groups, columns as arrays with units.
    Json,
}

impl From<FormatArg> for tagsieve::output::Format {
    fn from(f: FormatArg) -> Self {
        use tagsieve::output::Format;
        match f {
            FormatArg::Hdf5 => Format::Hdf5,
            FormatArg::Csv => Format::Csv,
            FormatArg::CsvDir => Format::CsvDir,
            FormatArg::Json => Format::Json,
        }
    }
}

/// Where tables go.
#[derive(clap::Args, Debug, Clone)]
pub struct OutputArgs {
    /// Output file for the tables (`-` = stdout, CSV/JSON only); a directory with
    /// `--format csv-dir`.
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    pub output: Option<PathBuf>,
    /// Table format.
    #[arg(long, value_enum, default_value_t = FormatArg::Hdf5)]
    pub format: FormatArg,
    /// Replace existing output files (the tables, and a delays file written by scan).
    #[arg(long)]
    pub force: bool,
}

impl OutputArgs {
    /// Tables go to stdout (`-o -`): then the human summary is left out.
    pub fn to_stdout(&self) -> bool {
        self.output.as_deref().is_some_and(|p| p.as_os_str() == "-")
    }

    /// Fail early (before any long pass) on an output that cannot be written.
    pub fn precheck(&self) -> Result<()> {
        match &self.output {
            Some(p) if p.as_os_str() != "-" => precheck_output(p, self.force),
            _ => Ok(()),
        }
    }
}

/// Fail early on an output file that cannot be written: a missing directory, or an
/// existing file without `--force`.
pub fn precheck_output(p: &Path, force: bool) -> Result<()> {
    let dir = p.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new("."));
    if !dir.is_dir() {
        return Err(Error::Usage(format!("{}: output directory {} does not exist", p.display(), dir.display())));
    }
    if p.exists() && !force {
        return Err(Error::OutputExists(p.to_path_buf()));
    }
    Ok(())
}

/// A ps value that must be > 0 (windows, bins, ranges), for clap: zero, a negative value
/// (`-w -5` as well as `-w=-5`) and a non-number each get one clear message.
pub fn positive_ps(s: &str) -> std::result::Result<u64, String> {
    match s.trim().parse::<i128>() {
        Ok(v) if v > 0 && v <= u64::MAX as i128 => Ok(v as u64),
        Ok(v) => Err(format!("{v} ps is not allowed here; expected a whole number of ps > 0, e.g. 500")),
        Err(_) => Err(format!("'{s}' is not a whole number of ps; expected an integer > 0, e.g. 500")),
    }
}

/// The whole command line, for provenance.
pub fn command_line() -> Vec<String> {
    std::env::args().collect()
}

/// Print a JSON value on stdout.
pub fn print_json(v: &serde_json::Value) {
    println!("{}", serde_json::to_string_pretty(v).unwrap_or_default());
}

/// A number of ps in the most readable unit.
pub fn ps(v: f64) -> String {
    tagsieve::units::fmt_duration_ps(v)
}

/// An estimate `value ± sigma` with at least four significant digits of the value (one
/// decimal for values of 1000 and more), both to the same decimals.
pub fn estimate(value: f64, sigma: f64) -> String {
    if value.is_nan() {
        return "—".into();
    }
    let decimals = decimals_for(value);
    format!("{value:.decimals$} ± {sigma:.decimals$}")
}

/// A value with at least four significant digits (one decimal from 1000 up).
pub fn value(v: f64) -> String {
    if v.is_nan() {
        return "—".into();
    }
    let decimals = decimals_for(v);
    format!("{v:.decimals$}")
}

fn decimals_for(v: f64) -> usize {
    let magnitude = if v.abs() > 0.0 && v.is_finite() { v.abs().log10().floor() as i32 } else { 0 };
    (3 - magnitude).clamp(1, 6) as usize
}
