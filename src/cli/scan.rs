//! `tagsieve scan`: arguments → a scan job ([`tagsieve::jobs::scan`]); its outcome → the
//! tables, the delays file (with --reference), plots and the table on stdout.

use super::common::{self, InputArgs, OutputArgs, PairArgs};
use super::Global;
use std::path::PathBuf;
use tagsieve::engine::{self, tables::BlockTables};
use tagsieve::jobs::scan::{self, ScanJob};
use tagsieve::{Channel, Result};

#[derive(clap::Args, Debug)]
pub struct Args {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub pairs: PairArgs,
    /// Half-range H of the histogram, ps: Δ from −H to +H.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, default_value_t = 100_000, value_name = "PS")]
    pub half_range_ps: u64,
    /// Deprecated spelling of --half-range-ps ("span" is the acquisition span).
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long = "span-ps", value_name = "PS", hide = true, conflicts_with = "half_range_ps")]
    pub span_ps: Option<u64>,
    /// Bin width, ps.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, default_value_t = 20, value_name = "PS")]
    pub bin_ps: u64,
    /// Propose every other channel's delay relative to this channel and write them to
    /// --delays-out. A channel gets a delay only through a pair whose histogram has a peak:
    /// its highest bin stands ≥ 5 σ (Poisson σ of the median bin, the background) and
    /// ≥ 10 counts above the background, within ±H (--half-range-ps). Channels without one are listed
    /// with the reason and left out of the file; a --delay given for such a channel is
    /// written instead.
    #[arg(long, value_name = "CH")]
    pub reference: Option<Channel>,
    /// Delays file to write with --reference (an existing one is kept unless --force).
    #[arg(long, default_value = "delays.toml", value_name = "FILE")]
    pub delays_out: PathBuf,
    /// Plot the histograms: one file per pair (`NAME-A-B.png|svg`).
    #[arg(long, value_name = "FILE")]
    pub plot: Option<PathBuf>,
    /// Logarithmic count axis in plots.
    #[arg(long)]
    pub log: bool,
    /// Block label used as the HDF5 group name.
    #[arg(long, default_value = "block", value_name = "NAME")]
    pub label: String,
    #[command(flatten)]
    pub out: OutputArgs,
}

impl Args {
    /// --half-range-ps, or the value of its deprecated spelling --span-ps (with a warning).
    fn half_range_ps(&self) -> u64 {
        super::deprecated(self.span_ps, "--span-ps", "--half-range-ps").unwrap_or(self.half_range_ps)
    }
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    args.out.precheck()?;
    if args.reference.is_some() {
        common::precheck_output(&args.delays_out, args.out.force)?;
    }
    let job = ScanJob {
        ctx: super::context(g),
        label: args.label.clone(),
        inputs: args.input.block_inputs(),
        pass: args.input.pass()?,
        pairs: args.pairs.pairs()?,
        delays: args.pairs.delays(),
        half_range_ps: args.half_range_ps(),
        bin_ps: args.bin_ps,
        reference: args.reference,
        delays_file: args.delays_out.clone(),
        document: super::wants_document(&args.out, g),
    };
    let outcome = scan::run(&job)?;
    let block = &outcome.block;
    if let Some(d) = &outcome.proposal {
        tagsieve::output::atomic::write_bytes(&args.delays_out, d.to_toml().as_bytes(), args.out.force)?;
    }
    if let Some(plot) = &args.plot {
        for s in &block.scans {
            let path = super::per_pair_path(plot, s.a, s.b, block.scans.len());
            tagsieve::output::plot::plot_scan(s, None, args.log, &path, true)?;
        }
    }
    super::emit_document(outcome.document.as_ref(), &args.out, g)?;
    if !args.out.to_stdout() {
        print_scan(block, outcome.proposal.as_ref(), &args, g);
    } else if let Some(d) = &outcome.proposal {
        // The tables took stdout: the channels without a delay still get said.
        for (c, why) in &d.not_found {
            eprintln!("tagsieve: no delay found for channel {c}: {why}; it is not in {}", args.delays_out.display());
        }
    }
    Ok(())
}

fn print_scan(block: &BlockTables, proposal: Option<&engine::Delays>, args: &Args, g: &Global) {
    if g.json {
        return; // the Document went out, /proposed_delays included
    }
    let bin = block.scans.first().map(|s| common::ps(s.bin_ps as f64)).unwrap_or_default();
    println!("{:>6} {:>14} {:>10} {:>10} {:>12} {:>12}", "pair", "peak Δ", "σ", "FWHM", "height", "background");
    for s in &block.scans {
        match s.peak {
            Some(p) => println!(
                "{:>6} {:>14} {:>10} {:>10} {:>12.0} {:>12.1}",
                format!("{}:{}", s.a, s.b),
                common::ps(p.delay_ps),
                common::ps(p.delay_sigma_ps),
                common::ps(p.fwhm_ps),
                p.height,
                p.background
            ),
            None => println!("{:>6} {:>14}", format!("{}:{}", s.a, s.b), "no peak"),
        }
    }
    if !block.scans.is_empty() {
        println!("  (height and background: counts per {bin} bin)");
    }
    if let Some(d) = proposal {
        println!("delays (reference channel {}), written to {}:", d.reference.unwrap_or(0), args.delays_out.display());
        for (c, v) in &d.by_channel {
            println!("  {c} = {v} ps   ({})", d.obtained.get(c).map(String::as_str).unwrap_or("?"));
        }
        if !d.not_found.is_empty() {
            println!("no delay found (left out of {}; count, sweep and chsh refuse these channels until one is given):", args.delays_out.display());
            for (c, why) in &d.not_found {
                println!("  {c}: {why}");
            }
        }
    }
}
