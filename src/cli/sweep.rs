//! `tagsieve sweep`: arguments → a sweep job ([`tagsieve::jobs::sweep`]); its outcome →
//! the tables, plots and the table on stdout.

use super::common::{self, AccidentalArgs, InputArgs, OutputArgs, PairArgs};
use super::Global;
use std::path::PathBuf;
use tagsieve::engine::{self, tables::BlockTables, Criterion};
use tagsieve::jobs::sweep::{self, SweepJob};
use tagsieve::{Error, Result};

#[derive(clap::Args, Debug)]
pub struct Args {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub pairs: PairArgs,
    /// Windows to try, ps (comma-separated). Overrides --from-ps/--to-ps/--step-ps.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, value_delimiter = ',', value_name = "PS")]
    pub windows_ps: Vec<u64>,
    /// Smallest window of the range, ps.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, default_value_t = 100, value_name = "PS")]
    pub from_ps: u64,
    /// Largest window of the range, ps.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, default_value_t = 3000, value_name = "PS")]
    pub to_ps: u64,
    /// Step of the range, ps.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, default_value_t = 100, value_name = "PS")]
    pub step_ps: u64,
    /// How to recommend a window: `net-significance` (largest net/σ_net) or
    /// `peak-fraction` (smallest window holding ≥ --fraction of the widest window's net counts).
    #[arg(long, default_value = "net-significance", value_name = "RULE")]
    pub criterion: String,
    /// Fraction for `--criterion peak-fraction` (dimensionless).
    #[arg(long, default_value_t = 0.99, value_name = "F")]
    pub fraction: f64,
    #[command(flatten)]
    pub acc: AccidentalArgs,
    /// Plot each pair's sweep (`NAME-A-B.png|svg` when there are several pairs).
    #[arg(long, value_name = "FILE")]
    pub plot: Option<PathBuf>,
    /// Block label used as the HDF5 group name.
    #[arg(long, default_value = "block", value_name = "NAME")]
    pub label: String,
    #[command(flatten)]
    pub out: OutputArgs,
}

pub fn criterion(name: &str, fraction: f64) -> Result<Criterion> {
    match name {
        "net-significance" => Ok(Criterion::MaxNetSignificance),
        "peak-fraction" if fraction > 0.0 && fraction <= 1.0 => Ok(Criterion::PeakFraction(fraction)),
        "peak-fraction" => Err(Error::Usage(format!("--fraction {fraction}: must be in (0, 1]"))),
        other => Err(Error::Usage(format!("--criterion {other}: expected net-significance or peak-fraction"))),
    }
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    args.out.precheck()?;
    let windows_ps = if args.windows_ps.is_empty() {
        engine::sweep::window_range(args.from_ps, args.to_ps, args.step_ps)?
    } else {
        args.windows_ps.clone()
    };
    let job = SweepJob {
        ctx: super::context(g),
        label: args.label.clone(),
        criterion: criterion(&args.criterion, args.fraction)?,
        pairs: args.pairs.pairs()?,
        delays: args.pairs.delays(),
        windows_ps,
        offpeak: args.acc.offpeak(),
        slice_ps: args.acc.slice_ps()?,
        inputs: args.input.block_inputs(),
        pass: args.input.pass()?,
        document: super::wants_document(&args.out, g),
    };
    let outcome = sweep::run(&job)?;
    let block = &outcome.block;
    if let Some(plot) = &args.plot {
        for s in &block.sweeps {
            tagsieve::output::plot::plot_sweep(s, &super::per_pair_path(plot, s.a, s.b, block.sweeps.len()), true)?;
        }
    }
    super::emit_document(outcome.document.as_ref(), &args.out, g)?;
    if !args.out.to_stdout() {
        print_sweep(block, g);
    }
    Ok(())
}

fn print_sweep(block: &BlockTables, g: &Global) {
    if g.json {
        return; // the Document went out
    }
    for s in &block.sweeps {
        println!("pair {}:{}  (δ = {}; recommended window {} by {})", s.a, s.b, common::ps(s.rel_delay_ps as f64), common::ps(s.recommended_window_ps as f64), s.criterion);
        // "agreement σ": |acc(analyt) − acc(meas)| over their combined σ (acc_agreement_sigma);
        // not Δ, which is the arrival-time difference everywhere else.
        println!("  {:>10} {:>12} {:>12} {:>12} {:>11} {:>21} {:>8} {:>8}", "window", "coinc", "acc(analyt)", "acc(meas)", "agreement σ", "net ± σ", "net/σ", "CAR");
        for r in &s.rows {
            let mark = if r.window_ps == s.recommended_window_ps { " <" } else { "" };
            println!(
                "  {:>10} {:>12} {:>12} {:>12} {:>11} {:>21} {:>8.1} {:>8.1}{mark}",
                common::ps(r.window_ps as f64),
                r.coincidences,
                common::value(r.acc_analytic.value),
                common::value(r.acc_measured.value),
                if r.acc_agreement_sigma.is_nan() { "—".to_string() } else { format!("{:.1}", r.acc_agreement_sigma.abs()) },
                common::estimate(r.net.value, r.net.sigma),
                r.net.value / r.net.sigma,
                r.car
            );
        }
    }
}
