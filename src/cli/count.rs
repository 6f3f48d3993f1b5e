//! `tagsieve count`: coincidences and accidentals at one window, per block, into tables.

use super::common::{self, AccidentalArgs, InputArgs, OutputArgs, PairArgs};
use super::Global;
use tagsieve::engine::{tables::BlockTables, CountConfig};
use tagsieve::output::{provenance::Provenance, AttrValue};
use tagsieve::units::fmt_count;
use tagsieve::{pipeline, read, Result};

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
    let cfg = CountConfig {
        pairs: args.pairs.pairs()?,
        delays: args.pairs.delays()?,
        window_ps: args.window_ps,
        offsets_ps: args.acc.offsets_ps(args.window_ps),
        slice_ps: args.acc.slice_ps()?,
    };
    tagsieve::engine::rule::check_window(cfg.window_ps, "--window-ps")?;
    let mode = args.input.mode()?;
    let sources = super::open(&args.input, g)?;
    let blocks = vec![pipeline::count_sources(&args.label, &sources, &cfg, mode, g.quiet)?];
    if super::wants_tables(&args.out, g) {
        let prov = provenance(&args, &cfg, &sources)?;
        super::write_tables(&blocks, prov, vec![], &args.out, g)?;
    }
    if !args.out.to_stdout() {
        print_counts(&blocks, g);
    }
    Ok(())
}

fn provenance(args: &Args, cfg: &CountConfig, sources: &[Box<dyn read::TagSource>]) -> Result<Provenance> {
    let mut p = Provenance::new(common::command_line())
        .param("command", AttrValue::Str("count".into()))
        .param("window_ps", AttrValue::U64(cfg.window_ps))
        .param("slice_s", AttrValue::F64(args.acc.slice_s))
        .param_json("acc_offsets_ps", &cfg.offsets_ps)
        .param_json("delays_ps", &cfg.delays.by_channel);
    if let Some(l) = &args.input.layout {
        p = p.param("layout", AttrValue::Str(l.clone()));
    }
    super::add_inputs(p, sources)
}

/// Coincidence tables on stdout as a human table (with `--json` the Document went out
/// instead); counts in groups of three digits, as `inspect` prints them.
pub fn print_counts(blocks: &[BlockTables], g: &Global) {
    if g.json {
        return;
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
