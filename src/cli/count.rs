//! `tagsieve count`: arguments → a count job ([`tagsieve::jobs::count`]); its outcome →
//! the tables file and the table on stdout.

use super::common::{self, AccidentalArgs, InputArgs, OutputArgs, PairArgs};
use super::Global;
use tagsieve::engine::tables::BlockTables;
use tagsieve::jobs::count::{self, CountJob, Sourced};
use tagsieve::units::fmt_count;
use tagsieve::Result;

#[derive(clap::Args, Debug)]
pub struct Args {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub pairs: PairArgs,
    /// Coincidence window w, ps: a pair coincides when 2·|Δ| ≤ w.
    #[arg(value_parser = super::common::positive_ps, allow_negative_numbers = true, long, short = 'w', value_name = "PS")]
    pub window_ps: u64,
    #[command(flatten)]
    pub acc: AccidentalArgs,
    /// Block label used as the HDF5 group name.
    #[arg(long, default_value = "block", value_name = "NAME")]
    pub label: String,
    #[command(flatten)]
    pub out: OutputArgs,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    args.out.precheck()?;
    let job = CountJob {
        ctx: super::context(g),
        label: args.label.clone(),
        inputs: args.input.block_inputs(),
        pass: args.input.pass()?,
        pairs: args.pairs.pairs()?,
        delays: args.pairs.delays(),
        window_ps: Sourced { value: args.window_ps, from: "--window-ps".into() },
        offpeak: args.acc.offpeak(),
        slice_ps: args.acc.slice_ps()?,
        document: super::wants_document(&args.out, g),
    };
    let outcome = count::run(&job)?;
    super::emit_document(outcome.document.as_ref(), &args.out, g)?;
    if !args.out.to_stdout() {
        print_counts(std::slice::from_ref(&outcome.block), g);
    }
    Ok(())
}

/// Coincidence tables on stdout as a human table (with `--json` the Document went out
/// instead); counts in groups of three digits, as `inspect` prints them.
pub fn print_counts(blocks: &[BlockTables], g: &Global) {
    if g.json {
        return; // the Document went out
    }
    for b in blocks {
        println!("{}: live time {}", b.label, b.span.map(|s| common::ps(s.duration_ps() as f64)).unwrap_or_else(|| "none (no events)".into()));
        println!("  {:>5} {:>12} {:>10}", "ch", "singles", "rate");
        for s in &b.singles {
            println!("  {:>5} {:>12} {:>10}", s.channel, fmt_count(s.events), tagsieve::units::fmt_rate_hz(s.rate_hz));
        }
        for r in &b.coincidences {
            println!("  pair {}:{}  delay {}  window {}", r.a, r.b, common::ps(r.rel_delay_ps as f64), common::ps(r.window_ps as f64));
            println!("    coincidences  {}  (heralded A events {})", fmt_count(r.coincidences), fmt_count(r.heralded));
            if r.acc_offsets_ps.is_empty() {
                println!("    accidentals   analytic {}   measured: none (no off-peak windows counted)", common::estimate(r.acc_analytic.value, r.acc_analytic.sigma));
            } else {
                println!(
                    "    accidentals   analytic {}   measured {} ({} off-peak windows)   differ by {:.1} σ",
                    common::estimate(r.acc_analytic.value, r.acc_analytic.sigma),
                    common::estimate(r.acc_measured.value, r.acc_measured.sigma),
                    r.acc_offsets_ps.len(),
                    r.acc_agreement_sigma.abs()
                );
            }
            println!("    net           {} (coincidences − analytic accidentals)   CAR {:.1}", common::estimate(r.net.value, r.net.sigma), r.car);
        }
    }
}
